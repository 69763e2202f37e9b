"""Equivalent widths, centroids, velocities and widths of every catalogue line in range.

Each fit group planned by :mod:`starlines.blends` is fitted once, simultaneously, in the
continuum-normalized spectrum (:mod:`starlines.profiles`): Balmer lines, strong He lines and
the strong He II lines 4686 and 5411 as a Gaussian core plus Lorentzian wing, all other
lines as Gaussians, on a local linear baseline whose prior is the continuum placement and
its error from :mod:`starlines.continuum` (set-up in :mod:`starlines.groupfit`; all groups
of a spectrum are solved in one vectorised pass, :mod:`starlines.batchfit`). The equivalent
width of a line is the area of its fitted component (so wings beyond the window count and
neighbours do not), positive for absorption and negative for emission.

Uncertainties come from the fit covariance. The pixel errors are the spectrum's
uncertainty array when given, else the DER_SNR noise; the covariance is then scaled by the
reduced chi-square of the fit residuals (never below 1 with a stated uncertainty array),
so unmodelled structure, correlated noise and weak neighbours inflate the error instead of
being ignored; the baseline prior adds the continuum-placement term.

v sin i (``meta["vsini"]``) comes from the kernel fit of :mod:`starlines.vsini` to the
intrinsically narrowest lines measured at >= ``VSINI_MIN_SIGMA``: metal lines, then He I
lines with s/p upper levels, combined, and a diffuse He I line only as the fallback
(``VSINI_TIERS``, :func:`_vsini`); ``vsini_line`` names the lines used, ``vsini_method``
the tiers, ``vsini_upper_limit`` / ``vsini_floor`` the resolution floor.

Differences from a plain integration such as ``specutils.analysis.equivalent_width``: that
integrates 1 - F/F_c over a fixed window on a given continuum; here blends are separated by
the profile fit, a local baseline absorbs residual continuum slope, wings beyond the window
are included through the profile, and every number carries an error. On an isolated
Gaussian on a flat continuum both agree to ~1 % (``tests/test_measure.py``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from starlines.blas import one_blas_thread
from starlines.blends import PlannedLine, plan_lines
from starlines.continuum import ContinuumFit, fit_continuum
from starlines.errors import ConfigError, MeasurementError
from starlines.fitting import BlendFit
from starlines.groupfit import DETECTION_SIGMA, fit_groups
from starlines.lines import Line, line, lines_in_range
from starlines.profiles import C_KMS, FWHM_PER_SIGMA, lorentz_fraction, profile_fwhm
from starlines.quality import TYPING_REGION
from starlines.spectrum import Spectrum
from starlines.vsini import (
    LineEstimate,
    VsiniResult,
    combine_estimates,
    kernel_fit_estimate,
    resolution_floor,
)

__all__ = ["measure_lines", "measure_spectrum", "Measurement", "STATUSES",
           "DETECTION_SIGMA", "NEAR_MARGIN"]

#: Line statuses, in the order of the contract.
STATUSES = ("measured", "not detected", "blended", "outside range", "masked")
#: Lines up to this far (Angstrom) outside the spectrum still get an "outside range" row.
NEAR_MARGIN = 30.0
#: Lines for v sin i in tiers of increasing intrinsic width: (tier name, line ids).
#: Common practice for OB stars (from memory): v sin i from Si III 4553/4568/4575 and
#: Mg II 4481 in B stars, Si IV 4089/4116 in late O stars (metal lines: Stark widths small
#: at photospheric densities); next He I lines with an s or p upper level (4713 2p 3P -
#: 4s 3S, 5016 2s 1S - 3p 1P), narrower than the diffuse lines but strong enough to
#: saturate (and read high in slow rotators) in helium-rich stars; last the diffuse He I
#: lines (nd/nf upper levels with forbidden components: large Stark widths that the kernel
#: fit does not model, so they read high for slow rotators).
#: Known blends not in the catalogue (from memory): Mg II 4481 with Al III 4480 in
#: supergiants, Si IV 4089 with O II 4089; blends read high, never low.
#: How the tiers are used: see :func:`_vsini`.
VSINI_TIERS = (
    ("metal", ("SiIII4553", "SiIII4568", "SiIII4575", "MgII4481", "SiIV4116", "SiIV4089")),
    ("He I s/p", ("HeI4713", "HeI5016")),
    ("diffuse He I", ("HeI4471", "HeI4922", "HeI4388", "HeI4026")),
)
#: The narrow tiers stop adding lines once the combined 1-sigma error is at most this
#: fraction of max(v sin i, resolution floor): precise enough that the next, intrinsically
#: broader tier could only add its bias (a choice; on the synthetic model the He I s/p lines
#: read ~50 km/s high at 60 km/s in a helium-strong B2 V, tests/test_vsini.py).
VSINI_PRECISION = 0.10
#: A line is not used for v sin i when a stronger measured line of its fit group lies
#: closer than this many mean FWHM of the two: the line then sits in the other's wing and
#: its shape depends on how well the neighbour's profile model is subtracted (a choice:
#: Mg II 4481 beside He I 4471 read 14 % low at 300 km/s on the injected-rotation test).
VSINI_CLEAR_FWHM = 2.0
#: Minimum detection significance (|EW| / error) of a line used for v sin i: the profile
#: shape, not only the area, must be well defined (a choice: 2.5x the detection limit).
VSINI_MIN_SIGMA = 10.0

_COLUMNS = ("ew", "ew_err", "centroid", "centroid_err", "rv", "rv_err", "fwhm", "depth",
            "significance", "chi2_red")


@dataclass
class Measurement:
    """A spectrum, its continuum fit and its line table."""

    spectrum: Spectrum
    continuum: ContinuumFit
    table: object  # astropy.table.QTable


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


def _in_stronger_wing(r: dict, fit: BlendFit, k: int, results) -> bool:
    """True if a stronger measured line of the same fit group overlaps line ``k``
    (closer than ``VSINI_CLEAR_FWHM`` mean FWHM)."""
    for j, comp in enumerate(fit.model.components):
        o = results.get(comp.name)
        if j == k or o is None or o["status"] != "measured" or abs(o["ew"]) <= abs(r["ew"]):
            continue
        if abs(o["centroid"] - r["centroid"]) < VSINI_CLEAR_FWHM * 0.5 * (o["fwhm"] + r["fwhm"]):
            return True
    return False


def _vsini_window(ident, results, fits, w, y, e, good, resolution):
    """Pixels of line ``ident`` with its fitted neighbours removed, or None if unusable.

    Returns ``(x, y_clean, err, rest, centre)``: wavelength (Angstrom), flux divided by the
    fitted local baseline after adding back the other components of its fit group, error.
    """
    r = results.get(ident)
    if (r is None or r["status"] != "measured" or r["emission"]
            or r["significance"] < VSINI_MIN_SIGMA):
        return None
    fit, k = fits[ident]
    if _in_stronger_wing(r, fit, k, results):
        return None
    half = 1.2 * r["fwhm"] + 2.0 * resolution
    i0, i1 = np.searchsorted(w, [r["centroid"] - half, r["centroid"] + half])
    sel = good[i0:i1]
    x = w[i0:i1][sel]
    if x.size < 10:
        return None
    base = fit.p[0] + fit.p[1] * (x - fit.model.xmid) / fit.model.halfspan
    others = sum((fit.model.component_profile(fit.p, x, j)
                  for j in range(len(fit.model.components)) if j != k), np.zeros_like(x))
    yc = (y[i0:i1][sel] + others) / base
    return x, yc, e[i0:i1][sel], fit.model.components[k].rest, r["centroid"]


def _line_estimate(ident, window, resolution) -> LineEstimate:
    x, yc, err, rest, centre = window
    v, v_err = kernel_fit_estimate(x, yc, err, centre=centre, instrument_fwhm=resolution)
    return LineEstimate(ident, v, v_err, resolution_floor(rest, resolution))


def _tier_estimates(ids, results, fits, w, y, e, good, resolution,
                    first_only: bool = False) -> list[LineEstimate]:
    out = []
    for ident in ids:
        win = _vsini_window(ident, results, fits, w, y, e, good, resolution)
        if win is not None:
            out.append(_line_estimate(ident, win, resolution))
            if first_only:
                break
    return out


def _combined(estimates: list[LineEstimate], tiers: list[str]) -> VsiniResult:
    res = combine_estimates(estimates, "kernel fit, " + " + ".join(tiers) + " lines")
    n_kept = res.line.count(",") + 1
    res.method += (f" ({n_kept} of {len(estimates)} kept)" if n_kept < len(estimates)
                   else f" ({n_kept})")
    return res


def _precise(res: VsiniResult) -> bool:
    """Combined error at most VSINI_PRECISION of max(v sin i, floor) (limits: of the floor)."""
    if res.upper_limit:  # the limit is max(floor, v + 2 err): precise if it is the floor
        return res.vsini <= res.floor * (1.0 + VSINI_PRECISION)
    return res.vsini_err <= VSINI_PRECISION * max(res.vsini, res.floor)


def _vsini(results, fits, w, y, e, good, resolution) -> VsiniResult | None:
    """v sin i from the narrowest lines that measure it well enough; None if no line can.

    The narrow tiers of :data:`VSINI_TIERS` are taken cumulatively: the metal lines first;
    if they are absent or their combined result is not :func:`_precise`, the He I s/p lines
    are added and all are combined again (:func:`starlines.vsini.combine_estimates`:
    clipped inverse-variance weighted mean), and so on. Fast rotators, whose weak metal
    lines are washed out, thus get the He I s/p lines, where rotation dominates the width;
    slow rotators observed at high resolution keep the metal lines. Only when no narrow
    line is measured well enough is the first usable diffuse He I line (in the order
    given) fitted alone: their Stark widths differ by factors of several, so a mean of
    them would mix biases.
    """
    estimates: list[LineEstimate] = []
    used: list[str] = []
    res = None
    *narrow, (diffuse_name, diffuse_ids) = VSINI_TIERS
    for tier, ids in narrow:
        new = _tier_estimates(ids, results, fits, w, y, e, good, resolution)
        if not new:
            continue
        estimates += new
        used.append(tier)
        res = _combined(estimates, used)
        if _precise(res):
            return res
    if res is not None:
        return res
    new = _tier_estimates(diffuse_ids, results, fits, w, y, e, good, resolution,
                          first_only=True)
    return _combined(new, [diffuse_name]) if new else None


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
    group_fits = fit_groups(groups, w, y, e, good, cf.continuum_err, cf.line_fwhm,
                             cf.velocity_guess, floor)
    for gi, (g, fit) in enumerate(zip(groups, group_fits)):
        for k, pl in enumerate(g.members):
            if fit is None:
                pl.status = "masked"
                continue
            results[pl.line.id] = dict(_component_row(fit, k), fit_group=gi)
            fits[pl.line.id] = (fit, k)
    resolution, res_source = _resolution(cf, results, planned)
    vs = _vsini(results, fits, w, y, e, good, resolution)
    return _build_table(spec, cf, planned, results, resolution, res_source, vs)


def _pixel_step(spec: Spectrum) -> float:
    """Median pixel size (Angstrom) over the good pixels; NaN with fewer than two."""
    good = spec.wavelength[spec.good]
    return float(np.median(np.diff(good))) if good.size > 1 else float("nan")


def _good_range(spec: Spectrum) -> tuple[float, float]:
    """First and last good wavelength (Angstrom)."""
    good = spec.wavelength[spec.good]
    return (float(good[0]), float(good[-1])) if good.size else (float("nan"), float("nan"))


def region_snr(wavelength: np.ndarray, cf: ContinuumFit, region: tuple[float, float],
               line_wavelength: np.ndarray, chi2_red: np.ndarray) -> float:
    """Effective S/N per pixel in ``region`` (Angstrom), as the line fits see it.

    The median 1 / error of the continuum pixels there (error array or local DER_SNR),
    divided by sqrt of the median reduced chi-square of the line fits in the region when it
    exceeds 1: DER_SNR misses noise correlated over a few pixels (resampled spectra), the
    fit residuals do not (MILES HD 216916, blue noise-dominated: 24 from the errors, median
    chi-square 24, effective 4.9; clean MILES B stars: median chi-square 2-5). NaN with
    fewer than 20 continuum pixels in the region.
    """
    w = np.asarray(wavelength, float)
    m = (w >= region[0]) & (w <= region[1]) & cf.kept & np.isfinite(cf.normalized_err)
    if m.sum() < 20:
        return float("nan")
    err = float(np.median(cf.normalized_err[m]))
    lw = np.asarray(line_wavelength, float)
    c = np.asarray(chi2_red, float)[(lw >= region[0]) & (lw <= region[1])]
    c = c[np.isfinite(c)]
    inflation = math.sqrt(max(float(np.median(c)), 1.0)) if c.size else 1.0
    return float(1.0 / (err * inflation)) if err > 0 else float("nan")


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
    aa, kms = u.AA, u.km / u.s
    data = {
        "line": [p.line.id for p in planned],
        "ion": [p.line.ion for p in planned],
        "kind": [p.line.kind for p in planned],
        "wavelength_air": np.array([p.line.wavelength_air for p in planned]) * aa,
        "wavelength_rest": np.array([p.rest for p in planned]) * aa,
        **{c: cols[c] * aa for c in ("ew", "ew_err", "centroid", "centroid_err", "fwhm")},
        "rv": cols["rv"] * kms,
        "rv_err": cols["rv_err"] * kms,
        **{c: cols[c] for c in ("depth", "significance", "chi2_red")},
        "status": status,
        "emission": emission,
        "blended_with": [",".join(p.blended_with) for p in planned],
        "fit_group": group,
    }
    t = QTable(data, copy=False)
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
        pixel_step=_pixel_step(spec),
        wavelength_range=_good_range(spec),
        snr_typing_region=region_snr(spec.wavelength, cf, TYPING_REGION,
                                     data["wavelength_air"].value, cols["chi2_red"]),
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
