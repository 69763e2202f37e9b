"""LTE line formation in the grey model atmosphere: residual-flux profiles of single lines.

For each line the lower-level population at every depth follows from the Saha-Boltzmann
equation relative to the ground state of the next ion,

    n_l = n_{ion+1} n_e (g_l / 2 U_{ion+1}) (h^2 / 2 pi m_e k T)^(3/2) exp(E_bind / kT),

the line opacity is (pi e^2 / m_e c^2) lambda^2 f n_l (1 - exp(-h nu / kT)) phi(lambda), and
the emergent flux F = 2 Int S(t) E2(t) dt is integrated exactly for a source function that is
linear in each optical-depth interval (S = Planck function, LTE; continuum from the same
grey opacity). The residual flux R = F_line / F_continuum is computed on a half-profile
sampling (|d lambda| >= 0); profiles are symmetric.

Thermal plus microturbulent Doppler broadening everywhere; linear Stark (Holtsmark) for
H I and He II; an electron-impact Lorentzian for He I; a small damping width for metals.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy.special import expn

from starlines.atmosphere import C_CGS, H_PLANCK, K_B, K_EV, SAHA_C, Atmosphere
from starlines.atomic import ABUNDANCE, ELEMENT_MASS, LineData, partition_function
from starlines.broadening import normal_field, stark_constant, stark_doppler_profile, voigt

__all__ = [
    "MICROTURBULENCE",
    "microturbulence",
    "half_profile_grid",
    "residual_profile",
    "emergent_flux",
]

#: Microturbulence (km/s) of dwarfs and giants (log g >= 3.75): 10 km/s, a typical value
#: adopted for O and early-B stars (common practice).
MICROTURBULENCE = 10.0

#: Microturbulence (km/s) reached at log g <= 2.75: supergiants need ~15-20 km/s in
#: analyses of B supergiants (from memory); linear in log g in between.
MICROTURBULENCE_SUPERGIANT = 20.0


def microturbulence(logg: float) -> float:
    """Microturbulent velocity (km/s) adopted for a model of gravity ``logg``."""
    w = min(max((3.75 - logg) / 1.0, 0.0), 1.0)
    return MICROTURBULENCE + w * (MICROTURBULENCE_SUPERGIANT - MICROTURBULENCE)

_PI_RE = 8.8540e-13  # pi e^2 / (m_e c^2) in cm (classical electron radius times pi)
_AMU = 1.66053907e-24


@lru_cache(maxsize=1)
def _en_table() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    t = np.concatenate([[0.0], np.geomspace(1e-9, 80.0, 4000)])
    return t, expn(3, t), expn(4, t)


def emergent_flux(source: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Astrophysical flux 2 Int S E2 dt for S linear between depth points.

    Parameters
    ----------
    source : array (..., n_depth)
        Source function at the depth points.
    tau : array (..., n_depth)
        Monochromatic optical depth, increasing, tau[..., 0] > 0 (S is taken constant above).
    """
    tt, e3t, e4t = _en_table()
    e3 = np.interp(tau, tt, e3t)
    e4 = np.interp(tau, tt, e4t)
    s = np.broadcast_to(source, tau.shape)
    b = np.diff(s, axis=-1) / np.diff(tau, axis=-1)
    t0, t1 = tau[..., :-1], tau[..., 1:]
    part = (s[..., :-1] - b * t0) * (e3[..., :-1] - e3[..., 1:]) + b * (
        (t0 * e3[..., :-1] + e4[..., :-1]) - (t1 * e3[..., 1:] + e4[..., 1:])
    )
    top = s[..., 0] * (0.5 - e3[..., 0])
    bottom = s[..., -1] * e3[..., -1] + b[..., -1] * e4[..., -1]
    return 2.0 * (top + part.sum(axis=-1) + bottom)


def half_profile_grid(data: LineData) -> np.ndarray:
    """Sampling |d lambda| (Angstrom) of the half profile: dense in the core, sparse in wings."""
    if data.profile == "hydrogenic":
        width, core, n = (_hydrogenic_half_width(data), 0.04, 48)
    elif data.profile == "hei":
        width, core, n = (25.0, 0.04, 34)
    else:
        width, core, n = (4.0, 0.03, 24)
    return core * np.sinh(np.linspace(0.0, np.arcsinh(width / core), n))


def _hydrogenic_half_width(data: LineData) -> float:
    """Half width (Angstrom) over which a hydrogenic line is integrated.

    Balmer lines: 60 Angstrom for H-alpha to H-delta, less for the crowded higher members
    (0.45 of the distance to the next member); He II lines: 25 Angstrom (n_lower = 4) and
    40 Angstrom (4686).
    """
    if data.element == "He":
        return 40.0 if data.n_lower == 3 else 25.0
    nu = data.n_upper
    if nu <= 6:
        return 60.0
    lam = 3646.0 / (1.0 - 4.0 / nu**2)
    lam_next = 3646.0 / (1.0 - 4.0 / (nu + 1) ** 2)
    return 0.45 * (lam - lam_next)


def _planck_shape(wavelength: float, temperature: np.ndarray) -> np.ndarray:
    x = H_PLANCK * C_CGS / (wavelength * 1e-8 * K_B * temperature)
    return 1.0 / np.expm1(x)


def lower_level_density(data: LineData, atm: Atmosphere) -> np.ndarray:
    """Number density (cm^-3) of the lower level of the line at each depth (LTE)."""
    t = atm.temperature
    n_h = atm.n_nuclei / (1.0 + atm.he)
    if data.element == "H":
        abundance = 1.0
    elif data.element == "He":
        abundance = atm.he
    else:
        abundance = 10.0 ** (ABUNDANCE[data.element] - 12.0)
    n_next = n_h * abundance * atm.fractions[data.element][data.stage + 1]
    u_next = partition_function(data.element, data.stage + 1, t)
    return (
        n_next * atm.n_e * data.g_lower / (2.0 * u_next)
        / (SAHA_C * t**1.5) * np.exp(data.binding_ev / (K_EV * t))
    )


def _profile(data: LineData, wavelength: float, dl: np.ndarray, atm: Atmosphere) -> np.ndarray:
    """Absorption profile phi (Angstrom^-1), shape (n_dl, n_depth)."""
    t = atm.temperature
    mass = ELEMENT_MASS[data.element] * _AMU
    # squared 1/e Doppler velocity (cm/s)^2: thermal plus microturbulent
    v2 = 2.0 * K_B * t / mass + (microturbulence(atm.logg) * 1e5) ** 2
    sigma = wavelength * np.sqrt(v2 / 2.0) / C_CGS
    x = dl[:, None]
    if data.profile == "hydrogenic":
        z = 1 if data.element == "H" else 2
        width = stark_constant(wavelength, data.n_lower, data.n_upper, z) * normal_field(atm.n_e)
        return stark_doppler_profile(x, width[None, :], sigma[None, :])
    if data.profile == "hei":
        gamma = data.stark_hwhm * atm.n_e / 1e16
    else:
        gamma = 1e-4 + 0.002 * atm.n_e / 1e16  # radiative + small quadratic Stark (memory)
    return voigt(x, sigma[None, :], gamma[None, :])


def residual_profile(
    data: LineData, wavelength: float, atm: Atmosphere, dl: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Residual flux R(|d lambda|) of one isolated line.

    Parameters
    ----------
    data : LineData
        Atomic data of the line.
    wavelength : float
        Rest wavelength (Angstrom).
    atm : Atmosphere
        Model atmosphere.
    dl : array, optional
        Distances from line centre (Angstrom, >= 0); default :func:`half_profile_grid`.

    Returns
    -------
    dl, residual : numpy.ndarray
        Sampling and F_line / F_continuum at each sample.
    """
    if dl is None:
        dl = half_profile_grid(data)
    t = atm.temperature
    lam_cm = wavelength * 1e-8
    stim = 1.0 - np.exp(-H_PLANCK * C_CGS / (lam_cm * K_B * t))
    f_value = 10.0**data.log_gf / data.g_lower
    n_low = lower_level_density(data, atm)
    kappa_center = _PI_RE * lam_cm**2 * f_value * n_low * stim * 1e8  # times phi [1/Angstrom]
    eta = kappa_center[None, :] * _profile(data, wavelength, dl, atm) / atm.kappa[None, :]
    tau = atm.tau
    dtau = np.diff(tau)
    one_eta = 1.0 + eta
    tau_line = np.concatenate(
        [one_eta[:, :1] * tau[0],
         one_eta[:, :1] * tau[0]
         + np.cumsum(0.5 * (one_eta[:, 1:] + one_eta[:, :-1]) * dtau, axis=1)],
        axis=1,
    )
    source = _planck_shape(wavelength, t)
    f_line = emergent_flux(source[None, :], tau_line)
    f_cont = emergent_flux(source, tau)
    return dl, f_line / f_cont
