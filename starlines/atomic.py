"""Atomic data for the synthetic spectra: ionization energies, partition functions, lines.

Everything here is a plain number with its provenance beside it. Labels:

* "NIST" -- NIST Atomic Spectra Database value, recalled (we had no access to the database
  while writing this; treat as "from memory, believed to match NIST to the digits given").
* "from memory" -- recalled, not checked against any table.
* "computed" -- computed here from hydrogenic theory (oscillator strengths of H I and He II
  from the radial integrals of :mod:`starlines.hydrogenic`).

Level populations of a line's lower level are computed from the *next* ion by the
Saha-Boltzmann equation with the level's binding energy (see :mod:`starlines.synth`), so the
partition function of the lower ion enters only through the ionization balance.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np

from starlines.hydrogenic import _radial_integral

__all__ = [
    "IONIZATION_EV",
    "ABUNDANCE",
    "ELEMENT_MASS",
    "LineData",
    "line_data",
    "partition_function",
    "hydrogenic_f",
    "HYDROGENIC_NMAX",
]

#: Ionization energies (eV) of successive stages, index 0 = neutral. NIST (recalled).
IONIZATION_EV: dict[str, tuple[float, ...]] = {
    "H": (13.598,),
    "He": (24.587, 54.418),
    "C": (11.260, 24.383, 47.888, 64.494),
    "N": (14.534, 29.601, 47.449, 77.474),
    "O": (13.618, 35.121, 54.936, 77.414),
    "Mg": (7.646, 15.035, 80.144),
    "Si": (8.152, 16.346, 33.493, 45.142, 166.77),
}

#: log10 number abundance relative to H = 12 for the metals: "cosmic abundance standard"
#: of early-B stars, Nieva & Przybilla (2012), A&A 539, A143 (values from memory).
ABUNDANCE: dict[str, float] = {"C": 8.33, "N": 7.79, "O": 8.76, "Mg": 7.56, "Si": 7.50}

#: Atomic masses (u), standard atomic weights (from memory, 3 digits suffice for Doppler widths).
ELEMENT_MASS: dict[str, float] = {
    "H": 1.008, "He": 4.003, "C": 12.011, "N": 14.007, "O": 15.999, "Mg": 24.305, "Si": 28.086,
}

#: Partition functions as ground-term weight plus the lowest excited terms (g, E in eV),
#: from memory (NIST level lists recalled to ~0.1 eV). Stages not listed have U = g0 only.
#: Hydrogen-like stages (H I, He II) use the hydrogenic sum of :func:`partition_function`.
_TERMS: dict[tuple[str, int], tuple[float, tuple[tuple[float, float], ...]]] = {
    ("He", 0): (1.0, ((3.0, 19.82), (1.0, 20.62), (9.0, 20.96), (3.0, 21.22))),
    ("C", 1): (6.0, ((12.0, 5.33), (10.0, 9.29))),
    ("C", 2): (1.0, ((9.0, 6.49), (3.0, 12.69))),
    ("C", 3): (2.0, ((6.0, 8.0),)),
    ("N", 1): (9.0, ((5.0, 1.90), (1.0, 4.05))),
    ("N", 2): (6.0, ((12.0, 7.09),)),
    ("N", 3): (1.0, ((9.0, 8.32),)),
    ("O", 1): (4.0, ((10.0, 3.32), (6.0, 5.02))),
    ("O", 2): (9.0, ((5.0, 2.51), (1.0, 5.35))),
    ("Mg", 1): (2.0, ((6.0, 4.43),)),
    ("Si", 1): (6.0, ((12.0, 5.33), (10.0, 6.86))),
    ("Si", 2): (1.0, ((9.0, 6.56), (3.0, 10.28))),
    ("Si", 3): (2.0, ((6.0, 8.88),)),
}

#: Highest principal quantum number kept in the hydrogenic partition sums (a fixed cutoff
#: standing in for pressure ionization; the sums are dominated by n = 1 at these
#: temperatures because the populations that matter are computed from the next ion).
HYDROGENIC_NMAX = 8

_K_EV = 8.617333262e-5  # Boltzmann constant in eV/K (CODATA)


def partition_function(element: str, stage: int, temperature) -> np.ndarray:
    """Partition function of ``element`` in ionization ``stage`` (0 = neutral).

    Parameters
    ----------
    element : str
        Element symbol, e.g. ``"Si"``.
    stage : int
        0 for the neutral atom, 1 for the singly ionized ion, ...
    temperature : float or array
        Temperature in K.

    Returns
    -------
    numpy.ndarray
        U(T); bare nuclei have U = 1.
    """
    t = np.asarray(temperature, dtype=float)
    n_stages = len(IONIZATION_EV[element])
    if stage >= n_stages:  # bare nucleus or a stage beyond the list: closed shell, U = 1
        return np.ones_like(t)
    if (element, stage) in (("H", 0), ("He", 1)):
        chi = IONIZATION_EV[element][stage]
        n = np.arange(1, HYDROGENIC_NMAX + 1)
        energy = chi * (1.0 - 1.0 / n**2)
        return np.sum(
            2.0 * n[:, None] ** 2 * np.exp(-energy[:, None] / (_K_EV * t.ravel()[None, :])),
            axis=0,
        ).reshape(t.shape)
    g0, terms = _TERMS.get((element, stage), (1.0, ()))
    u = np.full_like(t, g0)
    for g, e in terms:
        u = u + g * np.exp(-e / (_K_EV * t))
    return u


@cache
def hydrogenic_f(n_lower: int, n_upper: int) -> float:
    """Absorption oscillator strength f(n_lower -> n_upper) of a hydrogen-like ion (computed).

    Summed over the fine-structure/l sublevels, averaged over the lower level (weight 2 n^2
    with spin); independent of the nuclear charge. Uses the dipole radial integrals of
    :mod:`starlines.hydrogenic`: f(nl -> n'l') = (dE / 1 Ry) max(l, l') / (3 (2l + 1)) R^2.
    """
    de_ry = 1.0 / n_lower**2 - 1.0 / n_upper**2
    total = 0.0
    for l_lo in range(n_lower):
        for l_up in (l_lo - 1, l_lo + 1):
            if not 0 <= l_up < n_upper:
                continue
            r2 = _radial_integral(n_lower, l_lo, n_upper, l_up) ** 2
            f_l = de_ry * max(l_lo, l_up) / (3.0 * (2 * l_lo + 1)) * r2
            total += (2 * l_lo + 1) * f_l
    return total / n_lower**2


@dataclass(frozen=True)
class LineData:
    """Line-formation data of one catalogue line.

    Attributes
    ----------
    element : str
        Element symbol.
    stage : int
        Ionization stage of the absorbing ion (0 = neutral).
    binding_ev : float
        Energy (eV) needed to ionize the lower level to the ground state of the next ion.
    g_lower : float
        Statistical weight of the lower level.
    log_gf : float
        log10 of g_lower times the absorption oscillator strength.
    profile : str
        ``"hydrogenic"`` (linear Stark, quasi-static), ``"hei"`` (Voigt, electron-impact
        width) or ``"metal"`` (Voigt with a small damping width).
    n_lower, n_upper : int
        Principal quantum numbers of hydrogenic lines (0 otherwise).
    stark_hwhm : float
        He I electron-impact half width (Angstrom) at n_e = 1e16 cm^-3 (from memory,
        order-of-magnitude values of Griem's tables; refined by the calibration).
    source : str
        Provenance of ``log_gf``.
    """

    element: str
    stage: int
    binding_ev: float
    g_lower: float
    log_gf: float
    profile: str
    n_lower: int = 0
    n_upper: int = 0
    stark_hwhm: float = 0.0
    source: str = "from memory"


# He I lower levels: 2 3S 19.820, 2 1S 20.616, 2 3P 20.964, 2 1P 21.218 eV (NIST, recalled);
# binding energy = 24.587 - E.
_HEI = {"2s3S": (3.0, 4.767), "2s1S": (1.0, 3.971), "2p3P": (9.0, 3.623), "2p1P": (3.0, 3.369)}

#: (lower level, log gf [NIST, recalled], Stark HWHM at 1e16 [from memory]) of He I lines.
_HEI_LINES = {
    "HeI4009": ("2p1P", -1.45, 1.0),
    "HeI4026": ("2p3P", -0.37, 2.0),
    "HeI4121": ("2p3P", -1.74, 0.8),
    "HeI4144": ("2p1P", -1.20, 1.6),
    "HeI4388": ("2p1P", -0.88, 1.0),
    "HeI4438": ("2p1P", -2.03, 0.6),
    "HeI4471": ("2p3P", 0.05, 0.6),
    "HeI4713": ("2p3P", -1.23, 0.3),
    "HeI4922": ("2p1P", -0.44, 0.4),
    "HeI5016": ("2s1S", -0.82, 0.15),
    "HeI5876": ("2p3P", 0.74, 0.15),
    "HeI6678": ("2p1P", 0.33, 0.2),
}

#: Metal lines: (element, stage, lower-level excitation eV, g_lower, log gf), all from
#: memory of NIST/VALD values (multiplet components as separate catalogue lines; Mg II 4481
#: and C II 4267 are the summed gf of their blended components).
_METAL_LINES = {
    "NII3995": ("N", 1, 18.50, 3.0, 0.21),
    "SiIV4089": ("Si", 3, 24.05, 2.0, 0.20),
    "SiIV4116": ("Si", 3, 24.05, 2.0, -0.11),
    "SiII4128": ("Si", 1, 9.84, 4.0, 0.36),
    "SiII4131": ("Si", 1, 9.84, 6.0, 0.55),
    "CII4267": ("C", 1, 18.05, 10.0, 0.96),
    "OII4415": ("O", 1, 23.44, 4.0, 0.17),
    "OII4417": ("O", 1, 23.42, 2.0, -0.08),
    "MgII4481": ("Mg", 1, 8.86, 10.0, 0.98),
    "SiIII4553": ("Si", 2, 19.02, 3.0, 0.29),
    "SiIII4568": ("Si", 2, 19.02, 3.0, 0.07),
    "SiIII4575": ("Si", 2, 19.02, 3.0, -0.41),
    "NIII4634": ("N", 2, 30.46, 2.0, -0.09),
    "NIII4641": ("N", 2, 30.46, 4.0, 0.17),
    "NIII4642": ("N", 2, 30.46, 4.0, -0.79),
    "CIII4647": ("C", 2, 29.53, 3.0, 0.07),
    "CIII4650": ("C", 2, 29.53, 3.0, -0.15),
    "CIII4651": ("C", 2, 29.53, 3.0, -0.63),
}


@cache
def line_data(ident: str) -> LineData:
    """Line-formation data for catalogue line ``ident`` (e.g. ``"HeI4471"``).

    Raises
    ------
    KeyError
        If the line has no atomic data here.
    """
    from starlines.lines import line

    ln = line(ident)
    if ln.kind in ("balmer", "heii"):
        z = 1 if ln.kind == "balmer" else 2
        element = "H" if z == 1 else "He"
        chi = IONIZATION_EV[element][z - 1]
        lo, up = ln.lower, ln.upper
        return LineData(
            element=element, stage=z - 1, binding_ev=chi / lo**2, g_lower=2.0 * lo**2,
            log_gf=float(np.log10(2.0 * lo**2 * hydrogenic_f(lo, up))),
            profile="hydrogenic", n_lower=lo, n_upper=up,
            source="computed (hydrogenic radial integrals)",
        )
    if ident in _HEI_LINES:
        level, log_gf, hwhm = _HEI_LINES[ident]
        g, binding = _HEI[level]
        return LineData("He", 0, binding, g, log_gf, "hei", stark_hwhm=hwhm,
                        source="NIST (recalled)")
    if ident in _METAL_LINES:
        el, stage, exc, g, log_gf = _METAL_LINES[ident]
        binding = IONIZATION_EV[el][stage] - exc
        return LineData(el, stage, binding, g, log_gf, "metal", source="from memory (NIST/VALD)")
    raise KeyError(f"no atomic data for line {ident!r}")
