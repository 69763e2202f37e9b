"""Radial velocities: line centroids, cross-correlation, barycentric frame, SB2 test.

Per-line velocities and their robust mean are in :mod:`starlines.rvlines` (rest
wavelengths checked in the spectrum's own medium; emission, wind, Of-complex, near-emission
and unseparated-blend lines left out; ``lines_used`` and ``lines_rejected`` record the
choice).

The second estimate cross-correlates the normalized spectrum with a template
(:mod:`starlines.ccf`): the caller's, else a synthetic spectrum at the classified type
(:mod:`starlines.synth`), else lines at the catalogue wavelengths with the measured depths
and widths. Both estimates and the SB2 components are then put in the barycentric frame
(:mod:`starlines.barycentric`).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np

from starlines.barycentric import apply_correction, frame_correction
from starlines.errors import VelocityError
from starlines.rvlines import (  # noqa: F401 - re-exported: the velocity stage's line API
    BLEND_ERROR_FACTOR,
    CLIP_NSIGMA,
    MIN_SIGNIFICANCE,
    OF_COMPLEX,
    WIND_LINES,
    _col,
    _detected_kinds,
    combine_velocities,
    line_velocities,
)
from starlines.rvtemplates import catalogue_template, default_template, resolution_of

__all__ = ["VelocityResult", "measure_velocity", "line_velocities", "combine_velocities",
           "default_template", "catalogue_template", "WIND_LINES"]



@dataclass
class VelocityResult:
    """Velocities of one spectrum (km/s, in ``frame``).

    Attributes
    ----------
    rv, rv_err : float
        Robust weighted mean of the line-centroid velocities and its error.
    n_lines : int
        Lines in that mean.
    lines_used : list of str
        Their ids.
    rv_ccf, rv_ccf_err : float
        Cross-correlation velocity and its Zucker (2003) error.
    frame : str
        ``"barycentric"``, ``"heliocentric"`` (as delivered) or ``"topocentric"``.
    barycentric_correction : float
        Correction added (km/s), NaN when none.
    frame_reason : str
        One line on the frame.
    sb2 : bool
        Two velocity components found.
    rv_components : list of float
        The components (stronger first) when ``sb2``.
    flags : list of str
        ``double-lined``, ``velocity-methods-disagree``, ``rv-topocentric``,
        ``medium-assumed``, ``iers-extrapolated``, ``few-rv-lines``.
    lines_rejected : dict
        Line id -> reason it was not used.
    notes : list of str
        Details (SB2 test, template used).
    """

    rv: float = math.nan
    rv_err: float = math.nan
    n_lines: int = 0
    lines_used: list[str] = field(default_factory=list)
    rv_ccf: float = math.nan
    rv_ccf_err: float = math.nan
    frame: str = "topocentric"
    barycentric_correction: float = math.nan
    frame_reason: str = ""
    sb2: bool = False
    rv_components: list[float] = field(default_factory=list)
    flags: list[str] = field(default_factory=list)
    lines_rejected: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    def as_row(self) -> dict:
        """Plain values under the result-row names of DEVELOPERS.md."""
        return {
            "rv": self.rv, "rv_err": self.rv_err, "rv_n_lines": self.n_lines,
            "rv_ccf": self.rv_ccf, "rv_ccf_err": self.rv_ccf_err, "rv_frame": self.frame,
            "barycentric_correction": self.barycentric_correction,
            "rv2": self.rv_components[1] if self.sb2 else math.nan,
            "rv_lines_used": ",".join(self.lines_used), "rv_frame_reason": self.frame_reason,
            "rv_flags": ",".join(self.flags), "rv_notes": "; ".join(self.notes),
        }


def _normalized(spec, continuum):
    """Normalized flux, usable pixels and noise per pixel of the normalized flux."""
    from starlines.snr import der_snr_noise

    if continuum is None:
        from starlines.continuum import fit_continuum

        continuum = fit_continuum(spec)
    norm = np.asarray(getattr(continuum, "normalized", continuum), dtype=float)
    good = spec.good & np.isfinite(norm)
    nerr = getattr(continuum, "normalized_err", None)
    if nerr is not None and np.any(np.isfinite(np.asarray(nerr)[good])):
        noise = float(np.nanmedian(np.asarray(nerr, float)[good]))
    else:
        noise = der_snr_noise(norm, good)
    return norm, good, noise


def _as_template(template, spec):
    if callable(template) or isinstance(template, tuple):
        return template
    arr = np.asarray(template, dtype=float)
    if arr.shape != spec.wavelength.shape:
        raise VelocityError("template array must match the spectrum's wavelength grid or be "
                            "a (wavelength, flux) tuple or a callable", path=spec.path)
    return (spec.wavelength, arr)


#: Hot-star line region used by the CCF when the spectrum covers enough of it (Angstrom).
CCF_REGION = (3850.0, 5050.0)
#: Lines dropped from the centroid mean for these reasons are masked in the CCF too,
#: over +-CCF_EXCLUDE_FWHM times their FWHM.
_CCF_EXCLUDED = ("blended with", "Of emission complex", "near an emission line")
CCF_EXCLUDE_FWHM = 2.5
#: Coarser than this instrumental FWHM (Angstrom) the He and metal lines are washed out
#: and the Balmer lines carry the CCF: their Pickering blends stay in (a pull of < 40 km/s
#: against a precision of 30-100 km/s at 15 A, tests/test_velocity.py, Jacoby spectra).
CCF_BLEND_MASK_MAX_RESOLUTION = 5.0
#: Features not at the star's velocity: interstellar Ca II K, DIBs 4428/5780/5797/6284,
#: Na D, telluric O2 bands (wavelengths from memory; half-widths generous).
FOREIGN_BANDS = ((3928.0, 3940.0), (4410.0, 4450.0), (5770.0, 5805.0), (5885.0, 5900.0),
                 (6270.0, 6300.0), (6860.0, 6960.0), (7160.0, 7340.0), (7590.0, 7700.0))


def _pickering_balmer(table) -> set[str]:
    """Balmer lines with a He II Pickering neighbour, when He II is seen in the star: their
    blend depends on He/H, log g and Teff, so a template of a neighbouring type shifts the
    CCF (by 5-10 km/s for the demo's O supergiant even when the fit separated the lines)."""
    from starlines.lines import line

    ids = [str(x) for x in table["line"]]
    status = [str(s) for s in _col(table, "status", "measured")]
    kinds = _detected_kinds(ids, status, _col(table, "emission", False).astype(bool),
                            np.abs(_col(table, "significance").astype(float)))
    if "heii" not in kinds:
        return set()
    return {i for i in ids if line(i).kind == "balmer"
            and any(line(b).kind == "heii" for b in line(i).blends)}


def _ccf_mask(spec, table, good, rejected: dict[str, str] | None = None,
              resolution: float = 0.0) -> np.ndarray:
    """Usable pixels for the CCF: the hot-star region when covered, without interstellar
    and telluric features, wind lines, lines in or near emission, and lines the centroid
    choice dropped as pulled by an unseparated blend (``rejected``: line id -> reason) and
    the Balmer lines of stars with He II (:func:`_pickering_balmer`); the last two only
    when ``resolution``, the instrumental FWHM in Angstrom, is at most
    :data:`CCF_BLEND_MASK_MAX_RESOLUTION`."""
    from starlines.lines import line

    w, use = spec.wavelength, good.copy()
    region = (w > CCF_REGION[0]) & (w < CCF_REGION[1])
    if np.count_nonzero(region & use) > 0.3 * np.count_nonzero(
            (w > max(w[0], CCF_REGION[0])) & (w < min(w[-1], CCF_REGION[1])) | region) and \
            min(w[-1], CCF_REGION[1]) - max(w[0], CCF_REGION[0]) > 300.0:
        use &= region
    for lo, hi in FOREIGN_BANDS:
        use &= ~((w > lo) & (w < hi))
    for ident in WIND_LINES:
        lam = line(ident).wavelength(spec.medium)
        use &= np.abs(w - lam) > 25.0
    em = _col(table, "emission", False).astype(bool)
    fwhm = _col(table, "fwhm")
    rejected = rejected or {}
    fine = resolution <= CCF_BLEND_MASK_MAX_RESOLUTION
    excluded = _CCF_EXCLUDED if fine else _CCF_EXCLUDED[1:]
    pickering = _pickering_balmer(table) if fine else set()
    for ident, e, fw in zip(table["line"], em, fwhm):
        why = rejected.get(str(ident), "")
        if e or why.startswith(excluded) or str(ident) in pickering:
            half = CCF_EXCLUDE_FWHM * (fw if math.isfinite(fw) else 5.0)
            use &= np.abs(w - line(str(ident)).wavelength(spec.medium)) > half
    return use


def measure_velocity(spec, lines_table, *, classification=None, template=None,
                     continuum=None, site: str | None = None,
                     site_config: str | os.PathLike | None = None,
                     detect_binary: bool = True) -> VelocityResult:
    """Radial velocity of one spectrum from its line table and its flux.

    Parameters
    ----------
    spec : Spectrum
        The spectrum (its ``medium`` and ``meta`` are used).
    lines_table : astropy.table.QTable
        Output of ``measure_lines`` (columns ``line, wavelength_rest, centroid,
        centroid_err, status, emission``, and ``depth, fwhm, ew`` for the template).
    classification : Classification, optional
        Sets the synthetic template's parameters.
    template : callable, (wavelength, flux) or array, optional
        Rest-frame normalized template for the CCF.
    continuum : ContinuumFit or array, optional
        Normalized flux; fitted with ``starlines.continuum`` when None.
    site, site_config : optional
        Observatory name and user site file for the barycentric correction.
    detect_binary : bool
        Run the double-lined test.

    Returns
    -------
    VelocityResult

    Raises
    ------
    VelocityError
        If the table's medium differs from the spectrum's, or nothing gives a velocity.
    """
    out = VelocityResult()
    tmedium = lines_table.meta.get("medium") if hasattr(lines_table, "meta") else None
    if tmedium not in (None, spec.medium):
        raise VelocityError(f"line table is in {tmedium} but the spectrum in {spec.medium}",
                            path=spec.path)
    if spec.medium_assumed:
        out.flags.append("medium-assumed")
        out.notes.append(f"rest wavelengths in {spec.medium} as assumed by the reader; "
                         "the other medium would shift velocities by ~80 km/s")
    ids, rv, err, reasons = line_velocities(lines_table, spec.medium, path=spec.path)
    usable = np.array([r == "" for r in reasons], dtype=bool)
    out.lines_rejected = {i: r for i, r in zip(ids, reasons) if r}
    if usable.any():
        mean, merr, keep = combine_velocities(rv[usable], err[usable])
        used = [i for i, u in zip(ids, usable) if u]
        out.lines_used = [i for i, k in zip(used, keep) if k]
        out.lines_rejected.update({i: "discrepant (clipped)" for i, k in zip(used, keep)
                                   if not k})
        out.rv, out.rv_err, out.n_lines = mean, merr, len(out.lines_used)
    if out.n_lines < 3:
        out.flags.append("few-rv-lines")
    ccf_v = math.nan
    try:
        ccf_v = _cross_correlation(out, spec, lines_table, classification, template,
                                   continuum, detect_binary)
    except (ValueError, np.linalg.LinAlgError) as exc:
        out.notes.append(f"cross-correlation failed: {exc}")
    if not (math.isfinite(out.rv) or math.isfinite(ccf_v)):
        raise VelocityError("no usable line centroid and no cross-correlation peak",
                            path=spec.path)
    _to_frame(out, spec, site, site_config)
    _compare_methods(out)
    return out


def _cross_correlation(out, spec, table, classification, template, continuum,
                       detect_binary) -> float:
    from starlines.binary import CCF_LINES, detect_sb2
    from starlines.ccf import cross_correlate
    from starlines.lines import line

    norm, good, noise = _normalized(spec, continuum)
    if template is None:
        tmpl, desc = default_template(spec, table, classification)
    else:
        tmpl, desc = _as_template(template, spec), "caller's template"
    res = cross_correlate(spec.wavelength, norm, tmpl, noise=noise,
                          good=_ccf_mask(spec, table, good, out.lines_rejected,
                                         resolution_of(spec, table)))
    out.rv_ccf, out.rv_ccf_err = res.rv, res.rv_err
    out.notes.append(f"CCF template: {desc}; peak {res.height:.3f}, "
                     f"Tonry-Davis r {res.tonry_davis_r:.1f}")
    if detect_binary:
        rest = {k: line(k).wavelength(spec.medium) for k in CCF_LINES}
        vsini = table.meta.get("vsini", math.nan) if hasattr(table, "meta") else math.nan
        sb2 = detect_sb2(spec.wavelength, norm, good, noise=noise, rest=rest,
                         resolution_fwhm=resolution_of(spec, table), v_guess=res.rv,
                         vsini=_finite(vsini))
        if sb2.evidence:
            out.notes.append("SB2 evidence: " + "; ".join(sb2.evidence))
        out.notes += sb2.notes
        if sb2.sb2:
            out.sb2, out.rv_components = True, list(sb2.velocities)
            out.flags.append("double-lined")
    return res.rv


def _finite(x) -> float:
    try:
        return float(x) if x is not None and math.isfinite(float(x)) else math.nan
    except (TypeError, ValueError):
        return math.nan


def _to_frame(out: VelocityResult, spec, site, site_config) -> None:
    fc = frame_correction(spec.meta, site=site, site_config=site_config)
    out.frame, out.barycentric_correction, out.frame_reason = (
        fc.frame, fc.correction_kms, fc.reason)
    out.flags += fc.flags
    corr = fc.correction_kms
    out.rv = apply_correction(out.rv, corr)
    out.rv_ccf = apply_correction(out.rv_ccf, corr)
    out.rv_components = [apply_correction(v, corr) for v in out.rv_components]


def _compare_methods(out: VelocityResult) -> None:
    """Flag centroid and CCF velocities that differ beyond 3 sigma and the tolerance of
    :mod:`starlines.flags` (so that both stages agree on the flag)."""
    from starlines.flags import RV_METHOD_TOLERANCE_KMS

    if out.sb2 or not (math.isfinite(out.rv) and math.isfinite(out.rv_ccf)):
        return
    e2 = out.rv_ccf_err if math.isfinite(out.rv_ccf_err) else 0.0
    sigma = math.hypot(out.rv_err if math.isfinite(out.rv_err) else 0.0, e2)
    diff = abs(out.rv - out.rv_ccf)
    if diff > 3.0 * sigma and diff > RV_METHOD_TOLERANCE_KMS:
        out.flags.append("velocity-methods-disagree")
