"""A plane-parallel grey LTE model atmosphere for hot stars (H + He, metals as traces).

Ingredients (all standard textbook physics; numbers from memory unless stated):

* Temperature: grey atmosphere with the Hopf function, T^4 = 3/4 Teff^4 (tau + q(tau)),
  q(tau) ~ 0.7104 - 0.1331 exp(-3.4488 tau) (a common fit to the exact Hopf function).
* Pressure: hydrostatic equilibrium dP/dtau = g / kappa, gas pressure only (radiation
  pressure is left out, so log g is the gravity that sets the gas pressure scale; see
  grids/README.md for what this means for supergiants).
* Equation of state: ideal gas of H and He with Saha ionization (H I/II, He I/II/III).
* Continuum opacity at 4500 Angstrom, used as the grey opacity: Thomson scattering plus
  hydrogenic bound-free (Kramers cross-section, Gaunt factor 1) from the levels of H I with
  n >= 3 and of He II with n >= 5 that can be ionized at 4500 Angstrom, plus hydrogenic
  free-free of H II, He II and He III, with stimulated emission.

The model is a set of arrays on a fixed log-spaced optical-depth grid; it is deterministic
and takes ~1 ms to compute.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from starlines.atomic import IONIZATION_EV, partition_function

__all__ = ["Atmosphere", "grey_atmosphere", "saha_fractions", "TAU", "REFERENCE_WAVELENGTH"]

K_B = 1.380649e-16  # erg/K
K_EV = 8.617333262e-5  # eV/K
M_H = 1.6735575e-24  # g, hydrogen atom mass
SIGMA_T = 6.6524587e-25  # cm^2, Thomson cross-section
SAHA_C = 2.4146830e15  # (2 pi m_e k / h^2)^(3/2) in cm^-3 K^-3/2 (CODATA-derived)
H_PLANCK = 6.62607015e-27
C_CGS = 2.99792458e10

#: Optical-depth grid (grey = continuum optical depth at the reference wavelength).
TAU = np.geomspace(1e-5, 40.0, 34)

#: Wavelength (Angstrom) at which the continuum opacity is evaluated for the grey model.
REFERENCE_WAVELENGTH = 4500.0

_PRESSURE_ITERATIONS = 8


@dataclass(frozen=True)
class Atmosphere:
    """Depth structure of a model. Arrays are on :data:`TAU`.

    Attributes
    ----------
    teff, logg, he : float
        Parameters (K, cgs, He/H by number).
    tau, temperature, pressure, n_e, n_nuclei, kappa : numpy.ndarray
        Optical depth, T (K), gas pressure (dyn cm^-2), electron and nuclei densities
        (cm^-3), continuum opacity per cm (cm^-1).
    fractions : dict
        element -> array (n_stages + 1, n_depth) of ionization fractions.
    """

    teff: float
    logg: float
    he: float
    tau: np.ndarray
    temperature: np.ndarray
    pressure: np.ndarray
    n_e: np.ndarray
    n_nuclei: np.ndarray
    kappa: np.ndarray
    fractions: dict


def hopf_temperature(tau: np.ndarray, teff: float) -> np.ndarray:
    """Grey-atmosphere temperature with the approximate Hopf function."""
    q = 0.7104 - 0.1331 * np.exp(-3.4488 * tau)
    return teff * (0.75 * (tau + q)) ** 0.25


def _saha_factors(element: str, t: np.ndarray) -> list[np.ndarray]:
    """log of n_{j+1} n_e / n_j for each ionization step (LTE Saha equation)."""
    chis = IONIZATION_EV[element]
    u = [partition_function(element, j, t) for j in range(len(chis) + 1)]
    return [
        np.log(2.0 * u[j + 1] / u[j] * SAHA_C * t**1.5) - chi / (K_EV * t)
        for j, chi in enumerate(chis)
    ]


def _fractions(factors: list[np.ndarray], log_ne: np.ndarray) -> np.ndarray:
    log_ratio = [np.zeros_like(log_ne)]
    for lf in factors:
        log_ratio.append(log_ratio[-1] + lf - log_ne)
    lr = np.array(log_ratio)
    frac = np.exp(lr - lr.max(axis=0))
    return frac / frac.sum(axis=0)


def saha_fractions(element: str, temperature, n_e) -> np.ndarray:
    """Ionization fractions of all stages of ``element`` (LTE Saha equation).

    Returns
    -------
    numpy.ndarray
        Shape (n_stages + 1, n_depth); row j is the fraction in stage j (0 = neutral).
    """
    t = np.asarray(temperature, dtype=float)
    return _fractions(_saha_factors(element, t), np.log(np.asarray(n_e, dtype=float)))


def _electron_density(p_gas, t, he, factors=None) -> np.ndarray:
    """Solve P = (N + n_e) k T with Saha ionization of H and He, by bisection in log n_e.

    ``factors`` are the Saha factors (:func:`_saha_factors`) of H and He at ``t`` when the
    caller already has them.
    """
    n_tot = p_gas / (K_B * t)
    f_h, f_he = factors if factors is not None else (_saha_factors("H", t),
                                                     _saha_factors("He", t))
    lo = np.log(n_tot * 1e-12)
    hi = np.log(n_tot * 0.75)
    for _ in range(32):
        mid = 0.5 * (lo + hi)
        # closed forms of the fractions: H II / H = x / (1 + x); He with r1 = He II / He I
        # and r2 = He III / He I (exponents clipped: only ratios of them matter)
        x = np.exp(np.clip(f_h[0] - mid, -700.0, 700.0))
        l1 = f_he[0] - mid
        l2 = l1 + f_he[1] - mid
        top = np.maximum(np.maximum(l1, l2), 0.0)
        e0, e1, e2 = np.exp(-top), np.exp(l1 - top), np.exp(l2 - top)
        charge = (x / (1.0 + x) + he * (e1 + 2.0 * e2) / (e0 + e1 + e2)) / (1.0 + he)
        ne = np.exp(mid)
        excess = ne - (n_tot - ne) * charge
        hi = np.where(excess > 0, mid, hi)
        lo = np.where(excess > 0, lo, mid)
    return np.exp(0.5 * (lo + hi))


def continuum_opacity(t, n_e, n_h, he, fh, fhe, wavelength=REFERENCE_WAVELENGTH) -> np.ndarray:
    """Continuum absorption + scattering coefficient (cm^-1) at ``wavelength`` (Angstrom)."""
    nu = C_CGS / (wavelength * 1e-8)
    stim = 1.0 - np.exp(-H_PLANCK * nu / (K_B * t))
    kappa = SIGMA_T * n_e
    # hydrogenic bound-free, Kramers cross-section sigma_n = 2.815e29 Z^4 / (n^5 nu^3)
    for z, n_ion, n_min, chi in (
        (1, n_h * fh[1], 3, IONIZATION_EV["H"][0]),
        (2, he * n_h * fhe[2], 5, IONIZATION_EV["He"][1]),
    ):
        for n in range(n_min, 16):
            binding = chi / n**2
            if H_PLANCK * nu / 1.602176634e-12 < binding:
                continue
            pop = n_ion * n_e * n**2 / (SAHA_C * t**1.5) * np.exp(binding / (K_EV * t))
            kappa = kappa + pop * 2.815e29 * z**4 / (n**5 * nu**3) * stim
    # hydrogenic free-free: 3.69e8 Z^2 n_e n_ion T^-1/2 nu^-3 (Gaunt 1)
    ions = n_h * (fh[1] + he * (fhe[1] + 4.0 * fhe[2]))
    kappa = kappa + 3.69e8 * n_e * ions / np.sqrt(t) / nu**3 * stim
    return kappa


def grey_atmosphere(teff: float, logg: float, he: float) -> Atmosphere:
    """Compute the grey LTE model for ``teff`` (K), ``logg`` (cgs) and He/H ``he``."""
    tau = TAU
    temp = hopf_temperature(tau, teff)
    g = 10.0**logg
    mu = (1.0 + 4.0 * he) / (1.0 + he) * M_H  # mass per nucleus (metals neglected)

    factors = (_saha_factors("H", temp), _saha_factors("He", temp))

    def kappa_of(p, t):  # always called with t = temp, the temperature of the factors
        ne = _electron_density(p, t, he, factors)
        n_nuc = p / (K_B * t) - ne
        n_h = n_nuc / (1.0 + he)
        fh = _fractions(factors[0], np.log(ne))
        fhe = _fractions(factors[1], np.log(ne))
        k = continuum_opacity(t, ne, n_h, he, fh, fhe)
        return k / (n_nuc * mu), ne, n_nuc, k, fh, fhe

    # integrate dP/dtau = g / kappa_mass by damped fixed-point iteration on the column,
    # starting from pure electron scattering (P = g tau / kappa_es)
    pressure = g * tau * mu / SIGMA_T
    for _ in range(_PRESSURE_ITERATIONS):
        k_mass = kappa_of(pressure, temp)[0]
        inv = 1.0 / k_mass
        top = g * tau[0] * inv[0]
        new = top + g * np.concatenate(
            [[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(tau))]
        )
        pressure = np.sqrt(pressure * new)  # geometric damping: kappa grows with P
    _, ne, n_nuc, kappa, fh, fhe = kappa_of(pressure, temp)
    fractions = {"H": fh, "He": fhe}
    for el in ("C", "N", "O", "Mg", "Si"):
        fractions[el] = saha_fractions(el, temp, ne)
    return Atmosphere(teff, logg, he, tau, temp, pressure, ne, n_nuc, kappa, fractions)
