"""One- and two-component grid fits of He I line profiles (the SB2 profile test).

The lines are fitted jointly in velocity space. One component: a rotational profile
(linear limb darkening 0.6, common practice) convolved with a Gaussian, with shared
velocity and widths and one depth per line. Two components: two such profiles with their
own velocity and rotation and a shared Gaussian width, two depths per line. Each line also
gets a free continuum offset. Depths and offsets are linear and solved in closed form for
every grid point at once (variable projection); the velocities, widths and rotations are
searched on a grid, coarse first (step ~ half the instrumental FWHM) and then on a grid
four times finer around the best coarse solution.

:func:`fit_components` returns the chi-square of both models and, per line, what the
second component gains, so that the caller can ask for consistency between lines.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from starlines.ccf import C_KMS, rotational_kernel

__all__ = ["LineData", "line_data", "ComponentFit", "fit_components", "WINDOW_KMS"]

#: Half-width (km/s) of the velocity window around each line.
WINDOW_KMS = 550.0
#: Rotation grids (km/s) of the one- and two-component models.
VSINI_SINGLE = (0.0, 40.0, 80.0, 120.0, 160.0, 200.0, 250.0, 300.0, 360.0)
VSINI_PAIR = (0.0, 60.0, 130.0)
#: Intrinsic Gaussian sigmas (km/s, added in quadrature to the instrument's) of the one-
#: and two-component models: thermal + microturbulent (~20), and Stark-broadened diffuse
#: He I lines of dwarfs (FWHM 1-2 A, i.e. sigma 30-60 km/s; from memory). The single
#: model gets the wider set so that a profile shape it cannot follow is not credited to a
#: companion.
INTRINSIC_SIGMA_SINGLE = (0.0, 20.0, 45.0, 70.0)
INTRINSIC_SIGMA_PAIR = (0.0, 30.0, 60.0)
#: Step (km/s) of the tabulated unit profiles.
_FINE_STEP = 2.0
_FINE_V = np.arange(-1300.0, 1300.0 + 1.0, _FINE_STEP)
_U = np.linspace(-1.0, 1.0, 13)


@dataclass
class LineData:
    """Pixels of each line in velocity space: ``v`` (km/s) and ``depth`` (1 - flux)."""

    v: list[np.ndarray]
    depth: list[np.ndarray]
    ids: list[str]

    @property
    def n(self) -> int:
        """Number of pixels in all windows."""
        return int(sum(v.size for v in self.v))


def line_data(wavelength, norm_flux, good, rest: dict[str, float]) -> LineData:
    """Windows of +-:data:`WINDOW_KMS` around each line, kept when well covered."""
    vs, ds, ids = [], [], []
    for ident, lam0 in rest.items():
        v = C_KMS * (wavelength / lam0 - 1.0)
        sel = good & (np.abs(v) < WINDOW_KMS)
        if sel.sum() >= 12 and np.abs(v[sel]).max() > 0.8 * WINDOW_KMS:
            vs.append(v[sel])
            ds.append(1.0 - norm_flux[sel])
            ids.append(ident)
    return LineData(vs, ds, ids)


def _unit_profile(sigma: float, vsini: float) -> np.ndarray:
    """Rotation x Gaussian profile on :data:`_FINE_V`, peak-normalized (cached, sigma
    rounded to 0.5 km/s)."""
    return _unit_profile_cached(round(2.0 * sigma) / 2.0, float(vsini))


@lru_cache(maxsize=512)
def _unit_profile_cached(sigma: float, vsini: float) -> np.ndarray:
    g = np.exp(-0.5 * (_FINE_V / sigma) ** 2)
    if vsini < 1.0:
        return g
    wk = rotational_kernel(_U * vsini * 0.999, vsini)
    wk = wk / wk.sum()
    prof = (wk[:, None] * np.exp(-0.5 * ((_FINE_V[None, :] - _U[:, None] * vsini)
                                         / sigma) ** 2)).sum(axis=0)
    return prof / max(float(prof.max()), 1e-12)


def _bases(data: LineData, vgrid: np.ndarray, shapes: list[tuple[float, float]]):
    """Per line: profiles for every shape and velocity, shape (n_shape * n_v, n_pix)."""
    table = np.array([_unit_profile(s, vs) for s, vs in shapes])  # (n_shape, n_fine)
    table = np.concatenate([table, np.zeros((table.shape[0], 1))], axis=1)
    out = []
    last = _FINE_V.size - 1
    for v in data.v:
        x = ((v[None, :] - vgrid[:, None]) - _FINE_V[0]) / _FINE_STEP  # (n_v, n_pix)
        inside = (x >= 0) & (x < last)
        xi = np.where(inside, x, 0.0)
        i0 = np.floor(xi).astype(int)
        f = xi - i0
        i0 = np.where(inside, i0, last + 1)  # outside: the appended zero column
        i1 = np.where(inside, i0 + 1, last + 1)
        prof = table[:, i0] * (1.0 - f) + table[:, i1] * f  # (n_shape, n_v, n_pix)
        out.append(prof.reshape(-1, v.size))
    return out


def _single_chi(d: np.ndarray, g: np.ndarray) -> np.ndarray:
    """chi^2 * noise^2 of depth * profile + offset for every row of ``g``."""
    n, s1, sdd = d.size, d.sum(), d @ d
    sd, gg, g1 = g @ d, (g * g).sum(axis=1), g.sum(axis=1)
    det = gg * n - g1 * g1
    det = np.where(det > 1e-12, det, np.inf)  # a profile that is flat on the window
    a = (sd * n - g1 * s1) / det
    c = (s1 - a * g1) / n
    return sdd - a * sd - c * s1


def _pair_chi(d: np.ndarray, g1: np.ndarray, g2: np.ndarray):
    """chi^2 * noise^2, both depths and their variances / noise^2 for every pair of rows.

    The free offset is removed by centring data and profiles; the two depths then follow
    from a 2x2 system solved in closed form for all pairs at once.
    """
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        return _pair_chi_unguarded(d, g1, g2)


def _pair_chi_unguarded(d: np.ndarray, g1: np.ndarray, g2: np.ndarray):
    a = g1 - g1.mean(axis=1, keepdims=True)
    b = g2 - g2.mean(axis=1, keepdims=True)
    dc = d - d.mean()
    gab = a @ b.T
    gaa, gbb = (a * a).sum(axis=1)[:, None], (b * b).sum(axis=1)[None, :]
    sa, sb = (a @ dc)[:, None], (b @ dc)[None, :]
    det = gaa * gbb - gab * gab
    det = np.where(det > 1e-9 * gaa * gbb, det, np.inf)  # identical profiles
    x1 = (gbb * sa - gab * sb) / det
    x2 = (gaa * sb - gab * sa) / det
    return dc @ dc - (x1 * sa + x2 * sb), x1, x2, gbb / det, gaa / det


@dataclass
class ComponentFit:
    """Best one- and two-component solutions (velocities km/s, depths summed over lines).

    ``line_gain`` holds, per line, chi^2(one) - chi^2(two) at the best solutions and
    ``line_depths`` the two depths of each line.
    """

    chi1: float
    k1: int
    chi2: float
    k2: int
    n: int
    single: tuple[float, float, float]  # v, vsini, sigma
    pair: tuple[float, float, float, float, float]  # v1, vsini1, v2, vsini2, sigma
    depths: tuple[float, float]
    depth_errors: tuple[float, float]
    line_gain: list[float] = field(default_factory=list)
    line_depths: list[tuple[float, float]] = field(default_factory=list)

    @property
    def delta_bic(self) -> float:
        """BIC(one) - BIC(two), BIC = chi^2 + k ln n (Schwarz 1978)."""
        ln = math.log(max(self.n, 2))
        return (self.chi1 + self.k1 * ln) - (self.chi2 + self.k2 * ln)


def _best_single(data: LineData, vgrid, shapes, noise):
    bases = _bases(data, vgrid, shapes)
    per = [_single_chi(d, g) / noise**2 for d, g in zip(data.depth, bases)]
    j = int(np.argmin(np.sum(per, axis=0)))
    s, vs = shapes[j // vgrid.size]
    return float(vgrid[j % vgrid.size]), vs, s, [float(p[j]) for p in per]


def _best_pair(data: LineData, set1, set2, noise):
    """Best pair (row of set 1, row of set 2); each set is (vgrid, [(sigma, vsini)])."""
    b1, b2 = _bases(data, *set1), _bases(data, *set2)
    chi, dep1, dep2, var1, var2 = 0.0, 0.0, 0.0, 0.0, 0.0
    per = []
    for d, g1, g2 in zip(data.depth, b1, b2):
        c, x1, x2, v1, v2 = _pair_chi(d, g1, g2)
        chi, dep1, dep2 = chi + c, dep1 + x1, dep2 + x2
        var1, var2 = var1 + v1, var2 + v2
        per.append((c, x1, x2))
    chi = np.where((dep1 > 0) & (dep2 > 0), chi, np.inf)
    p, q = np.unravel_index(int(np.argmin(chi)), chi.shape)
    (v1g, sh1), (v2g, sh2) = set1, set2
    s1, vs1 = sh1[p // v1g.size]
    _, vs2 = sh2[q // v2g.size]
    pair = (float(v1g[p % v1g.size]), vs1, float(v2g[q % v2g.size]), vs2, s1)
    errs = (noise * math.sqrt(float(var1[p, q])), noise * math.sqrt(float(var2[p, q])))
    lines = [(float(c[p, q]) / noise**2, (float(x1[p, q]), float(x2[p, q])))
             for c, x1, x2 in per]
    return float(chi[p, q]) / noise**2, pair, (float(dep1[p, q]), float(dep2[p, q])), errs, \
        lines


def fit_components(data: LineData, noise: float, sigma_inst: float,
                   v_guess: float) -> ComponentFit:
    """Coarse-to-fine grid search of one and two components.

    Parameters
    ----------
    data : LineData
        The line windows.
    noise : float
        Noise per pixel of the normalized flux.
    sigma_inst : float
        Instrumental Gaussian sigma (km/s).
    v_guess : float
        Centre of the velocity search (+-350 km/s).
    """
    n_lines = len(data.ids)
    coarse = min(40.0, sigma_inst * 2.3548 / 2.0)
    fine = coarse / 4.0
    vgrid = v_guess + np.arange(-350.0, 350.0 + coarse / 2, coarse)
    sig1 = tuple(math.hypot(sigma_inst, x) for x in INTRINSIC_SIGMA_SINGLE)
    v0, vs0, s0, _ = _best_single(data, vgrid, [(s, vs) for s in sig1
                                                for vs in VSINI_SINGLE], noise)
    near = v0 + fine * np.arange(-6, 7)
    vs_near = sorted({max(vs0 + dv, 0.0) for dv in (-20.0, -10.0, 0.0, 10.0, 20.0)})
    v0, vs0, s0, per1 = _best_single(data, near, [(s, vs) for s in sig1 for vs in vs_near],
                                     noise)
    sig2 = tuple(math.hypot(sigma_inst, x) for x in INTRINSIC_SIGMA_PAIR)
    # pairs share sigma: search each sigma separately on the coarse grid
    best = None
    for s in sig2:
        shapes = [(s, vs) for vs in VSINI_PAIR]
        cand = _best_pair(data, (vgrid, shapes), (vgrid, shapes), noise)
        if best is None or cand[0] < best[0]:
            best = cand
    v1, vs1, v2, vs2, s = best[1]
    offs = fine * np.arange(-4, 5)
    chi2, pair, depths, errs, lines = _best_pair(data, (v1 + offs, [(s, vs1)]),
                                                 (v2 + offs, [(s, vs2)]), noise)
    if not chi2 <= best[0]:
        chi2, pair, depths, errs, lines = best
    gain = [c1 - c2 for c1, (c2, _) in zip(per1, lines)]
    return ComponentFit(
        chi1=float(sum(per1)), k1=3 + 2 * n_lines, chi2=chi2, k2=5 + 3 * n_lines, n=data.n,
        single=(v0, vs0, s0), pair=pair, depths=depths, depth_errors=errs,
        line_gain=gain, line_depths=[x for _, x in lines])
