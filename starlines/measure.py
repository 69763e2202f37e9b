"""Equivalent widths, centroids, velocities and widths of every catalogue line in range.

Each fit group planned by :mod:`starlines.blends` is fitted once, simultaneously, in the
continuum-normalized spectrum (:mod:`starlines.profiles`): Balmer lines as a Gaussian core
plus Lorentzian wing, all other lines as Gaussians, on a local linear baseline whose prior
is the continuum placement and its error from :mod:`starlines.continuum`. The equivalent
width of a line is the area of its fitted component (so wings beyond the window count and
neighbours do not), positive for absorption and negative for emission.

Uncertainties come from the fit covariance. The pixel errors are the spectrum's
uncertainty array when given, else the DER_SNR noise; the covariance is then scaled by the
reduced chi-square of the fit residuals (never below 1 with a stated uncertainty array),
so unmodelled structure, correlated noise and weak neighbours inflate the error instead of
being ignored; the baseline prior adds the continuum-placement term.

Differences from a plain integration such as ``specutils.analysis.equivalent_width``: that
integrates 1 - F/F_c over a fixed window on a given continuum; here blends are separated by
the profile fit, a local baseline absorbs residual continuum slope, wings beyond the window
are included through the profile, and every number carries an error. On an isolated
Gaussian on a flat continuum both agree to ~1 % (``tests/test_measure.py``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from starlines.blas import one_blas_thread
from starlines.blends import FitGroup, PlannedLine, plan_lines
from starlines.continuum import ContinuumFit, fit_continuum
from starlines.errors import ConfigError, MeasurementError
from starlines.fitting import BlendFit, fit_blends, problem
from starlines.lines import Line, line, lines_in_range
from starlines.profiles import (
    C_KMS,
    FWHM_PER_SIGMA,
    BlendModel,
    Component,
    gaussian,
    lorentz_fraction,
    lorentzian,
    profile_fwhm,
)
from starlines.spectrum import Spectrum
from starlines.vsini import VsiniResult, vsini_kernel_fit

__all__ = ["measure_lines", "measure_spectrum", "Measurement", "STATUSES",
           "DETECTION_SIGMA", "NEAR_MARGIN"]

#: Line statuses, in the order of the contract.
STATUSES = ("measured", "not detected", "blended", "outside range", "masked")
#: A line is detected when |EW| / EW error reaches this (common practice: 3 sigma).
DETECTION_SIGMA = 3.0
#: Lines up to this far (Angstrom) outside the spectrum still get an "outside range" row.
NEAR_MARGIN = 30.0
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
#: He I lines tried, in order, for v sin i.
VSINI_LINES = ("HeI4471", "HeI4922", "HeI4388", "HeI4026")

_COLUMNS = ("ew", "ew_err", "centroid", "centroid_err", "rv", "rv_err", "fwhm", "depth",
            "significance", "chi2_red")


@dataclass
class Measurement:
    """A spectrum, its continuum fit and its line table."""

    spectrum: Spectrum
    continuum: ContinuumFit
    table: object  # astropy.table.QTable


def _initial(model: BlendModel, members, x, y, err, fwhm, v0, cerr):
    """Starting parameters (areas by linear least squares), prior widths, free parameters.

    Velocities and widths are fitted only for components detected in the linear fit with
    the expected shape; the others keep that shape and only their area is fitted.
    """
    p = np.zeros(model.npar)
    prior = np.full(model.npar, np.inf)
    p[0], prior[0:2] = 1.0, np.hypot(cerr, CONTINUUM_FLOOR)
    for k, (c, pl) in enumerate(zip(model.components, members)):
        iv, iw = 2 + c.vgroup, 2 + model.nv + c.wgroup
        p[iv] = v0
        ia = model.amp_index[k]
        if pl.line.kind == "balmer":
            prior[iv] = 100.0
            p[iw], prior[iw] = np.log(np.hypot(fwhm, 3.0) / FWHM_PER_SIGMA), 1.0
            p[ia + 2], prior[ia + 2] = np.log(2.5), 1.0
        else:
            prior[iv] = max(30.0, 0.25 * C_KMS * pl.fwhm / pl.rest)
            p[iw], prior[iw] = np.log(pl.fwhm / FWHM_PER_SIGMA), 0.35
            if c.shape == "wing":  # Stark wings of a strong He line
                p[ia + 2], prior[ia + 2] = np.log(0.4 * pl.fwhm), 1.0
    X = _design(model, p, x)
    try:
        inv = np.linalg.inv(X.T @ X)
        sol, cov = inv @ (X.T @ y), inv * float(np.mean(err**2))
    except np.linalg.LinAlgError:
        sol = np.linalg.lstsq(X, y, rcond=None)[0]
        cov = np.full((X.shape[1], X.shape[1]), np.inf)
    free = np.zeros(model.npar, dtype=bool)
    free[:2] = True
    amp_sigma = np.zeros(len(model.components))
    area_sigma = np.zeros(len(model.components))
    j = 2
    for k, (c, ia) in enumerate(zip(model.components, model.amp_index)):
        nj = 2 if c.shape == "wing" else 1
        area = sol[j:j + nj].sum()
        p[ia] = area
        free[ia] = True
        amp_sigma[k] = np.sqrt(np.diag(cov)[j:j + nj].sum())
        # the Gaussian and Lorentzian columns are anticorrelated: the error of their sum
        # is smaller than amp_sigma (which sets bounds and the He I wing threshold)
        area_sigma[k] = np.sqrt(max(cov[j:j + nj, j:j + nj].sum(), 0.0))
        strong = abs(area) > DETECTION_SIGMA * amp_sigma[k]
        if c.shape == "wing":
            f0 = np.clip(sol[j + 1] / area, 0.2, 0.8) if area != 0 else 0.5
            p[ia + 1], prior[ia + 1] = np.log(f0 / (1.0 - f0)), 3.0
        if strong:  # let its shape float; weak lines keep the expected shape
            free[[2 + c.vgroup, 2 + model.nv + c.wgroup]] = True
            if c.shape == "wing":
                free[ia + 1:ia + 3] = True
        j += nj
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


def _fit_groups(groups: list[FitGroup], w, y, e, good, cerr, fwhm, v0, floor_chi2):
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


def _component_row(fit: BlendFit, k: int) -> dict:
    ew, ew_err = fit.ew(k)
    cen, cen_err = fit.centre(k)
    s, gam = fit.widths(k)
    ia = fit.model.amp_index[k]
    frac = lorentz_fraction(fit.p[ia + 1]) if gam > 0 else 0.0
    ag, al = ew * (1.0 - frac), ew * frac
    depth = ag / (s * np.sqrt(2.0 * np.pi)) + (al / (np.pi * gam) if gam > 0 else 0.0)
    sig = abs(ew) / ew_err if ew_err > 0 else 0.0
    rest = fit.model.components[k].rest
    row = dict(ew=ew, ew_err=ew_err, depth=float(depth), significance=float(sig),
               chi2_red=fit.chi2_red, centroid=np.nan, centroid_err=np.nan, rv=np.nan,
               rv_err=np.nan, fwhm=np.nan)
    if sig >= DETECTION_SIGMA and fit.success:
        row.update(centroid=cen, centroid_err=cen_err, rv=(cen / rest - 1.0) * C_KMS,
                   rv_err=cen_err / rest * C_KMS,
                   fwhm=profile_fwhm(abs(ag), s, abs(al), gam) if gam > 0
                   else FWHM_PER_SIGMA * s)
        row["status"] = "measured"
    else:
        row["status"] = "not detected"
    row["emission"] = bool(row["status"] == "measured" and ew < 0)
    return row


def _vsini(results, fits, w, y, e, good, cf, resolution, res_source) -> VsiniResult | None:
    for ident in VSINI_LINES:
        r = results.get(ident)
        if r is None or r["status"] != "measured" or r["emission"] or r["significance"] < 10:
            continue
        fit, k = fits[ident]
        half = 1.2 * r["fwhm"] + 2.0 * resolution
        i0, i1 = np.searchsorted(w, [r["centroid"] - half, r["centroid"] + half])
        sel = good[i0:i1]
        x = w[i0:i1][sel]
        if x.size < 10:
            continue
        base = fit.p[0] + fit.p[1] * (x - fit.model.xmid) / fit.model.halfspan
        others = sum((fit.model.component_profile(fit.p, x, j)
                      for j in range(len(fit.model.components)) if j != k), np.zeros_like(x))
        yc = (y[i0:i1][sel] + others) / base
        return vsini_kernel_fit(x, yc, e[i0:i1][sel], rest=fit.model.components[k].rest,
                                centre=r["centroid"], instrument_fwhm=resolution,
                                line_id=ident)
    return None


def _resolve_lines(spec: Spectrum, lines) -> list[Line]:
    if lines is None:
        w = spec.wavelength
        return lines_in_range(w[0] - NEAR_MARGIN, w[-1] + NEAR_MARGIN, medium=spec.medium)
    try:
        out = [line(x) if isinstance(x, str) else x for x in lines]
    except KeyError as exc:
        raise ConfigError(str(exc.args[0]), path=spec.path or None) from None
    return sorted(out, key=lambda ln: ln.wavelength_air)


def _resolution(cf: ContinuumFit, results, planned) -> tuple[float, str]:
    if cf.resolution_source in ("header", "argument"):
        return cf.instrument_fwhm, cf.resolution_source
    narrow = [results[p.line.id]["fwhm"] for p in planned
              if p.line.kind in ("metal", "hei") and p.line.id in results
              and results[p.line.id]["status"] == "measured"
              and results[p.line.id]["significance"] > 10 and not results[p.line.id]["emission"]]
    if narrow:  # lower quartile: an upper bound on the instrument, robust to noise
        return float(max(np.percentile(narrow, 25), cf.instrument_fwhm)), \
            "estimated (narrowest lines)"
    return cf.instrument_fwhm, cf.resolution_source


def measure_lines(spec: Spectrum, *, continuum: ContinuumFit | None = None, lines=None):
    """Measure every catalogue line in or near the range of ``spec``.

    Parameters
    ----------
    spec : Spectrum
    continuum : ContinuumFit, optional
        Default :func:`starlines.continuum.fit_continuum` of ``spec``.
    lines : list of str or Line, optional
        Lines to measure; default every catalogue line within ``NEAR_MARGIN`` of the range.

    Returns
    -------
    astropy.table.QTable
        One row per line (columns in the module contract, see DEVELOPERS.md).

    Raises
    ------
    MeasurementError
        If no catalogue line lies in or near the spectrum.
    ConfigError
        If ``lines`` names an unknown line id.
    """
    spec.validate()
    with one_blas_thread():
        return _measure_lines(spec, continuum, lines)


def _measure_lines(spec: Spectrum, continuum: ContinuumFit | None, lines):
    cf = continuum if continuum is not None else fit_continuum(spec)
    todo = _resolve_lines(spec, lines)
    if not todo:
        raise MeasurementError(
            f"no catalogue line within {spec.wavelength[0]:.1f}-{spec.wavelength[-1]:.1f} A",
            path=spec.path)
    w = spec.wavelength
    good = spec.good & np.isfinite(cf.normalized)
    y = np.where(good, cf.normalized, 1.0)
    e = cf.normalized_err
    planned, groups = plan_lines(todo, w, good, spec.medium, cf.line_fwhm, cf.velocity_guess)
    results: dict[str, dict] = {}
    fits: dict[str, tuple[BlendFit, int]] = {}
    floor = cf.snr_source == "uncertainty"
    group_fits = _fit_groups(groups, w, y, e, good, cf.continuum_err, cf.line_fwhm,
                             cf.velocity_guess, floor)
    for gi, (g, fit) in enumerate(zip(groups, group_fits)):
        for k, pl in enumerate(g.members):
            if fit is None:
                pl.status = "masked"
                continue
            results[pl.line.id] = dict(_component_row(fit, k), fit_group=gi)
            fits[pl.line.id] = (fit, k)
    resolution, res_source = _resolution(cf, results, planned)
    vs = _vsini(results, fits, w, y, e, good, cf, resolution, res_source)
    return _build_table(spec, cf, planned, results, resolution, res_source, vs)


def _build_table(spec, cf, planned: list[PlannedLine], results, resolution, res_source, vs):
    import astropy.units as u
    from astropy.table import QTable

    n = len(planned)
    cols = {c: np.full(n, np.nan) for c in _COLUMNS}
    status, emission, group = [], np.zeros(n, dtype=bool), np.full(n, -1)
    for i, pl in enumerate(planned):
        r = results.get(pl.line.id)
        if r is None or pl.status:
            status.append(pl.status or "masked")
            continue
        for c in _COLUMNS:
            cols[c][i] = r[c]
        status.append(r["status"])
        emission[i], group[i] = r["emission"], r["fit_group"]
    t = QTable()
    t["line"] = [p.line.id for p in planned]
    t["ion"] = [p.line.ion for p in planned]
    t["kind"] = [p.line.kind for p in planned]
    t["wavelength_air"] = np.array([p.line.wavelength_air for p in planned]) * u.AA
    t["wavelength_rest"] = np.array([p.rest for p in planned]) * u.AA
    for c in ("ew", "ew_err", "centroid", "centroid_err", "fwhm"):
        t[c] = cols[c] * u.AA
    t["rv"] = cols["rv"] * (u.km / u.s)
    t["rv_err"] = cols["rv_err"] * (u.km / u.s)
    for c in ("depth", "significance", "chi2_red"):
        t[c] = cols[c]
    t["status"] = status
    t["emission"] = emission
    t["blended_with"] = [",".join(p.blended_with) for p in planned]
    t["fit_group"] = group
    for c in ("ew", "ew_err", "fwhm", "depth"):
        t[c].info.format = ".4f"
    for c in ("centroid", "centroid_err", "rv", "rv_err", "significance", "chi2_red"):
        t[c].info.format = ".3f"
    t.meta.update(
        snr=float(cf.snr), snr_source=cf.snr_source, medium=spec.medium,
        medium_assumed=bool(spec.medium_assumed),
        resolution_fwhm=float(resolution), resolution_source=res_source,
        line_fwhm=float(cf.line_fwhm),
        vsini=float(vs.vsini) if vs else float("nan"),
        vsini_err=float(vs.vsini_err) if vs else float("nan"),
        vsini_upper_limit=bool(vs.upper_limit) if vs else False,
        vsini_line=vs.line if vs else "", vsini_method=vs.method if vs else "",
        vsini_floor=float(vs.floor) if vs else float("nan"),
        continuum_scatter=float(cf.scatter), continuum_fraction_kept=float(cf.fraction_kept),
        continuum_already_normalized=bool(cf.already_normalized),
        reference_line=cf.reference_line,
        detection_sigma=DETECTION_SIGMA,
    )
    return t


def measure_spectrum(spec: Spectrum, *, lines=None) -> Measurement:
    """Continuum fit plus line measurement of one spectrum.

    Parameters
    ----------
    spec : Spectrum
    lines : list of str or Line, optional
        Passed to :func:`measure_lines`.

    Returns
    -------
    Measurement
    """
    spec.validate()
    with one_blas_thread():
        cf = fit_continuum(spec)
        return Measurement(spectrum=spec, continuum=cf,
                           table=measure_lines(spec, continuum=cf, lines=lines))
