"""Wavelengths of hydrogen-like ions (H I, He II) from CODATA constants.

The Bohr/Rydberg formula with a reduced-mass Rydberg constant,

    1/lambda = R_M Z^2 (1/n_l^2 - 1/n_u^2),   R_M = R_inf / (1 + m_e / M_nucleus),

places a line to about 0.05 Angstrom. To reach the 0.01 Angstrom of laboratory lists, each
level is split by the Dirac fine structure (same reduced mass), and the line is placed at the
strength-weighted centroid of its fine-structure components. The component strength is

    S = (2j+1)(2j'+1) {l j 1/2; j' l' 1}^2 max(l, l') |<n l | r | n' l'>|^2

(the standard one-electron multiplet formula; the radial integral is computed numerically
from the non-relativistic hydrogenic radial functions). The Lamb shift (< ~0.01 Angstrom in
the optical) and hyperfine structure are neglected.

Constants come from :mod:`astropy.constants` (CODATA 2018 in astropy >= 4).
"""

from __future__ import annotations

from functools import cache
from math import factorial, sqrt

import numpy as np
from astropy import constants as const
from scipy.special import eval_genlaguerre, gammaln

__all__ = [
    "rydberg_constant",
    "bohr_wavenumber",
    "level_energy",
    "line_wavenumber",
    "line_wavelength_vacuum",
    "NUCLEAR_MASS_U",
]

#: Nuclear masses in unified atomic mass units: proton and alpha particle (CODATA).
NUCLEAR_MASS_U = {
    1: (const.m_p / const.u).decompose().value,
    2: 4.001506179127,  # alpha-particle mass in u (CODATA 2018); astropy has no constant for it
}

_ALPHA = const.alpha.value
_R_INF_CM = const.Ryd.to("1/cm").value
_ME_U = (const.m_e / const.u).decompose().value


def rydberg_constant(z: int) -> float:
    """Reduced-mass Rydberg constant of the one-electron ion with nuclear charge ``z``.

    Parameters
    ----------
    z : int
        Nuclear charge: 1 for H I, 2 for He II (the nuclei are 1H and 4He).

    Returns
    -------
    float
        R_M in cm^-1.
    """
    if z not in NUCLEAR_MASS_U:
        raise ValueError(f"z must be one of {sorted(NUCLEAR_MASS_U)}, got {z!r}")
    return _R_INF_CM / (1.0 + _ME_U / NUCLEAR_MASS_U[z])


def bohr_wavenumber(z: int, n_lower: int, n_upper: int) -> float:
    """Bohr/Rydberg wavenumber (cm^-1) of the transition n_upper -> n_lower, no fine structure."""
    _check_levels(n_lower, n_upper)
    return rydberg_constant(z) * z**2 * (1.0 / n_lower**2 - 1.0 / n_upper**2)


def level_energy(z: int, n: int, j: float) -> float:
    """Dirac energy (cm^-1, negative for bound levels) of level n, j with reduced mass.

    Parameters
    ----------
    z : int
        Nuclear charge.
    n : int
        Principal quantum number.
    j : float
        Total angular momentum (half-integer).
    """
    za = z * _ALPHA
    k = j + 0.5
    delta = k - sqrt(k * k - za * za)
    f = 1.0 / sqrt(1.0 + (za / (n - delta)) ** 2)
    mu_c2 = 2.0 * rydberg_constant(z) / _ALPHA**2  # reduced-mass rest energy in cm^-1
    return mu_c2 * (f - 1.0)


def _check_levels(n_lower: int, n_upper: int) -> None:
    if not (1 <= n_lower < n_upper):
        raise ValueError(f"need 1 <= n_lower < n_upper, got {n_lower}, {n_upper}")


def _wigner_6j_doubled(a, b, c, d, e, f) -> float:
    """Wigner 6j symbol {a b c; d e f} with arguments given as twice their value (Racah)."""

    def tri(x, y, z):
        if (x + y + z) % 2 or z > x + y or z < abs(x - y):
            return None
        return (
            factorial((x + y - z) // 2)
            * factorial((x - y + z) // 2)
            * factorial((-x + y + z) // 2)
            / factorial((x + y + z) // 2 + 1)
        )

    triads = [tri(a, b, c), tri(a, e, f), tri(d, b, f), tri(d, e, c)]
    if any(t is None for t in triads):
        return 0.0
    pref = sqrt(np.prod(triads))
    sums = [(a + b + c) // 2, (a + e + f) // 2, (d + b + f) // 2, (d + e + c) // 2]
    pairs = [(a + b + d + e) // 2, (a + c + d + f) // 2, (b + c + e + f) // 2]
    total = 0.0
    for t in range(max(sums), min(pairs) + 1):
        den = factorial(t + 1) // 1
        denom = np.prod([factorial(t - s) for s in sums]) * np.prod(
            [factorial(p - t) for p in pairs]
        )
        total += (-1) ** t * den / denom
    return pref * total


def _radial(n: int, ell: int, r: np.ndarray) -> np.ndarray:
    """Normalised hydrogenic radial function R_nl(r) for Z = 1, r in Bohr radii."""
    rho = 2.0 * r / n
    log_norm = 0.5 * (
        3 * np.log(2.0 / n) + gammaln(n - ell) - np.log(2.0 * n) - gammaln(n + ell + 1)
    )
    return np.exp(log_norm - rho / 2) * rho**ell * eval_genlaguerre(n - ell - 1, 2 * ell + 1, rho)


@cache
def _radial_integral(n: int, ell: int, n2: int, ell2: int) -> float:
    """<n l | r | n2 l2> for Z = 1 by numerical quadrature (Bohr radii)."""
    rmax = 4.0 * max(n, n2) ** 2 + 60.0
    r = np.linspace(0.0, rmax, 40001)
    integrand = _radial(n, ell, r) * _radial(n2, ell2, r) * r**3
    return float(np.trapezoid(integrand, r))


def _components(z: int, n_lower: int, n_upper: int):
    """Fine-structure components: (wavenumber cm^-1, strength) pairs."""
    out = []
    for l_up in range(n_upper):
        for l_lo in (l_up - 1, l_up + 1):
            if not 0 <= l_lo < n_lower:
                continue
            radial = _radial_integral(n_upper, l_up, n_lower, l_lo) ** 2 * max(l_up, l_lo)
            for j2_up in (2 * l_up - 1, 2 * l_up + 1):
                if j2_up < 1:
                    continue
                for j2_lo in (2 * l_lo - 1, 2 * l_lo + 1):
                    if j2_lo < 1 or abs(j2_up - j2_lo) > 2:
                        continue
                    sixj = _wigner_6j_doubled(2 * l_up, j2_up, 1, j2_lo, 2 * l_lo, 2)
                    strength = (j2_up + 1) * (j2_lo + 1) * sixj**2 * radial
                    if strength <= 0:
                        continue
                    sigma = level_energy(z, n_upper, j2_up / 2) - level_energy(
                        z, n_lower, j2_lo / 2
                    )
                    out.append((sigma, strength))
    return out


@cache
def line_wavenumber(z: int, n_lower: int, n_upper: int) -> float:
    """Strength-weighted fine-structure centroid wavenumber (cm^-1) of n_upper -> n_lower.

    Parameters
    ----------
    z : int
        Nuclear charge (1 or 2).
    n_lower, n_upper : int
        Principal quantum numbers of the lower and upper level.
    """
    _check_levels(n_lower, n_upper)
    rydberg_constant(z)  # validates z
    comps = np.array(_components(z, n_lower, n_upper))
    return float(np.sum(comps[:, 0] * comps[:, 1]) / np.sum(comps[:, 1]))


def line_wavelength_vacuum(z: int, n_lower: int, n_upper: int) -> float:
    """Vacuum wavelength (Angstrom) of the hydrogenic line n_upper -> n_lower."""
    return 1e8 / line_wavenumber(z, n_lower, n_upper)
