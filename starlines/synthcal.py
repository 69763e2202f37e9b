"""Empirical calibration of the grey LTE model against published O/B-star scales.

Two corrections, both stated in the grid metadata and in grids/README.md:

1. **Line strengths.** The residual flux of each line group is raised to a power s,
   R -> R^s (s multiplies the line depth's optical thickness; EW scales by ~s for weak
   lines). :data:`STRENGTH_EXPONENTS` holds s per group, chosen so that
   He I 4471 is near the EWs of Jaschek & Jaschek (1995; B0 V 1.12, B2 V 1.47 Angstrom)
   and H-gamma of dwarfs is ~2-3 Angstrom at O types and 5-7 Angstrom at B2-B3 (from
   memory).
2. **Temperature.** The model is evaluated at T_model = Teff + dT(Teff, log g). dT is
   interpolated in Teff between knots derived by :func:`derive_temperature_knots`: at each
   subtype boundary of the log W' = log EW(He I 4471)/EW(He II 4541) table (Mathys 1988 as
   transcribed in criteria.md section 1) the model temperature that gives the boundary
   value is found, and its offset from the boundary's Teff on the published scale (Martins
   et al. 2005 observational scale via :mod:`starlines.teffscale`, midpoint of the two
   subtypes) is the knot. Two tracks are derived, dwarfs (V) and supergiants (I), and dT is
   interpolated linearly in log g between them (clamped outside). Below the last O knot the
   offset tapers linearly to :data:`B_STAR_OFFSET` at 20000 K, where LTE is a better
   approximation (it puts the He I 4471 maximum near B2, Teff ~ 20 kK).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "MODEL_VERSION",
    "STRENGTH_EXPONENTS",
    "B_STAR_OFFSET",
    "KNOTS_V",
    "KNOTS_I",
    "model_temperature",
    "strength_exponent",
    "calibration_statement",
    "derive_temperature_knots",
]

MODEL_VERSION = "grey-lte-1.2"

#: Residual-flux exponent per line group (kind from starlines.lines; metals by ion).
STRENGTH_EXPONENTS: dict[str, float] = {
    "balmer": 0.75,
    "heii": 0.7,
    "hei": 1.9,
    "metal": 1.0,
}

#: Temperature offset (K) of the model for B stars at and below Teff = 20000 K.
B_STAR_OFFSET = -2000.0

#: (Teff, dT) knots for dwarfs, log g 3.92 (derived by derive_temperature_knots("V")).
KNOTS_V: tuple[tuple[float, float], ...] = (
    (31787.0, -1981.0), (32383.0, -1300.0), (33380.0, -1203.0), (34378.0, -1415.0),
    (35376.0, -1575.0), (36373.0, -1676.0), (37371.0, -1704.0), (38368.0, -1630.0),
    (39366.0, -1404.0), (40364.0, -118.0), (41860.0, 1028.0), (43854.0, 2792.0),
)
LOGG_V = 3.92

#: (Teff, log g, dT) knots for supergiants (derived by derive_temperature_knots("I")).
KNOTS_I: tuple[tuple[float, float, float], ...] = (
    (29930.0, 3.17, -1516.0), (30916.0, 3.21, -1106.0), (31821.0, 3.25, -814.0),
    (32726.0, 3.30, -833.0), (33632.0, 3.34, -785.0), (34537.0, 3.38, -651.0),
    (35442.0, 3.42, -402.0), (36348.0, 3.46, 9.0), (37254.0, 3.50, 644.0),
    (38159.0, 3.54, 2339.0), (39517.0, 3.61, 3212.0), (41328.0, 3.69, 4670.0),
)

_TAPER_END = 20000.0


def _track_offset(teff: float, knots_t, knots_dt) -> float:
    t = np.asarray(knots_t, dtype=float)
    dt = np.asarray(knots_dt, dtype=float)
    if teff >= t[0]:
        return float(np.interp(teff, t, dt))
    if teff <= _TAPER_END:
        return B_STAR_OFFSET
    w = (teff - _TAPER_END) / (t[0] - _TAPER_END)
    return float(B_STAR_OFFSET + w * (dt[0] - B_STAR_OFFSET))


def temperature_offset(teff: float, logg: float) -> float:
    """dT (K) added to Teff to get the model temperature (see the module docstring)."""
    tv, dv = zip(*KNOTS_V)
    ti, gi, di = zip(*KNOTS_I)
    off_v = _track_offset(teff, tv, dv)
    off_i = _track_offset(teff, ti, di)
    g_i = float(np.interp(teff, ti, gi))
    w = np.clip((logg - g_i) / (LOGG_V - g_i), 0.0, 1.0)
    return float(w * off_v + (1.0 - w) * off_i)


def model_temperature(teff: float, logg: float) -> float:
    """Temperature (K) at which the grey LTE model is evaluated for a star of ``teff``."""
    return float(teff + temperature_offset(teff, logg))


def strength_exponent(line_id: str) -> float:
    """Residual-flux exponent s of a catalogue line (see :data:`STRENGTH_EXPONENTS`)."""
    from starlines.lines import line

    ln = line(line_id)
    return STRENGTH_EXPONENTS.get(line_id, STRENGTH_EXPONENTS[ln.kind])


def calibration_statement() -> str:
    """One-paragraph statement of the calibration, for grid metadata."""
    exps = ", ".join(f"{k} {v}" for k, v in STRENGTH_EXPONENTS.items())
    return (
        "Grey plane-parallel LTE model; empirical calibration: model evaluated at "
        "T_model = Teff + dT(Teff, log g), dT from knots that make log W' = "
        "log EW(HeI4471)/EW(HeII4541) cross the Mathys (1988) subtype boundaries at the "
        "Martins et al. (2005) observational Teff scale (dwarf and supergiant tracks, "
        f"linear in log g between them; taper to {B_STAR_OFFSET:+.0f} K at 20 kK); "
        f"residual flux R -> R^s per line group (s: {exps}) to match Jaschek & Jaschek "
        "(1995) He I 4471 EWs and typical H-gamma EWs; H I/He II line source function "
        "depressed in the outer layers (beta = 1 - 0.5 exp(-tau/0.01)) for non-LTE-like "
        "Balmer cores. Absolute EWs are good to ~30%; "
        "Teff on the calibrated scale to ~1500 K in the O range."
    )


def derive_temperature_knots(track: str = "V", *, he: float = 0.1) -> list[tuple]:
    """Recompute the temperature knots of a track (slow: ~100 model evaluations).

    Parameters
    ----------
    track : {"V", "I"}
        Dwarf or supergiant track of :mod:`starlines.teffscale`.
    he : float
        He/H of the models used.

    Returns
    -------
    list of tuple
        (Teff, dT) for "V" and (Teff, log g, dT) for "I", hottest boundary last.
    """
    from starlines.atmosphere import grey_atmosphere
    from starlines.atomic import line_data
    from starlines.lineform import residual_profile
    from starlines.lines import line
    from starlines.teffscale import type_parameters

    boundaries = [(3.0, 4.0, -0.90), (4.0, 5.0, -0.60), (5.0, 5.5, -0.45), (5.5, 6.0, -0.30),
                  (6.0, 6.5, -0.20), (6.5, 7.0, -0.10), (7.0, 7.5, 0.00), (7.5, 8.0, 0.10),
                  (8.0, 8.5, 0.20), (8.5, 9.0, 0.30), (9.0, 9.5, 0.45), (9.5, 9.7, 0.65)]
    lum = {"V": 5.0, "I": 1.0}[track]

    def log_w(t_model: float, logg: float) -> float:
        atm = grey_atmosphere(t_model, logg, he)
        ew = {}
        for ident in ("HeI4471", "HeII4541"):
            dl, r = residual_profile(line_data(ident), line(ident).wavelength_air, atm)
            ew[ident] = 2 * np.trapezoid(1 - np.clip(r, 1e-6, 1) ** strength_exponent(ident), dl)
        return float(np.log10(ew["HeI4471"] / max(ew["HeII4541"], 1e-12)))

    knots = []
    for s_hot, s_cool, value in reversed(boundaries):
        (t1, g1), (t2, g2) = type_parameters(s_hot, lum), type_parameters(s_cool, lum)
        teff, logg = 0.5 * (t1 + t2), 0.5 * (g1 + g2)
        grid = np.arange(teff - 9000.0, teff + 6001.0, 500.0)
        lw = np.array([log_w(t, logg) for t in grid])
        k = np.flatnonzero((lw[:-1] >= value) & (lw[1:] < value))[0]
        t_model = grid[k] + (value - lw[k]) / (lw[k + 1] - lw[k]) * 500.0
        dt = round(t_model - teff)
        knots.append((round(teff), dt) if track == "V" else (round(teff), round(logg, 2), dt))
    return knots
