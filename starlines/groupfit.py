"""Fit groups of lines: starting values, priors, bounds, profile shapes, the batched fit
and the refit without unmodelled lines (used by :mod:`starlines.measure`).

Per group (planned by :mod:`starlines.blends`): a linear least-squares fit of the areas at
the expected shapes gives the starting areas and their errors; lines detected there get free
velocity and width, the others keep the expected shape and only their area is fitted (a
clearly undetected line costs one linear solve). Balmer lines, strong He lines and the
strong isolated He II lines get a Lorentzian (Stark) wing. All groups of a spectrum are then
fitted at once (:func:`starlines.fitting.fit_blends`); groups whose residuals show lines
missing from the catalogue are refitted without those pixels.
"""

from __future__ import annotations

import math

import numpy as np

from starlines.blends import FitGroup
from starlines.fitting import BlendFit, fit_blends, problem
from starlines.profiles import C_KMS, FWHM_PER_SIGMA, BlendModel, Component, gaussian, lorentzian

__all__ = ["fit_groups", "DETECTION_SIGMA", "STARK_WING_LINES", "WING_SIGNIFICANCE"]

#: A line is detected when |EW| / EW error reaches this (common practice: 3 sigma).
DETECTION_SIGMA = 3.0
#: Floor of the relative continuum-placement prior on the local baseline (common practice).
CONTINUUM_FLOOR = 1e-3
#: Residual clipping of lines missing from the catalogue: done when the reduced chi-square
#: exceeds CLIP_CHI2; pixels beyond CLIP_SIGMA (robust) outside the fitted cores are dropped.
CLIP_CHI2 = 3.0
CLIP_SIGMA = 4.0
#: Line-id prefixes of lines that go into emission in O, Of, Oe and Be stars (common
#: practice): Balmer, He II 4686, N III 4634-42, C III 4647-51, Si IV (Of), He I 5876/6678.
EMISSION_PRONE = ("HI", "HeII4686", "NIII", "CIII", "SiIV", "HeI5876", "HeI6678")
#: Largest Lorentzian half-width (Angstrom) of a Balmer wing: Stark widths of B dwarfs are a
#: few Angstrom (common practice); broader "wings" would only absorb continuum errors.
MAX_LORENTZ_HWHM = 12.0
#: He lines measured at least this many sigma get a Lorentzian (Stark) wing besides the
#: Gaussian core; weaker ones are pure Gaussians (common practice: diffuse He I and the
#: He II lines have pressure-broadened wings that a Gaussian misses).
WING_SIGNIFICANCE = 30.0
#: (The significance there is the linear-fit area over the root sum of its Gaussian and
#: Lorentzian variances, covariance left out: about 4x below the area's true significance.)
#: For the lines of :data:`STARK_WING_LINES` the threshold is this many sigma of the true
#: area error.
WING_SIGNIFICANCE_HEII = 10.0
#: The strong, isolated He II lines: hydrogenic, Stark-broadened in every O star; a Gaussian
#: fitted to them loses the wings to the local baseline (-20 % of the equivalent width of
#: 4686 and 5411 against the synthetic models at any S/N, ``tests/test_measure.py``).
#: He II 4541 and 4200 are left out: their neighbours (Si III 4553, N III 4200) trade with a
#: free wing, and the classification criteria are calibrated on them as measured so far.
STARK_WING_LINES = ("HeII4686", "HeII5411")


def _initial(model: BlendModel, members, x, y, err, fwhm, v0, cerr):
    """Starting parameters (areas by linear least squares), prior widths, free parameters.

    Velocities and widths are fitted only for components detected in the linear fit with
    the expected shape; the others keep that shape and only their area is fitted.
    """
    p = np.zeros(model.npar)
    prior = np.full(model.npar, np.inf)
    p[0], prior[0:2] = 1.0, math.hypot(cerr, CONTINUUM_FLOOR)
    for k, (c, pl) in enumerate(zip(model.components, members)):
        iv, iw = 2 + c.vgroup, 2 + model.nv + c.wgroup
        p[iv] = v0
        ia = model.amp_index[k]
        if pl.line.kind == "balmer":
            prior[iv] = 100.0
            p[iw], prior[iw] = math.log(math.hypot(fwhm, 3.0) / FWHM_PER_SIGMA), 1.0
            p[ia + 2], prior[ia + 2] = math.log(2.5), 1.0
        else:
            prior[iv] = max(30.0, 0.25 * C_KMS * pl.fwhm / pl.rest)
            p[iw], prior[iw] = math.log(pl.fwhm / FWHM_PER_SIGMA), 0.35
            if c.shape == "wing":  # Stark wings of a strong He line
                p[ia + 2], prior[ia + 2] = math.log(0.4 * pl.fwhm), 1.0
    X = _design(model, p, x)
    try:
        inv = np.linalg.inv(X.T @ X)
        sol, cov = inv @ (X.T @ y), inv * float(np.mean(err**2))
    except np.linalg.LinAlgError:
        sol = np.linalg.lstsq(X, y, rcond=None)[0]
        cov = np.full((X.shape[1], X.shape[1]), np.inf)
    free = np.zeros(model.npar, dtype=bool)
    free[:2] = True
    n = len(model.components)
    amp_sigma, area_sigma = np.zeros(n), np.zeros(n)
    s, var, cv = sol.tolist(), np.diagonal(cov).tolist(), np.diagonal(cov, 1).tolist()
    j = 2
    for k, (c, ia) in enumerate(zip(model.components, model.amp_index)):
        wing = c.shape == "wing"
        area = s[j] + s[j + 1] if wing else s[j]
        p[ia] = area
        free[ia] = True
        v = var[j] + var[j + 1] if wing else var[j]
        amp_sigma[k] = math.sqrt(v)
        # the Gaussian and Lorentzian columns are anticorrelated: the error of their sum
        # is smaller than amp_sigma (which sets bounds and the He I wing threshold)
        area_sigma[k] = math.sqrt(max(v + 2.0 * cv[j], 0.0)) if wing else amp_sigma[k]
        strong = abs(area) > DETECTION_SIGMA * amp_sigma[k]
        if wing:
            f0 = min(max(s[j + 1] / area, 0.2), 0.8) if area != 0 else 0.5
            p[ia + 1], prior[ia + 1] = math.log(f0 / (1.0 - f0)), 3.0
        if strong:  # let its shape float; weak lines keep the expected shape
            free[2 + c.vgroup] = free[2 + model.nv + c.wgroup] = True
            if wing:
                free[ia + 1:ia + 3] = True
        j += 2 if wing else 1
    return p, prior, free, amp_sigma, area_sigma


def _design(model: BlendModel, p: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Columns of the linear model at fixed shapes: baseline, then per component its
    Gaussian (and Lorentzian for ``"wing"`` shapes) of unit area, absorbed."""
    cols = [np.ones_like(x), (x - model.xmid) / model.halfspan]
    for c, ia in zip(model.components, model.amp_index):
        mu = c.rest * (1.0 + p[2 + c.vgroup] / C_KMS)
        cols.append(-gaussian(x, mu, np.exp(p[2 + model.nv + c.wgroup])))
        if c.shape == "wing":
            cols.append(-lorentzian(x, mu, np.exp(p[ia + 2])))
    return np.column_stack(cols)


def _bounds(model: BlendModel, p0: np.ndarray, prior: np.ndarray, amp_sigma: np.ndarray,
            dx: float, halfspan: float):
    """Hard limits: velocities and log-widths within 2 prior sigma of the start, widths
    between a third of a pixel and the window half-span, Lorentzian half-widths below a
    quarter of the half-span (broader wings trade against the baseline); lines that do not
    go into emission in hot stars (:data:`EMISSION_PRONE`) may go negative only by noise
    (3 sigma of the linear first guess), so two blended components cannot cancel."""
    lo, hi = np.full(model.npar, -np.inf), np.full(model.npar, np.inf)
    shape = slice(2, 2 + model.nv + model.nw)
    lo[shape], hi[shape] = p0[shape] - 2.0 * prior[shape], p0[shape] + 2.0 * prior[shape]
    s = slice(2 + model.nv, 2 + model.nv + model.nw)
    lo[s] = np.maximum(lo[s], np.log(dx / 3.0))
    hi[s] = np.minimum(hi[s], np.log(halfspan))
    for k, (c, ia) in enumerate(zip(model.components, model.amp_index)):
        if c.shape == "wing":
            lo[ia + 2] = np.log(dx / 3.0)
            hi[ia + 2] = np.log(min(halfspan / 4.0, MAX_LORENTZ_HWHM))
        if not _emission_prone(c.name):
            lo[ia] = -DETECTION_SIGMA * amp_sigma[k]
    return lo, hi


def _emission_prone(ident: str) -> bool:
    return ident.startswith(EMISSION_PRONE)


def _setup_group(g: FitGroup, w, y, e, good, cerr, fwhm, v0, floor_chi2):
    """The fit problem of group ``g`` (None when too few good pixels remain)."""
    i0, i1 = np.searchsorted(w, [g.lo, g.hi])
    m = good[i0:i1]
    x, yy, ee = w[i0:i1][m], y[i0:i1][m], e[i0:i1][m]
    cmean = float(np.mean(cerr[i0:i1]))
    # He lines on a Balmer wing stay Gaussian: their own wings would trade against it
    on_balmer = any(pl.line.kind == "balmer" for pl in g.members)
    shapes = ["wing" if pl.line.kind == "balmer"
              or (pl.line.kind in ("hei", "heii") and not on_balmer) else "gauss"
              for pl in g.members]
    for attempt in (0, 1):
        comps = [Component(pl.line.id, pl.rest, sh, vg, wg)
                 for pl, sh, vg, wg in zip(g.members, shapes, g.vgroup, g.wgroup)]
        model = BlendModel(comps, 0.5 * (g.lo + g.hi), 0.5 * (g.hi - g.lo))
        if x.size < model.npar + 3:
            return None
        p0, prior, free, amp_sigma, area_sigma = _initial(model, g.members, x, yy, ee, fwhm,
                                                          v0, cmean)
        # He lines keep a Lorentzian wing only when strong enough to constrain it
        need = [WING_SIGNIFICANCE_HEII * area_sigma[k] if pl.line.id in STARK_WING_LINES
                else WING_SIGNIFICANCE * amp_sigma[k] for k, pl in enumerate(g.members)]
        weak = [k for k, pl in enumerate(g.members) if shapes[k] == "wing"
                and pl.line.kind != "balmer" and abs(p0[model.amp_index[k]]) < need[k]]
        if attempt or not weak:
            break
        for k in weak:
            shapes[k] = "gauss"
    p0[model.amp_index] = np.maximum(p0[model.amp_index], -DETECTION_SIGMA * amp_sigma)
    dx = (x[-1] - x[0]) / max(x.size - 1, 1)
    bounds = _bounds(model, p0, prior, amp_sigma, float(dx), model.halfspan)
    return problem(model, x, yy, ee, p0, prior, free=free, bounds=bounds,
                   floor_chi2=floor_chi2)


def fit_groups(groups: list[FitGroup], w, y, e, good, cerr, fwhm, v0, floor_chi2):
    """Fit every group at once; refit, without them, the groups whose residuals show
    lines missing from the catalogue (reduced chi-square above :data:`CLIP_CHI2`)."""
    probs = [_setup_group(g, w, y, e, good, cerr, fwhm, v0, floor_chi2) for g in groups]
    todo = [i for i, pr in enumerate(probs) if pr is not None]
    fits: list[BlendFit | None] = [None] * len(groups)
    for i, fit in zip(todo, fit_blends([probs[i] for i in todo])):
        fits[i] = fit
    redo = []
    for i in todo:
        fit, pr = fits[i], probs[i]
        if fit.chi2_red <= CLIP_CHI2:
            continue
        keep = _unmodelled(fit, pr.x, pr.y, pr.err, groups[i].members)
        if not keep.all() and keep.sum() >= fit.model.npar + 3:
            redo.append(i)
            pr.x, pr.y, pr.err = pr.x[keep], pr.y[keep], pr.err[keep]
    for i, fit in zip(redo, fit_blends([probs[i] for i in redo])):
        fits[i] = fit
    return fits


def _unmodelled(fit: BlendFit, x, y, e, members) -> np.ndarray:
    """Pixels to keep: drop outliers (lines not in the catalogue) outside fitted cores."""
    r = (y - fit.model.evaluate(fit.p, x)) / e
    scale = 1.4826 * np.median(np.abs(r - np.median(r)))
    core = np.zeros(x.size, dtype=bool)
    for k, pl in enumerate(members):
        c, _ = fit.centre(k)
        core |= np.abs(x - c) < pl.fwhm
    # grow each outlier by one pixel on both sides (line wings)
    bad = (np.abs(r) > CLIP_SIGMA * max(scale, 1.0)) & ~core
    bad = bad | np.roll(bad, 1) | np.roll(bad, -1)
    return ~(bad & ~core)
