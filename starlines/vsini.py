"""Projected rotational velocity from the profiles of clean, intrinsically narrow lines.

Which lines are used is decided by :mod:`starlines.measure` (``VSINI_TIERS``): metal lines
(Si III, Mg II, Si IV) first, He I lines with s/p upper levels (4713, 5016) next, a diffuse
He I line (4471, 4922, 4388, 4026) only when nothing narrower is measured well enough.
Each line is fitted on its own (:func:`kernel_fit_estimate`); several lines are combined by
:func:`combine_estimates` (clipped inverse-variance weighted mean, never the minimum).

Two estimators, both built on the classical rotation kernel with linear limb darkening
(Gray, *The Observation and Analysis of Stellar Photospheres*, rotation profile G(dl)):

    G(x) = [2 (1 - eps) sqrt(1 - x^2) + (pi eps / 2) (1 - x^2)] / [pi dl_L (1 - eps/3)],
    x = dl / dl_L,  dl_L = lambda v sin i / c,  |x| <= 1.

:func:`kernel_fit_estimate` (used by the measure stage, one call per line)
    Fits the line with a Gaussian of the instrumental FWHM convolved with G for a grid of
    v sin i (linear baseline and depth solved exactly for every grid value), then refines
    the chi-square minimum by a parabola; the error is where chi-square rises by the
    reduced chi-square. This is the "FWHM calibration by convolution" carried to the
    whole profile, so it works where the first Fourier zero is lost in the instrumental
    profile.

:func:`vsini_fourier`
    First zero of the Fourier transform of the line profile: sigma_1 v sin i = q(eps) with
    q(0.6) = 0.660 (Gray's value; :func:`first_zero_constant` recomputes it from G). Needs
    a resolution at which the instrumental profile leaves the first zero visible.

Resolution floor: below ``v_floor = c * FWHM_instr / lambda`` (168 km/s for a 2.5 A FWHM at
4471 A, 165 km/s at Si III 4553) rotation cannot be told from the instrument by either
method; the result is then returned as an upper limit (for a combination: below the largest
floor of the lines kept). Intrinsic widths (Stark, saturation, macroturbulence) are not
modelled: they bias v sin i upward for slow rotators, which is why the narrow lines come
first. On the package's own forward model a helium-strong B2 V (He/H 0.30) rotating at
60 km/s reads ~230 km/s from He I 4471 at 2.5 A FWHM (~150 km/s at 0.5 A), ~105-120 km/s
from He I 4713/5016, while the metal lines give an upper limit at 2.5 A and 59-64 km/s at
0.5 A (``tests/test_vsini.py``).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from starlines.profiles import C_KMS, FWHM_PER_SIGMA

__all__ = [
    "rotation_kernel",
    "first_zero_constant",
    "VsiniResult",
    "kernel_fit_estimate",
    "apply_floor",
    "LineEstimate",
    "combine_estimates",
    "vsini_fourier",
    "resolution_floor",
    "EPSILON",
]

#: Linear limb-darkening coefficient used throughout (common practice for hot stars in the
#: optical; Gray's worked value).
EPSILON = 0.6


def rotation_kernel(dl: np.ndarray, dl_max: float, epsilon: float = EPSILON) -> np.ndarray:
    """Rotation profile G(dl) of unit area (Gray), zero outside |dl| < dl_max.

    Parameters
    ----------
    dl : numpy.ndarray
        Offset from line centre, same unit as ``dl_max``.
    dl_max : float
        lambda v sin i / c.
    epsilon : float
        Linear limb-darkening coefficient.
    """
    x2 = (np.asarray(dl, dtype=float) / dl_max) ** 2
    inside = x2 < 1.0
    one = np.where(inside, 1.0 - x2, 0.0)
    g = 2.0 * (1.0 - epsilon) * np.sqrt(one) + 0.5 * np.pi * epsilon * one
    return g / (np.pi * dl_max * (1.0 - epsilon / 3.0))


@lru_cache(maxsize=16)
def first_zero_constant(epsilon: float = EPSILON, n: int = 4001) -> float:
    """sigma_1 * dl_max of the first zero of the Fourier transform of G, computed numerically.

    For ``epsilon = 0.6`` this is 0.660 (Gray quotes 0.660); then ``v sin i = q / sigma_1``
    with sigma_1 in cycles per (km/s).
    """
    x = np.linspace(-1.0, 1.0, n)
    g = rotation_kernel(x, 1.0, epsilon)
    s = np.linspace(0.3, 1.0, 351)
    ft = np.trapezoid(g[None, :] * np.cos(2.0 * np.pi * s[:, None] * x[None, :]), x, axis=1)
    i = int(np.flatnonzero(np.sign(ft[1:]) != np.sign(ft[:-1]))[0])
    return float(s[i] - ft[i] * (s[i + 1] - s[i]) / (ft[i + 1] - ft[i]))


@dataclass
class VsiniResult:
    """v sin i of one line.

    Attributes
    ----------
    vsini, vsini_err : float
        km/s; when ``upper_limit`` is True, ``vsini`` is the upper limit and the error NaN.
    upper_limit : bool
        True below the resolution floor.
    floor : float
        Resolution floor c FWHM_instr / lambda in km/s.
    line : str
        Line id used; for a combination the ids kept, comma-separated.
    method : str
        ``"kernel fit"`` or ``"fourier"``; the pipeline adds the tiers of lines and how many
        were kept (``"kernel fit, metal lines (3 of 4 kept)"``).
    """

    vsini: float
    vsini_err: float
    upper_limit: bool
    floor: float
    line: str
    method: str


#: With at least this many lines, a line further than ``CLIP_SIGMA`` of its own errors from
#: the weighted median of all is dropped before averaging (a blend or a noise feature, not
#: rotation; one-pass 3-sigma clipping is common practice).
CLIP_MIN_LINES = 3
CLIP_SIGMA = 3.0


@dataclass(frozen=True)
class LineEstimate:
    """Kernel-fit v sin i of one line before the resolution floor is applied.

    Attributes
    ----------
    line : str
        Line id.
    vsini, vsini_err : float
        Chi-square minimum and its 1-sigma error (km/s), from :func:`kernel_fit_estimate`.
    floor : float
        Resolution floor of the line (km/s), :func:`resolution_floor`.
    """

    line: str
    vsini: float
    vsini_err: float
    floor: float


def _weighted_median(values: np.ndarray, weights: np.ndarray) -> float:
    order = np.argsort(values)
    cum = np.cumsum(weights[order])
    return float(values[order][np.searchsorted(cum, 0.5 * cum[-1])])


def combine_estimates(estimates, method: str) -> VsiniResult:
    """One v sin i from the estimates of several lines of the same star.

    Inverse-variance weighted mean of the per-line chi-square minima (not their minimum,
    which noise biases low: the smallest of n noisy values lies about one error below the
    truth for n = 3-5), after one-pass clipping at ``CLIP_SIGMA`` around the weighted
    median when there are ``CLIP_MIN_LINES`` or more. The error is the larger of the
    internal error (1 / sqrt(sum of weights)) and the external one (weighted scatter of the
    lines about the mean / sqrt(n - 1)), so lines that disagree more than their errors
    allow widen it. The floor is the largest floor of the lines kept (the conservative
    choice); below it the result is an upper limit (:func:`apply_floor`).

    Parameters
    ----------
    estimates : sequence of LineEstimate
        At least one.
    method : str
        Recorded in the result.

    Returns
    -------
    VsiniResult
        ``line`` lists the ids kept, comma-separated, in the order given.
    """
    est = list(estimates)
    if not est:
        raise ValueError("no line estimates to combine")
    v = np.array([e.vsini for e in est])
    err = np.array([e.vsini_err for e in est])
    if len(est) >= CLIP_MIN_LINES:
        med = _weighted_median(v, 1.0 / err**2)
        keep = np.abs(v - med) <= CLIP_SIGMA * err
        if keep.sum() >= 2:
            est = [e for e, k in zip(est, keep) if k]
            v, err = v[keep], err[keep]
    w = 1.0 / err**2
    mean = float(np.sum(w * v) / np.sum(w))
    sigma = 1.0 / np.sqrt(np.sum(w))
    if v.size > 1:
        external = np.sqrt(np.sum(w * (v - mean) ** 2) / ((v.size - 1) * np.sum(w)))
        sigma = max(sigma, float(external))
    floor = max(e.floor for e in est)
    return apply_floor(mean, float(sigma), floor, ",".join(e.line for e in est), method)


def resolution_floor(rest: float, instrument_fwhm: float) -> float:
    """c FWHM_instr / lambda in km/s."""
    return C_KMS * instrument_fwhm / rest


def _models(x, centre, instr_sigma, vgrid, epsilon):
    """Unit-area Gaussian (x) rotation profiles at ``x`` for each v sin i in ``vgrid``."""
    dlmax = centre * vgrid.max() / C_KMS
    ds = min(instr_sigma / 4.0, float(np.median(np.diff(x))) / 2.0)
    s = np.arange(-dlmax - ds, dlmax + 2 * ds, ds)
    dl = centre * np.maximum(vgrid, 1e-3) / C_KMS
    K = rotation_kernel(s[None, :], dl[:, None], epsilon) * ds
    small = dl < 2 * ds  # unresolved kernels: a delta function
    K[small] = 0.0
    K[small, np.argmin(np.abs(s))] = 1.0
    K /= K.sum(axis=1, keepdims=True)
    u = (x[None, :] - centre) - s[:, None]
    G = np.exp(-0.5 * (u / instr_sigma) ** 2) / (instr_sigma * np.sqrt(2.0 * np.pi))
    return K @ G


def kernel_fit_estimate(
    x: np.ndarray,
    y: np.ndarray,
    err: np.ndarray,
    *,
    centre: float,
    instrument_fwhm: float,
    epsilon: float = EPSILON,
    vmax: float = 700.0,
    step: float = 4.0,
) -> tuple[float, float]:
    """Chi-square minimum of instrument (x) rotation profiles, without the resolution floor.

    Parameters
    ----------
    x, y, err : numpy.ndarray
        Wavelength (Angstrom), normalized flux (neighbouring lines removed) and error,
        covering the whole line.
    centre : float
        Observed centre wavelength (Angstrom).
    instrument_fwhm : float
        Instrumental (plus any known intrinsic) Gaussian FWHM in Angstrom.
    epsilon : float
        Limb darkening.
    vmax, step : float
        Grid of trial v sin i in km/s.

    Returns
    -------
    vsini, vsini_err : float
        Best v sin i (km/s; may lie below the resolution floor) and its 1-sigma error (half
        the width of the interval where chi-square is within the reduced chi-square of the
        minimum).
    """
    vgrid = np.arange(0.0, vmax + step, step)
    M = _models(x, centre, instrument_fwhm / FWHM_PER_SIGMA, vgrid, epsilon)
    w = 1.0 / err**2
    t = (x - centre) / max(np.ptp(x), 1e-9)
    # normal equations of y = b0 + b1 t - A M_v for every v at once
    cols = np.stack(np.broadcast_arrays(np.ones_like(M), t[None, :], -M), axis=-1)
    A = np.einsum("vni,vnj,n->vij", cols, cols, w)
    b = np.einsum("vni,n->vi", cols, w * y)
    beta = np.linalg.solve(A, b[..., None])[..., 0]
    resid = y[None, :] - np.einsum("vni,vi->vn", cols, beta)
    chi2 = np.einsum("vn,n->v", resid**2, w)
    k = int(np.argmin(chi2))
    vbest = float(vgrid[k])
    if 0 < k < vgrid.size - 1:
        c0, c1, c2 = chi2[k - 1], chi2[k], chi2[k + 1]
        den = c0 - 2 * c1 + c2
        if den > 0:
            vbest = float(vgrid[k] + 0.5 * step * (c0 - c2) / den)
    chi2_red = max(float(chi2[k]) / max(x.size - 3, 1), 1.0)
    level = chi2[k] + chi2_red
    lo, hi = _crossing(vgrid, chi2, level, k, -1), _crossing(vgrid, chi2, level, k, +1)
    return vbest, float(max(0.5 * (hi - lo), 0.5))


def apply_floor(vsini: float, vsini_err: float, floor: float, line_id: str,
                method: str) -> VsiniResult:
    """A :class:`VsiniResult`, turned into an upper limit when ``vsini`` is below ``floor``.

    The limit is ``max(floor, vsini + 2 vsini_err)`` (km/s) with a NaN error.
    """
    if vsini < floor:
        return VsiniResult(max(floor, vsini + 2 * vsini_err), float("nan"), True, floor,
                           line_id, method)
    return VsiniResult(vsini, float(vsini_err), False, floor, line_id, method)


def _crossing(v: np.ndarray, chi2: np.ndarray, level: float, k: int, direction: int) -> float:
    """Where chi2 first rises through ``level`` going from index ``k`` in ``direction``
    (linear interpolation; the grid end if it never does)."""
    i = k
    while 0 <= i + direction < v.size:
        j = i + direction
        if chi2[j] > level:
            return float(v[i] + (level - chi2[i]) * (v[j] - v[i]) / (chi2[j] - chi2[i]))
        i = j
    return float(v[i])


def vsini_fourier(
    x: np.ndarray, y: np.ndarray, *, centre: float, epsilon: float = EPSILON
) -> float:
    """v sin i from the first minimum of the Fourier amplitude of the line depth profile.

    Parameters
    ----------
    x, y : numpy.ndarray
        Wavelength and normalized flux covering the line (neighbours removed).
    centre : float
        Observed line centre.
    epsilon : float
        Limb darkening.

    Returns
    -------
    float
        v sin i in km/s, NaN if no minimum is found.
    """
    v = C_KMS * (x / centre - 1.0)
    dv = float(np.min(np.diff(v)))
    grid = np.arange(v[0], v[-1], dv)
    depth = 1.0 - np.interp(grid, v, y)
    n = 1 << int(np.ceil(np.log2(grid.size * 16)))
    amp = np.abs(np.fft.rfft(depth, n))
    freq = np.fft.rfftfreq(n, dv)
    interior = (amp[1:-1] < amp[:-2]) & (amp[1:-1] < amp[2:])
    mins = np.flatnonzero(interior) + 1
    if mins.size == 0:
        return float("nan")
    return first_zero_constant(epsilon) / float(freq[mins[0]])
