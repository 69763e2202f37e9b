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
    "residual_profiles",
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


def _doppler_sigma(datas, waves: np.ndarray, atm: Atmosphere) -> np.ndarray:
    """Gaussian sigma (Angstrom) of thermal + microturbulent motions, shape (n_lines, n_depth)."""
    mass = np.array([ELEMENT_MASS[d.element] for d in datas]) * _AMU
    # squared 1/e Doppler velocity (cm/s)^2: thermal plus microturbulent
    v2 = 2.0 * K_B * atm.temperature[None, :] / mass[:, None] + (
        microturbulence(atm.logg) * 1e5
    ) ** 2
    return waves[:, None] * np.sqrt(v2 / 2.0) / C_CGS


def _profiles(kind: str, datas, waves: np.ndarray, dl: np.ndarray, atm: Atmosphere):
    """Absorption profiles phi (1/Angstrom) of one kind of line, shape (n_lines, n_dl, n_depth)."""
    sigma = _doppler_sigma(datas, waves, atm)[:, None, :]
    x = dl[:, :, None]
    if kind == "hydrogenic":
        c = np.array([
            stark_constant(w, d.n_lower, d.n_upper, 1 if d.element == "H" else 2)
            for d, w in zip(datas, waves)
        ])
        width = c[:, None] * normal_field(atm.n_e)[None, :]
        return stark_doppler_profile(x, width[:, None, :], sigma)
    if kind == "hei":
        hwhm = np.array([d.stark_hwhm for d in datas])
        gamma = hwhm[:, None] * atm.n_e[None, :] / 1e16
    else:  # radiative + small quadratic Stark (from memory)
        gamma = np.broadcast_to(1e-4 + 0.002 * atm.n_e / 1e16, (len(datas), atm.n_e.size))
    return voigt(x, sigma, gamma[:, None, :])


def _center_opacity(data: LineData, wavelength: float, atm: Atmosphere) -> np.ndarray:
    """Line opacity per unit profile (cm^-1 Angstrom) at each depth, with stimulated emission."""
    lam_cm = wavelength * 1e-8
    stim = 1.0 - np.exp(-H_PLANCK * C_CGS / (lam_cm * K_B * atm.temperature))
    f_value = 10.0**data.log_gf / data.g_lower
    return _PI_RE * lam_cm**2 * f_value * lower_level_density(data, atm) * stim * 1e8


#: Line source-function depression S_line = beta(tau) B with
#: beta = 1 - (1 - BETA_SURFACE) exp(-tau / BETA_DEPTH) (tau = grey continuum optical depth):
#: a parametrised stand-in for the non-LTE drop of the line source function in the outer
#: layers (b_u / b_l < 1), which deepens the cores of strong lines and leaves weak lines and
#: wings (formed deep) nearly unchanged. Applied to H I and He II only (LTE cores of the
#: Balmer lines are far too shallow: residual 0.7 against ~0.5 observed at 2.5 A in MILES
#: B stars); values empirical (see grids/README.md).
BETA_SURFACE = {"hydrogenic": 0.5, "hei": 1.0, "metal": 1.0}
BETA_DEPTH = 0.01


def source_depression(tau: np.ndarray, kind: str) -> np.ndarray:
    """beta(tau): ratio of the line source function to the Planck function."""
    return 1.0 - (1.0 - BETA_SURFACE[kind]) * np.exp(-tau / BETA_DEPTH)


def residual_profiles(lines, atm: Atmosphere) -> list[tuple[np.ndarray, np.ndarray]]:
    """Residual flux R(|d lambda|) of isolated lines, computed in batches of one profile kind.

    Parameters
    ----------
    lines : sequence of (LineData, float)
        Atomic data and rest wavelength (Angstrom) of each line.
    atm : Atmosphere
        Model atmosphere.

    Returns
    -------
    list of (dl, residual)
        For each line, the sampling |d lambda| (Angstrom, :func:`half_profile_grid`) and
        F_line / F_continuum there.
    """
    out: list = [None] * len(lines)
    groups: dict[str, list[int]] = {}
    for k, (data, _) in enumerate(lines):
        groups.setdefault(data.profile, []).append(k)
    tau = atm.tau
    dtau = np.diff(tau)
    for kind, idx in groups.items():
        datas = [lines[k][0] for k in idx]
        waves = np.array([float(lines[k][1]) for k in idx])
        dl = np.array([half_profile_grid(d) for d in datas])
        kc = np.array([_center_opacity(d, w, atm) for d, w in zip(datas, waves)])
        eta = kc[:, None, :] * _profiles(kind, datas, waves, dl, atm) / atm.kappa
        one_eta = 1.0 + eta
        first = one_eta[..., :1] * tau[0]
        tau_line = np.concatenate(
            [first, first + np.cumsum(0.5 * (one_eta[..., 1:] + one_eta[..., :-1]) * dtau,
                                      axis=-1)],
            axis=-1,
        )
        source = np.array([_planck_shape(w, atm.temperature) for w in waves])
        beta = source_depression(atm.tau, kind)
        f_line = emergent_flux(source[:, None, :] * (1.0 + eta * beta) / one_eta, tau_line)
        f_cont = emergent_flux(source, np.broadcast_to(tau, source.shape))
        resid = f_line / f_cont[:, None]
        for j, k in enumerate(idx):
            out[k] = (dl[j], resid[j])
    return out


def residual_profile(
    data: LineData, wavelength: float, atm: Atmosphere
) -> tuple[np.ndarray, np.ndarray]:
    """Residual flux of one isolated line (see :func:`residual_profiles`)."""
    return residual_profiles([(data, wavelength)], atm)[0]
