"""Projected rotational velocity from one clean He I line.

Two estimators, both built on the classical rotation kernel with linear limb darkening
(Gray, *The Observation and Analysis of Stellar Photospheres*, rotation profile G(dl)):

    G(x) = [2 (1 - eps) sqrt(1 - x^2) + (pi eps / 2) (1 - x^2)] / [pi dl_L (1 - eps/3)],
    x = dl / dl_L,  dl_L = lambda v sin i / c,  |x| <= 1.

:func:`vsini_kernel_fit` (used by the pipeline)
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
4471 A) rotation cannot be told from the instrument by either method; the result is then
returned as an upper limit. Intrinsic He I widths (Stark, macroturbulence) are not
modelled and bias v sin i upward for slow rotators at high resolution.
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
    "vsini_kernel_fit",
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
        Line id used.
    method : str
        ``"kernel fit"`` or ``"fourier"``.
    """

    vsini: float
    vsini_err: float
    upper_limit: bool
    floor: float
    line: str
    method: str


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


def vsini_kernel_fit(
    x: np.ndarray,
    y: np.ndarray,
    err: np.ndarray,
    *,
    rest: float,
    centre: float,
    instrument_fwhm: float,
    line_id: str = "",
    epsilon: float = EPSILON,
    vmax: float = 700.0,
    step: float = 4.0,
) -> VsiniResult:
    """v sin i by fitting instrument (x) rotation profiles to one normalized line.

    Parameters
    ----------
    x, y, err : numpy.ndarray
        Wavelength (Angstrom), normalized flux (neighbouring lines removed) and error,
        covering the whole line.
    rest, centre : float
        Rest and observed centre wavelength (Angstrom).
    instrument_fwhm : float
        Instrumental (plus any known intrinsic) Gaussian FWHM in Angstrom.
    line_id : str
        Id recorded in the result.
    epsilon : float
        Limb darkening.
    vmax, step : float
        Grid of trial v sin i in km/s.

    Returns
    -------
    VsiniResult
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
    err_v = max(0.5 * (hi - lo), 0.5)
    floor = resolution_floor(rest, instrument_fwhm)
    if vbest < floor:
        return VsiniResult(max(floor, vbest + 2 * err_v), float("nan"), True, floor, line_id,
                           "kernel fit")
    return VsiniResult(vbest, float(err_v), False, floor, line_id, "kernel fit")


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
