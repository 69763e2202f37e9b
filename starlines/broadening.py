"""Line-broadening functions: Stark (quasi-static Holtsmark), Voigt, rotation, instrument.

Hydrogen and He II lines are broadened by the linear Stark effect in the quasi-static ion
field. The field strength follows the Holtsmark distribution

    H(beta) = (2 beta / pi) * Int_0^inf x sin(beta x) exp(-x^1.5) dx,   beta = F / F0,

with the normal field F0 = 2.603 e n_e^(2/3) = 1.25e-9 n_e^(2/3) esu (Holtsmark 1919;
standard textbook result, e.g. Gray, *The Observation and Analysis of Stellar Photospheres*,
from memory). One effective Stark component is used per line: a field F shifts it by
Delta-lambda = C F with

    C = lambda^2 * (3/2) e a0 / (h c) * X / Z,   X = n_u^2 - n_l^2,

the linear-Stark shift (3/2) n k e a0 F / Z of hydrogen-like levels with the component
weighting replaced by the single effective number X (an approximation of ours, within a
factor ~1.5 of detailed component sums; absorbed by the calibration). The profile of that
component, H(|dl| / (C F0)) / (2 C F0), is convolved with the Doppler Gaussian; the
convolution is tabulated once (:func:`stark_doppler_profile`). Far wings fall as
|dl|^(-5/2) (H(beta) -> 1.496 beta^(-5/2)), the Holtsmark asymptote.

Rotation uses the classical kernel with linear limb darkening (Gray's textbook, from memory);
macroturbulence is approximated by a Gaussian of 1/e half width zeta (isotropic Gaussian
velocity field), which is cruder than a radial-tangential profile.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy.special import voigt_profile

__all__ = [
    "holtsmark",
    "stark_constant",
    "normal_field",
    "stark_doppler_profile",
    "voigt",
    "rotation_kernel",
    "gaussian_kernel",
]

_E_ESU = 4.80320471e-10  # electron charge (esu), CODATA
_A0_CM = 5.29177210903e-9  # Bohr radius (cm), CODATA
_HC = 6.62607015e-27 * 2.99792458e10  # h c (erg cm)
_HOLTSMARK_TAIL = 1.496  # H(beta) -> 1.496 beta^-2.5 (from memory; matches the integral)


def _holtsmark_direct(beta: np.ndarray) -> np.ndarray:
    x = np.linspace(0.0, 16.0, 16001)
    w = np.full_like(x, x[1] - x[0])
    w[0] = w[-1] = 0.5 * w[0]
    weight = x * np.exp(-(x**1.5)) * w
    return (2.0 * beta / np.pi) * (np.sin(np.outer(beta, x)) @ weight)


@lru_cache(maxsize=1)
def _holtsmark_table() -> tuple[np.ndarray, np.ndarray]:
    beta = np.concatenate([np.linspace(0.0, 10.0, 1001)[:-1], np.geomspace(10.0, 30.0, 200)])
    return beta, _holtsmark_direct(beta)


def holtsmark(beta) -> np.ndarray:
    """Holtsmark distribution H(beta) of the reduced field strength (normalised to 1).

    Computed by quadrature of the Fourier integral for beta <= 30 and by the asymptotic
    series 1.496 beta^-2.5 (1 + 5.107 beta^-1.5) beyond (from memory; continuous to <1% at
    beta = 30).
    """
    b = np.abs(np.asarray(beta, dtype=float))
    tb, th = _holtsmark_table()
    far = _HOLTSMARK_TAIL * np.maximum(b, 1e-30) ** -2.5 * (1 + 5.107 * np.maximum(b, 1) ** -1.5)
    return np.where(b <= tb[-1], np.interp(b, tb, th), far)


def normal_field(n_e) -> np.ndarray:
    """Holtsmark normal field F0 = 2.603 e n_e^(2/3) in esu (n_e in cm^-3)."""
    return 2.603 * _E_ESU * np.asarray(n_e, dtype=float) ** (2.0 / 3.0)


def stark_constant(wavelength: float, n_lower: int, n_upper: int, z: int) -> float:
    """Effective linear-Stark constant C (Angstrom per esu) of a hydrogen-like line.

    Parameters
    ----------
    wavelength : float
        Line wavelength in Angstrom.
    n_lower, n_upper : int
        Principal quantum numbers.
    z : int
        Nuclear charge (1 for H I, 2 for He II).
    """
    lam_cm = wavelength * 1e-8
    x_eff = n_upper**2 - n_lower**2
    return lam_cm**2 * 1.5 * _E_ESU * _A0_CM / _HC * x_eff / z * 1e8


@lru_cache(maxsize=1)
def _stark_doppler_table() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Tabulate Q(u, r) = (Holtsmark profile of unit scale) * (Gaussian of sigma r)."""
    log_r = np.linspace(-2.0, 2.0, 41)
    u = np.concatenate([np.linspace(0.0, 20.0, 401)[:-1], np.geomspace(20.0, 4000.0, 160)])
    table = np.empty((log_r.size, u.size))
    for i, lr in enumerate(log_r):
        r = 10.0**lr
        h = min(r / 6.0, 0.02)
        half = max(60.0, 12.0 * r)
        grid = np.arange(-half, half + h / 2, h)
        prof = 0.5 * holtsmark(grid)
        kern_x = np.arange(-6 * r, 6 * r + h / 2, h)
        kern = np.exp(-0.5 * (kern_x / r) ** 2)
        kern /= kern.sum()
        conv = _fft_convolve(prof, kern)
        inside = np.interp(u, grid[grid >= 0], conv[grid >= 0])
        tail = 0.5 * holtsmark(u)  # far from the core the Gaussian no longer matters
        table[i] = np.where(u < 0.8 * half, inside, tail)
    return log_r, u, np.log(np.maximum(table, 1e-300))


def _fft_convolve(a: np.ndarray, kern: np.ndarray) -> np.ndarray:
    from scipy.signal import fftconvolve

    return fftconvolve(a, kern, mode="same")


def stark_doppler_profile(dl, stark_width, doppler_sigma) -> np.ndarray:
    """Holtsmark (one effective component) convolved with a Doppler Gaussian, per Angstrom.

    Parameters
    ----------
    dl : array
        Distance from line centre (Angstrom); broadcast against the widths.
    stark_width : array
        C F0 (Angstrom), the shift at the normal field.
    doppler_sigma : array
        Gaussian sigma (Angstrom) of the thermal + microturbulent motions.

    Returns
    -------
    numpy.ndarray
        Profile normalised to unit area over wavelength (Angstrom^-1).
    """
    log_r_tab, u_tab, log_q = _stark_doppler_table()
    a = np.asarray(stark_width, dtype=float)
    u = np.abs(np.asarray(dl, dtype=float)) / a
    log_r = np.log10(np.asarray(doppler_sigma, dtype=float) / a)
    u, log_r = np.broadcast_arrays(u, log_r)
    # bilinear interpolation in (log r, u) of log Q
    fr = np.clip((log_r - log_r_tab[0]) / (log_r_tab[1] - log_r_tab[0]), 0, log_r_tab.size - 1.001)
    i0 = fr.astype(int)
    wr = fr - i0
    j = np.clip(np.searchsorted(u_tab, u) - 1, 0, u_tab.size - 2)
    wu = np.clip((u - u_tab[j]) / (u_tab[j + 1] - u_tab[j]), 0.0, 1.0)
    q = (
        (1 - wr) * ((1 - wu) * log_q[i0, j] + wu * log_q[i0, j + 1])
        + wr * ((1 - wu) * log_q[i0 + 1, j] + wu * log_q[i0 + 1, j + 1])
    )
    prof = np.exp(q) / a
    # Doppler-dominated regime beyond the table: the Gaussian plus the Holtsmark tail
    big = log_r > log_r_tab[-1]
    if np.any(big):
        sig = np.broadcast_to(np.asarray(doppler_sigma, dtype=float), u.shape)
        aa = np.broadcast_to(a, u.shape)
        dlb = u * aa
        gauss = np.exp(-0.5 * (dlb / sig) ** 2) / (np.sqrt(2 * np.pi) * sig)
        tail = 0.5 * holtsmark(np.maximum(u, 3 * sig / aa)) / aa
        prof = np.where(big, gauss + np.where(u * aa > 3 * sig, tail, 0.0), prof)
    return prof


def voigt(dl, doppler_sigma, lorentz_hwhm) -> np.ndarray:
    """Voigt profile per Angstrom (Gaussian sigma and Lorentzian HWHM in Angstrom)."""
    return voigt_profile(dl, doppler_sigma, lorentz_hwhm)


def rotation_kernel(step_kms: float, vsini: float, limb_darkening: float = 0.6) -> np.ndarray:
    """Rotational broadening kernel on a velocity grid of ``step_kms`` (normalised to 1).

    G(v) = [2 (1 - eps) sqrt(1 - x^2) + (pi eps / 2)(1 - x^2)] / [pi vsini (1 - eps/3)],
    x = v / vsini, with linear limb darkening eps (0.6 is a common choice for the blue
    optical; common practice).
    """
    if vsini <= 0:
        return np.ones(1)
    n = int(np.ceil(vsini / step_kms))
    v = np.arange(-n, n + 1) * step_kms
    x2 = np.clip(1.0 - (v / vsini) ** 2, 0.0, None)
    eps = limb_darkening
    g = 2 * (1 - eps) * np.sqrt(x2) + 0.5 * np.pi * eps * x2
    if g.sum() <= 0:  # vsini below half a step
        return np.ones(1)
    return g / g.sum()


def gaussian_kernel(step: float, sigma: float) -> np.ndarray:
    """Gaussian kernel of standard deviation ``sigma`` on a grid of ``step`` (same unit)."""
    if sigma <= 0.1 * step:
        return np.ones(1)
    n = int(np.ceil(5 * sigma / step))
    x = np.arange(-n, n + 1) * step
    g = np.exp(-0.5 * (x / sigma) ** 2)
    return g / g.sum()
