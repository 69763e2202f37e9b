"""Teff, log g and He/H fitted together to the equivalent widths of H, He I and He II lines.

Why a joint fit: the He I lines of a B star grow with both helium abundance and gravity
(on the grid, He I 4471 at 20 kK goes from 1.25 A at log g 3.5 to 1.75 A at 4.25), and a
helium-rich atmosphere has stronger Balmer lines at a given gravity, which the
nearest-neighbour model reads as a higher gravity. Reading He/H from the He I lines at
the model's log g therefore under-reads a helium-rich star. Fitting the Balmer lines
(mainly gravity), the He I lines (helium, and temperature away from their maximum) and
the He II lines (temperature in O and B0 stars) together breaks that degeneracy; the
model's Teff enters as a prior.

Method: the grid's log EW is interpolated linearly in (Teff, log g, log He/H) (beyond the
last He/H node the interpolation extrapolates linearly in log EW vs log He/H: a power
law); the measured EWs, divided by the measurement stage's recovery factors
(:mod:`starlines.recovery`), are compared in log EW with an error that adds
:data:`MODEL_ERROR` (relative) to the measurement error; ``scipy.optimize.least_squares``
finds the minimum from the model's Teff and log g. Teff and log g errors are from the
Jacobian. He/H is judged by its profile likelihood instead (chi-square minimized over
Teff and log g at fixed He/H): near the He I maximum the chi-square surface is far from
a parabola in He/H (demo star FLD-205: chi-square 0.4 at the best He/H 0.31, 1.7 at 0.25,
42 at 0.15, 135 at 0.10, while the Jacobian error is +-0.15), so the He/H error is half
the width of the interval where the chi-square rises by less than one, and
:meth:`EwFit.sigma_outside` gives the significance with which a range of He/H is
excluded. Chi-square differences are divided by the reduced chi-square when it exceeds
1 (the model error is then larger than :data:`MODEL_ERROR`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from starlines.rules import LineValue

__all__ = ["EwFit", "fit_ews", "enough_lines", "FIT_LINES", "MODEL_ERROR", "TEFF_PRIOR_FLOOR",
           "MAX_RESOLUTION_FWHM", "RESOLUTION_SOURCES"]

#: Lines fitted: Balmer lines free of strong blends at R ~ 2000 (H-epsilon sits on Ca II
#: H and H-alpha is often absent or in emission), the He I lines of
#: :data:`starlines.helium.HE_I_LINES` plus 4713, and the He II lines of the classification
#: region (4686 is left out: in O stars it is filled in by the wind).
FIT_LINES = ("HI4102", "HI4340", "HI4861",
             "HeI4471", "HeI4922", "HeI4388", "HeI4026", "HeI4144", "HeI4713",
             "HeII4541", "HeII4200")
#: Relative model error per line added in quadrature to the measurement error: the floor
#: of the forward-model chain's internal accuracy (recovery factors scatter by a few per
#: cent between noise realizations and neighbouring parameters; the demo night's normal
#: stars, made with the model itself, fit with reduced chi-square ~0.1-1.5 at this value).
#: Real stars fit worse (MILES B stars: reduced chi-square ~10-20 at 5 %, i.e. the grid is
#: good to ~20 % per line, grids/README.md "Limits"); their errors are scaled up by
#: sqrt(chi-square), never down.
MODEL_ERROR = 0.05
#: Smallest Teff error (K) of the prior from the nearest-neighbour model (one grid step).
TEFF_PRIOR_FLOOR = 1000.0
#: Fewest fitted lines (Balmer and helium together) for a fit.
MIN_LINES = 5
#: Coarsest instrumental FWHM (A) at which the fit is used: at coarser resolution the He I
#: lines of O stars blend with He II and the Balmer lines, and the fit goes wrong (Jacoby
#: et al. 1984 library, ~15 A FWHM: five of 15 O stars fitted at He/H 0.5-0.8, measured
#: in this project); 6 A is the resolution the classification criteria are stated for.
MAX_RESOLUTION_FWHM = 6.0
#: Sources of the instrumental FWHM (line-table meta ``resolution_source``) trusted for
#: the fit: the header, the caller, or the narrowest measured lines (an upper bound that
#: includes some rotation). "assumed (2.5 pixels)" and a missing source are not trusted
#: (Jacoby et al. 1984 spectra, really ~15 A, were assumed at 3.5 A).
RESOLUTION_SOURCES = ("header", "argument", "estimated (narrowest lines)")
#: He/H bounds of the fit (by number); the grid spans 0.06-0.25.
HE_BOUNDS = (0.02, 1.0)


#: Step (dex) and half-width (dex) of the He/H profile around the best fit.
_PROFILE_STEP, _PROFILE_HALF_WIDTH = 0.05, 0.4
#: A profile direction stops once the scaled chi-square rise exceeds this (5 sigma): the
#: significance reported is then at least 5.
PROFILE_STOP = 25.0


@dataclass(frozen=True)
class EwFit:
    """Result of :func:`fit_ews` (Teff in K, log g in cgs, He/H by number).

    ``profile_log_he`` and ``profile_dchi2`` hold the chi-square profile in He/H (minimum
    over Teff and log g, minus the best fit's chi-square, divided by the reduced
    chi-square when above 1); they are computed only when the best He/H lies outside the
    ``normal`` range given to :func:`fit_ews` (empty otherwise), and then ``he_err`` is
    from the profile; inside, ``he_err`` is from the Jacobian.
    """

    teff: float
    teff_err: float
    logg: float
    logg_err: float
    he: float
    he_err: float
    chi2_red: float
    lines: tuple[str, ...]
    profile_log_he: np.ndarray
    profile_dchi2: np.ndarray

    def sigma_outside(self, low: float, high: float) -> float:
        """Significance (sigma) with which He/H in [low, high] is excluded.

        Positive when the best He/H is above ``high``, negative when below ``low``, zero
        when it lies inside: sqrt of the smallest profile chi-square rise over the range.
        """
        if low <= self.he <= high or self.profile_log_he.size == 0:
            return 0.0
        lo, hi = math.log10(low), math.log10(high)
        inside = (self.profile_log_he >= lo) & (self.profile_log_he <= hi)
        ends = np.interp([lo, hi], self.profile_log_he, self.profile_dchi2)
        d = float(min(np.min(self.profile_dchi2[inside], initial=np.inf), *ends))
        return math.copysign(math.sqrt(max(d, 0.0)), self.he - high)


class _Trilinear:
    """Linear interpolation in a regular 3-D grid of vectors, extrapolating linearly from
    the edge cells (the result of ``scipy.interpolate.RegularGridInterpolator`` with
    ``fill_value=None``, at ~1/20 of its per-call cost for single points)."""

    def __init__(self, axes, cube):
        self.axes, self.cube = axes, cube

    def __call__(self, p) -> np.ndarray:
        idx, frac = [], []
        for ax, x in zip(self.axes, p, strict=True):
            i = min(max(int(np.searchsorted(ax, x, side="right")) - 1, 0), len(ax) - 2)
            idx.append(i)
            frac.append((x - ax[i]) / (ax[i + 1] - ax[i]))
        (i, j, k), (ft, fg, fh) = idx, frac
        c = self.cube[i:i + 2, j:j + 2, k:k + 2]
        c = c[0] * (1 - ft) + c[1] * ft
        c = c[0] * (1 - fg) + c[1] * fg
        return c[0] * (1 - fh) + c[1] * fh


@lru_cache(maxsize=2)
def _interpolator(path=None):
    from starlines.grid import load_grid

    tab = load_grid(path)
    t, g, h = (np.asarray(tab[c], float) for c in ("teff", "logg", "he"))
    t_ax, g_ax, h_ax = np.unique(t), np.unique(g), np.unique(h)
    idx = (np.searchsorted(t_ax, t), np.searchsorted(g_ax, g), np.searchsorted(h_ax, h))
    cube = np.full((len(t_ax), len(g_ax), len(h_ax), len(FIT_LINES)), np.nan)
    for k, ident in enumerate(FIT_LINES):
        cube[idx + (k,)] = np.log10(np.maximum(np.asarray(tab[f"ew_{ident}"], float), 1e-4))
    axes = (t_ax / 1000.0, g_ax, np.log10(h_ax))
    return _Trilinear(axes, cube), axes


def _observed(values: Mapping[str, LineValue], recovery: Mapping[str, float]):
    idx, y, s = [], [], []
    for k, ident in enumerate(FIT_LINES):
        v = values.get(ident)
        if (v is None or not v.detected or ident not in recovery
                or not (math.isfinite(v.err) and v.err > 0)):
            continue  # a line without a usable error cannot be weighted
        ew, err = v.ew / recovery[ident], v.err / recovery[ident]
        idx.append(k)
        y.append(math.log10(ew))
        s.append(math.hypot(err / ew, MODEL_ERROR) / math.log(10))
    return np.array(idx, int), np.array(y), np.array(s)


def enough_lines(names) -> bool:
    """True when the line ids allow a fit: at least :data:`MIN_LINES`, two of them He I
    and one Balmer line."""
    names = list(names)
    n_he1 = sum(n.startswith("HeI") and not n.startswith("HeII") for n in names)
    return len(names) >= MIN_LINES and n_he1 >= 2 and any(n.startswith("HI") for n in names)


def fit_ews(values: Mapping[str, LineValue], recovery: Mapping[str, float], *,
            teff0: float, teff0_err: float, logg0: float,
            normal: tuple[float, float] = (0.05, 0.15), path=None) -> EwFit | None:
    """Fit Teff, log g and He/H to measured EWs.

    Parameters
    ----------
    values : mapping of line id -> LineValue
        Measured EWs (Angstrom, absorption positive).
    recovery : mapping of line id -> float
        Measured / true EW for each line (:func:`starlines.recovery.recovery_factors`);
        lines without a factor are not fitted.
    teff0, teff0_err : float
        Prior Teff and its error (K), e.g. from the nearest-neighbour model; the error is
        at least :data:`TEFF_PRIOR_FLOOR`.
    logg0 : float
        Starting log g.
    normal : (float, float)
        He/H range taken as normal; outside it the He/H profile is computed (see
        :class:`EwFit`).

    Returns
    -------
    EwFit or None
        None without a prior Teff, with fewer than :data:`MIN_LINES` usable lines, with
        fewer than two He I lines or no Balmer line, or when the fit fails.
    """
    from scipy.optimize import least_squares

    if not (math.isfinite(teff0) and math.isfinite(logg0)):
        return None
    idx, y, s = _observed(values, recovery)
    names = [FIT_LINES[k] for k in idx]
    if not enough_lines(names):
        return None
    interp, axes = _interpolator(path)
    t_prior = teff0 / 1000.0
    t_sig = max(teff0_err if math.isfinite(teff0_err) else 0.0, TEFF_PRIOR_FLOOR) / 1000.0

    def residuals(p, log_he=None):
        q = p if log_he is None else np.array([p[0], p[1], log_he])
        model = interp(q)[idx]
        return np.append((y - model) / s, (q[0] - t_prior) / t_sig)

    lo = [axes[0][0], axes[1][0], math.log10(HE_BOUNDS[0])]
    hi = [axes[0][-1], axes[1][-1], math.log10(HE_BOUNDS[1])]
    start = np.clip([t_prior, logg0, -1.0], np.add(lo, 1e-6), np.subtract(hi, 1e-6))
    res = least_squares(residuals, start, bounds=(lo, hi), x_scale=[1.0, 0.25, 0.1])
    if not res.success:
        return None
    chi2 = float(np.sum(res.fun**2))
    chi2_red = chi2 / max(len(res.fun) - 3, 1)
    scale = max(chi2_red, 1.0)
    try:
        cov = np.linalg.inv(res.jac.T @ res.jac) * scale
    except np.linalg.LinAlgError:
        return None
    err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    he = float(10.0 ** res.x[2])
    he_err = he * math.log(10) * float(err[2])
    nodes = dchi2 = np.empty(0)
    if not normal[0] <= he <= normal[1]:
        nodes = _profile_nodes(float(res.x[2]), normal, lo[2], hi[2])
        prof = _profile(residuals, res.x, nodes, lo[:2], hi[:2], chi2, scale)
        dchi2 = np.maximum(prof - chi2, 0.0) / scale
        he_err = _he_error(nodes, dchi2)
    return EwFit(teff=float(res.x[0] * 1000.0), teff_err=float(err[0] * 1000.0),
                 logg=float(res.x[1]), logg_err=float(err[1]), he=he, he_err=he_err,
                 chi2_red=chi2_red, lines=tuple(names),
                 profile_log_he=nodes, profile_dchi2=dchi2)


def _profile_nodes(best: float, normal: tuple[float, float], lo: float,
                   hi: float) -> np.ndarray:
    """log He/H nodes: a fine ladder around the best fit plus the normal range's edges."""
    ladder = best + _PROFILE_STEP * np.arange(-round(_PROFILE_HALF_WIDTH / _PROFILE_STEP),
                                              round(_PROFILE_HALF_WIDTH / _PROFILE_STEP) + 1)
    nodes = np.union1d(ladder, np.log10(normal))
    return nodes[(nodes >= lo) & (nodes <= hi)]


def _profile(residuals, best: np.ndarray, nodes: np.ndarray, lo, hi, chi2_best: float,
             scale: float) -> np.ndarray:
    """Chi-square minimized over Teff and log g at each log He/H of ``nodes`` (ascending).

    Walks outward from the best fit in both directions, each fit starting from its
    neighbour's solution, and stops a direction once the scaled rise exceeds
    :data:`PROFILE_STOP`; the nodes beyond get that direction's last value (a floor).
    """
    from scipy.optimize import least_squares

    out = np.full(nodes.size, np.nan)
    start0 = np.clip(np.asarray(best[:2], float), np.add(lo, 1e-6), np.subtract(hi, 1e-6))
    first = int(np.argmin(np.abs(nodes - best[2])))
    for direction in (1, -1):
        start, last = start0, np.nan
        i = first if direction == 1 else first - 1
        while 0 <= i < nodes.size:
            r = least_squares(residuals, start, bounds=(lo, hi), x_scale=[1.0, 0.25],
                              args=(nodes[i],))
            last = out[i] = float(np.sum(r.fun**2))
            start = np.clip(r.x, np.add(lo, 1e-6), np.subtract(hi, 1e-6))
            if (last - chi2_best) / scale > PROFILE_STOP:
                break
            i += direction
        rest = slice(i + 1, None) if direction == 1 else slice(0, max(i, 0))
        out[rest] = last
    return out


def _he_error(log_he: np.ndarray, dchi2: np.ndarray) -> float:
    """Half the width (in He/H) of the interval where the profile rises by < 1."""
    fine = np.linspace(log_he[0], log_he[-1], 2001)
    ok = fine[np.interp(fine, log_he, dchi2) <= 1.0]
    if ok.size == 0:
        return 0.0
    return float(0.5 * (10.0 ** ok.max() - 10.0 ** ok.min()))
