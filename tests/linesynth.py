"""Injected-signal spectra for the continuum, measurement and v sin i tests.

Everything here is analytic: unit-area Gaussian, Voigt (scipy) and rotation-broadened
profiles scaled to a stated equivalent width, on a stated continuum, with seeded noise.
The injected equivalent widths are the reference values of the tests.
"""

from __future__ import annotations

import numpy as np
from scipy.special import voigt_profile

from starlines.lines import line
from starlines.spectrum import ObservationMeta, Spectrum
from starlines.vsini import rotation_kernel

C_KMS = 299792.458


def gauss(x, mu, fwhm):
    s = fwhm / 2.3548200450309493
    return np.exp(-0.5 * ((x - mu) / s) ** 2) / (s * np.sqrt(2 * np.pi))


def voigt(x, mu, sigma, gamma):
    return voigt_profile(x - mu, sigma, gamma)


def rotational(x, mu, fwhm_instr, vsini, epsilon=0.6):
    """Unit-area Gaussian (instrument) convolved with the rotation kernel, on grid ``x``."""
    dx = x[1] - x[0]
    g = gauss(x, mu, fwhm_instr)
    if vsini <= 0:
        return g
    dl = mu * vsini / C_KMS
    n = int(np.ceil(dl / dx)) + 1
    k = rotation_kernel(np.arange(-n, n + 1) * dx, dl, epsilon)
    k /= k.sum()
    return np.convolve(g, k, mode="same")


def hot_continuum(w, slope=-3.0, curve=0.15):
    """A flux-calibrated-looking continuum: steep blue power law plus a smooth bend."""
    t = (w - w.mean()) / (w.max() - w.min())
    return 5.0 * (w / 4500.0) ** slope * (1.0 + curve * t**2 - 0.05 * t**3)


def b_star_lines(w, medium="air", fwhm=2.5, v=0.0, balmer_scale=1.0, extra=None):
    """Normalized absorption of a B1-type star: Voigt Balmer lines, Gaussian He I/metal lines.

    Returns (normalized flux, dict of injected total EW per line id, dict of profiles).
    """
    shift = 1.0 + v / C_KMS
    sig = fwhm / 2.3548200450309493
    balmer = {  # id: (EW, Lorentz HWHM): invented, B-dwarf-like magnitudes
        "HI4861": (7.0, 2.4), "HI4340": (7.5, 2.6), "HI4102": (7.5, 2.6),
        "HI3970": (6.5, 2.2), "HI3889": (5.0, 1.8),
    }
    narrow = {  # id: EW
        "HeI4026": 0.9, "HeI4144": 0.6, "HeI4388": 0.7, "HeI4471": 1.1, "HeI4922": 0.8,
        "HeI5016": 0.3, "SiIII4553": 0.25, "MgII4481": 0.15, "CII4267": 0.12,
        "HeI4009": 0.4, "HeI4121": 0.3, "HeI4713": 0.35,
    }
    if extra:
        narrow.update(extra)
    absorbed = np.zeros_like(w)
    ews, profiles = {}, {}
    for ident, (ew, gam) in balmer.items():
        lam = line(ident).wavelength(medium) * shift
        if not (w[0] - 100 < lam < w[-1] + 100):
            continue
        p = ew * balmer_scale * voigt(w, lam, sig, gam)
        absorbed += p
        ews[ident], profiles[ident] = ew * balmer_scale, p
    for ident, ew in narrow.items():
        lam = line(ident).wavelength(medium) * shift
        if not (w[0] - 20 < lam < w[-1] + 20):
            continue
        p = ew * gauss(w, lam, fwhm)
        absorbed += p
        ews[ident], profiles[ident] = ew, p
    return 1.0 - absorbed, ews, profiles


def make_spectrum(w, norm, cont=None, snr=200.0, seed=1, with_err=False, medium="air",
                  resolution=None):
    """Spectrum with flux = norm * cont plus Gaussian noise of continuum S/N ``snr``."""
    rng = np.random.default_rng(seed)
    cont = np.ones_like(w) if cont is None else cont
    sigma = cont / snr
    flux = norm * cont + (rng.normal(0.0, 1.0, w.size) * sigma if np.isfinite(snr) else 0.0)
    return Spectrum(w, flux, uncertainty=sigma if with_err else None, medium=medium,
                    meta=ObservationMeta(resolution_fwhm=resolution))
