"""Helium abundance from He I equivalent widths at the fitted Teff and log g.

The nearest-neighbour model (:mod:`starlines.knn`) estimates He/H from line *ratios*, where
helium is degenerate with temperature; its He/H is coarse. This module is the second,
direct check: each He I line of :data:`HE_I_LINES` is compared with the synthetic grid's
EW at the star's Teff and log g, and the He/H at which the grid matches it is read off the
grid's He/H axis (EW rises monotonically with He/H). Beyond the grid's last He/H node the
curve is extended as a power law through the last two nodes (an extrapolation, said so in
the result). The lines' estimates are combined as a median in log He/H; the error combines
the spread between the lines, the measurement errors and the change over the Teff/log g
uncertainty, with a floor for the model's systematic error (:data:`LOG_HE_FLOOR`).

Several lines are used because the grid's He I lines are off in different directions
against real B stars (grid 4471 and 4713 too strong, 4388, 4144 and 4922 too weak at the
MILES library Teff; ``grids/README.md``, "Limits"): their median is less biased than any one.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np

from starlines.rules import LineValue

__all__ = ["HE_I_LINES", "HeliumEstimate", "helium_from_ews", "grid_he_curve", "LOG_HE_FLOOR"]

#: He I lines used (blue-violet classification region, unblended at R ~ 2000).
HE_I_LINES = ("HeI4471", "HeI4922", "HeI4388", "HeI4026", "HeI4144")
#: Systematic error floor of one estimate, dex in He/H: the grid's He I EWs scatter by
#: ~20-30 % about real B stars (grids/README.md) and EW ~ (He/H)^0.5-0.7 on the grid, so
#: one line is good to ~0.3 dex and the median of five to ~0.12 dex.
LOG_HE_FLOOR = 0.05
#: Lines weaker than this (Angstrom) in the grid prediction are not used: at O types the
#: He I lines fade and their ratio to the grid is dominated by the temperature error.
MIN_PREDICTED_EW = 0.4


@dataclass(frozen=True)
class HeliumEstimate:
    """He/H by number from He I EWs, its 1-sigma error and the lines used."""

    he: float
    err: float
    lines: tuple[str, ...]
    extrapolated: bool


@lru_cache(maxsize=2)
def _grid_cube(path=None):
    from starlines.grid import load_grid

    tab = load_grid(path)
    t_ax = np.unique(np.asarray(tab["teff"], float))
    g_ax = np.unique(np.asarray(tab["logg"], float))
    h_ax = np.unique(np.asarray(tab["he"], float))
    it = np.searchsorted(t_ax, np.asarray(tab["teff"], float))
    ig = np.searchsorted(g_ax, np.asarray(tab["logg"], float))
    ih = np.searchsorted(h_ax, np.asarray(tab["he"], float))
    cube = {}
    for ident in HE_I_LINES:
        c = np.full((len(t_ax), len(g_ax), len(h_ax)), np.nan)
        c[it, ig, ih] = np.asarray(tab[f"ew_{ident}"], float)
        cube[ident] = c
    return t_ax, g_ax, h_ax, cube


def grid_he_curve(ident: str, teff: float, logg: float, path=None):
    """He/H axis of the grid and the EW of one He I line along it at (teff, logg).

    Bilinear in Teff and log g (clamped at the grid's edges).
    """
    t_ax, g_ax, h_ax, cube = _grid_cube(path)
    t = float(np.clip(teff, t_ax[0], t_ax[-1]))
    g = float(np.clip(logg, g_ax[0], g_ax[-1]))
    i = min(int(np.searchsorted(t_ax, t, side="right")) - 1, len(t_ax) - 2)
    j = min(int(np.searchsorted(g_ax, g, side="right")) - 1, len(g_ax) - 2)
    ft = (t - t_ax[i]) / (t_ax[i + 1] - t_ax[i])
    fg = (g - g_ax[j]) / (g_ax[j + 1] - g_ax[j])
    c = cube[ident]
    ew = ((1 - ft) * (1 - fg) * c[i, j] + ft * (1 - fg) * c[i + 1, j]
          + (1 - ft) * fg * c[i, j + 1] + ft * fg * c[i + 1, j + 1])
    return h_ax, ew


def _invert(h_ax: np.ndarray, ew: np.ndarray, observed: float) -> tuple[float, bool]:
    """log10 He/H at which the curve reaches ``observed`` (power-law ends)."""
    lh, le = np.log10(h_ax), np.log10(np.maximum(ew, 1e-4))
    if not np.all(np.diff(le) > 0):
        return math.nan, False
    lo = math.log10(max(observed, 1e-4))
    if le[0] <= lo <= le[-1]:
        return float(np.interp(lo, le, lh)), False
    k = (0, 1) if lo < le[0] else (-2, -1)
    slope = (lh[k[1]] - lh[k[0]]) / (le[k[1]] - le[k[0]])
    return float(lh[k[0]] + slope * (lo - le[k[0]])), True


def helium_from_ews(values: Mapping[str, LineValue], teff: float, logg: float, *,
                    teff_err: float = 0.0, logg_err: float = 0.0,
                    recovery: Mapping[str, float] | None = None,
                    path=None) -> HeliumEstimate | None:
    """He/H by number from the He I EWs of one spectrum.

    Parameters
    ----------
    values : mapping of line id -> LineValue
        Measured EWs (Angstrom, absorption positive).
    teff, logg : float
        Fitted parameters (K, cgs), e.g. from the nearest-neighbour model.
    teff_err, logg_err : float
        Their errors; the estimate is repeated at Teff +- teff_err and log g +- logg_err
        and the change enters the error.
    recovery : mapping of line id -> float, optional
        Fraction of the true EW the measurement stage recovers for each line
        (:func:`starlines.recovery.recovery_factors`); measured EWs and errors are divided
        by it before the comparison with the grid, and lines without a factor are not
        used. Without it the measured EWs are compared with the grid as they are.

    Returns
    -------
    HeliumEstimate or None
        None when Teff/log g are not finite or fewer than two He I lines are detected
        and predicted stronger than :data:`MIN_PREDICTED_EW`.
    """
    if not (math.isfinite(teff) and math.isfinite(logg)):
        return None
    te = teff_err if math.isfinite(teff_err) else 0.0
    ge = logg_err if math.isfinite(logg_err) else 0.0
    logs, errs, used, extra = [], [], [], False
    for ident in HE_I_LINES:
        v = values.get(ident)
        if v is None or not v.detected or (recovery is not None and ident not in recovery):
            continue
        if recovery is not None:
            v = replace(v, ew=v.ew / recovery[ident], err=v.err / recovery[ident])
        h_ax, ew = grid_he_curve(ident, teff, logg, path)
        if ew[np.argmin(np.abs(h_ax - 0.1))] < MIN_PREDICTED_EW:
            continue
        lh, ext = _invert(h_ax, ew, v.ew)
        if not math.isfinite(lh):
            continue
        # measurement error: invert EW +- err; parameter error: invert at shifted Teff, log g
        up, _ = _invert(h_ax, ew, v.ew + v.err)
        shifts = [lh]
        for dt, dg in ((te, 0.0), (-te, 0.0), (0.0, ge), (0.0, -ge)):
            if dt or dg:
                shifts.append(_invert(*grid_he_curve(ident, teff + dt, logg + dg, path),
                                      v.ew)[0])
        spread = 0.5 * float(np.nanmax(shifts) - np.nanmin(shifts))
        logs.append(lh)
        errs.append(math.hypot(up - lh if math.isfinite(up) else 0.0, spread))
        used.append(ident)
        extra = extra or ext
    if len(logs) < 2:
        return None
    logs_a, errs_a = np.array(logs), np.array(errs)
    mid = float(np.median(logs_a))
    scatter = 1.2533 * float(np.std(logs_a, ddof=1)) / math.sqrt(len(logs_a))
    err = math.sqrt(scatter**2 + float(np.median(errs_a)) ** 2 + LOG_HE_FLOOR**2)
    he = 10.0**mid
    return HeliumEstimate(he, he * math.log(10) * err, tuple(used), extra)
