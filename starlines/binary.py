"""Double-lined binaries: two velocity components in the He I lines or in the CCF.

The test runs in two steps so that single stars, the vast majority, cost ~1 ms:

1. **Cheap evidence** from a cross-correlation with a narrow-line template (He I and
   unblended He II lines at the instrumental resolution, tabulated once per set-up): a
   secondary CCF peak (a dip of :data:`GATE_DIP_NSIGMA` CCF-noise sigmas), a CCF peak
   wider than :data:`GATE_WIDTH_RATIO` times that expected of a single star of the
   measured v sin i, an asymmetric peak (half-maximum midpoint off the peak by more
   than :data:`GATE_ASYMMETRY` of the FWHM), or a narrow top on a broad base (width at
   3/4 over width at 1/4 of the peak below :data:`GATE_TOP_TO_BASE`, a companion's
   shoulder). Without any of these the star is single.
2. **Profile fit** of the strong He I lines (4471, 4922, 4026, 4388, 4713) with one and
   two components (:mod:`starlines.sb2fit`). Two components are accepted when

   - the Bayesian information criterion ``BIC = chi^2 + k ln n`` (Schwarz 1978) drops by
     more than :data:`BIC_THRESHOLD` and by more than :data:`BIC_PER_PIXEL` per pixel
     (real profiles are never exactly the model: the misfit of a single star grows with
     the number of pixels and with S/N^2, a genuine second star's gain grows faster);
   - the second component explains at least :data:`MIN_EXCESS_EXPLAINED` of the single
     model's chi-square excess over the pixel count;
   - both components are deeper than :data:`DEPTH_NSIGMA` sigma and the weaker holds at
     least :data:`MIN_FLUX_RATIO` of the line strength;
   - they are separated by at least :data:`MIN_SEPARATION_FWHM` times the FWHM of a
     single line of that rotation at that resolution (two stars closer than this are
     one blended profile; a rotating single star is often fitted as two such halves);
   - at least :data:`MIN_SUPPORTING_LINES` He I lines each gain chi-square
     :data:`LINE_GAIN` from the second component with both depths positive (a Stark or
     forbidden-component asymmetry of one line is not a companion).

   Two CCF peaks that the profile fit confirms (two components near the same velocities
   with a lower BIC) also mark an SB2; alone they do not, unless fewer than two He I lines
   are available.

The thresholds were set on injected binaries and singles (tests/test_binary.py) and the
invented demo night (tests/test_demo.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from starlines.ccf import (
    C_KMS,
    CCFResult,
    TabulatedTemplate,
    cross_correlate,
    log_lambda_grid,
)
from starlines.sb2fit import ComponentFit, fit_components, line_data

__all__ = ["SB2Result", "detect_sb2", "fit_components", "ccf_two_peaks", "ccf_evidence",
           "SB2_LINES", "CCF_LINES"]

#: He I lines used for the profile test (strong in late-O and early-B stars).
SB2_LINES = ("HeI4471", "HeI4922", "HeI4026", "HeI4388", "HeI4713")
#: Lines of the narrow-line CCF template (He I and the unblended He II lines).
CCF_LINES = SB2_LINES + ("HeI4144", "HeI4121", "HeI5876", "HeI6678", "HeII4541", "HeII4200",
                         "HeII5411")
#: Required BIC improvement of two components over one (Kass & Raftery 1995 call > 10
#: "very strong"; we ask more because real profiles are never exactly our model) ...
BIC_THRESHOLD = 25.0
#: ... and per pixel of the fitted windows.
BIC_PER_PIXEL = 0.25
#: Share of the single model's chi-square excess (chi^2 - n) the second component removes.
MIN_EXCESS_EXPLAINED = 0.5
#: Smallest separation in FWHM of one component (rotation and instrument, as fitted).
MIN_SEPARATION_FWHM = 0.9
#: Weaker component's share of the summed equivalent width.
MIN_FLUX_RATIO = 0.1
#: Significance of each component's depth (summed over lines), in sigma.
DEPTH_NSIGMA = 5.0
#: Chi-square gain of one line from the second component, and how many lines need it.
LINE_GAIN = 9.0
MIN_SUPPORTING_LINES = 2
#: Two CCF peaks: dip below the weaker peak in CCF-noise sigmas and as a fraction.
CCF_DIP_NSIGMA = 6.0
CCF_DIP_FRACTION = 0.05
#: Gate: looser secondary-peak dip, CCF width ratio and half-maximum asymmetry.
GATE_DIP_NSIGMA = 3.0
GATE_DIP_FRACTION = 0.02
GATE_WIDTH_RATIO = 1.3
GATE_ASYMMETRY = 0.08
#: Gate: CCF width at 3/4 of the peak over the width at 1/4 below which the peak has a
#: narrow top on a broad base (0.455 for a Gaussian, ~0.6 for a rotation profile; 0.29-0.44
#: for the blended injected binaries of tests/test_binary.py), and the largest separation
#: (km/s) of a secondary peak it considers.
GATE_TOP_TO_BASE = 0.42
GATE_MAX_SEPARATION = 500.0
#: Intrinsic FWHM (km/s) of a He I line before rotation and instrument (thermal, micro-
#: turbulence and Stark broadening of a dwarf, rough, from memory).
HEI_INTRINSIC_FWHM = 60.0
#: FWHM of the rotation profile in units of v sin i (limb darkening 0.6; computed from
#: the profile of Gray's textbook: half maximum at x = 0.78).
ROTATION_FWHM_PER_VSINI = 1.56


@dataclass
class SB2Result:
    """Outcome of the double-lined test.

    Attributes
    ----------
    sb2 : bool
        True when two components were found.
    velocities, errors : list of float
        Component velocities (stronger first) and their 1-sigma errors (km/s, as measured,
        same frame as the input wavelengths); empty when single.
    method : str
        ``"profile-bic"``, ``"ccf-peaks"`` or ``""``.
    delta_bic : float
        BIC(one component) - BIC(two components); NaN if not fitted.
    lines : list of str
        Lines used in the profile fit.
    evidence : list of str
        What the cheap step saw (empty: the profile fit was not run).
    notes : list of str
        Why the test said yes or no.
    """

    sb2: bool = False
    velocities: list[float] = field(default_factory=list)
    errors: list[float] = field(default_factory=list)
    method: str = ""
    delta_bic: float = math.nan
    lines: list[str] = field(default_factory=list)
    evidence: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def single_line_fwhm(vsini: float, fwhm_inst_kms: float) -> float:
    """FWHM (km/s) of one He I line of a single star: intrinsic, rotation and instrument
    added in quadrature (a Gaussian approximation, common practice)."""
    rot = ROTATION_FWHM_PER_VSINI * max(vsini, 0.0) if math.isfinite(vsini) else 0.0
    return math.sqrt(HEI_INTRINSIC_FWHM**2 + rot**2 + fwhm_inst_kms**2)


def component_fwhm(vsini: float, fwhm_inst_kms: float) -> float:
    """FWHM (km/s) of a rotating star's line seen through the instrument (rotation and
    instrument in quadrature; no intrinsic width, so the criterion stays lenient)."""
    return math.hypot(ROTATION_FWHM_PER_VSINI * max(vsini, 0.0), fwhm_inst_kms)


@lru_cache(maxsize=32)
def _narrow_template(centres: tuple[float, ...], resolution: float, lo: float,
                     hi: float) -> TabulatedTemplate:
    """Gaussian lines 0.2 deep with the instrumental FWHM at ``centres`` (each evaluated
    over +-5 FWHM only), on a 2 km/s ln(lambda) grid from ``lo`` to ``hi``."""
    grid = log_lambda_grid(lo, hi, 2.0)
    depth = np.zeros_like(grid)
    for c in centres:
        i0, i1 = np.searchsorted(grid, (c - 5.0 * resolution, c + 5.0 * resolution))
        x = (grid[i0:i1] - c) / resolution
        depth[i0:i1] += 0.2 * np.exp(-4.0 * math.log(2.0) * x * x)
    return TabulatedTemplate(grid, depth)


def ccf_two_peaks(result: CCFResult, min_separation: float, max_separation: float = 600.0,
                  *, nsigma: float = None, fraction: float = None):
    """Two significant peaks in a CCF; returns (v1, v2) stronger first, or None.

    The dip between them must exceed ``nsigma`` CCF-noise sigmas and ``fraction`` of the
    weaker peak (defaults :data:`CCF_DIP_NSIGMA`, :data:`CCF_DIP_FRACTION`)."""
    nsigma = CCF_DIP_NSIGMA if nsigma is None else nsigma
    fraction = CCF_DIP_FRACTION if fraction is None else fraction
    c, v = result.ccf, result.velocity
    i1 = int(np.argmax(c))
    peaks = np.flatnonzero((c[1:-1] > c[:-2]) & (c[1:-1] >= c[2:])) + 1
    best = None
    for j in peaks:
        sep = abs(v[j] - v[i1])
        if j == i1 or not (min_separation <= sep <= max_separation) or c[j] <= 0:
            continue
        a, b = sorted((i1, j))
        dip = c[j] - float(c[a:b + 1].min())
        if dip > nsigma * result.noise and dip > fraction * c[j]:
            if best is None or c[j] > c[best]:
                best = j
    return None if best is None else (float(v[i1]), float(v[best]))


def _level_points(c: np.ndarray, v: np.ndarray, i: int, level: float) -> tuple[float, float]:
    """Velocities where the CCF falls to ``level`` x its peak on each side (interpolated)."""
    h = level * c[i]
    lo = i
    while lo > 0 and c[lo] > h:
        lo -= 1
    hi = i
    while hi < c.size - 1 and c[hi] > h:
        hi += 1

    def cross(j: int, k: int) -> float:
        if c[j] == c[k]:
            return float(v[j])
        return float(v[j] + (h - c[j]) * (v[k] - v[j]) / (c[k] - c[j]))

    return cross(lo, lo + 1), cross(hi, hi - 1)


def ccf_evidence(result: CCFResult, *, vsini: float, fwhm_inst_kms: float,
                 min_separation: float) -> list[str]:
    """Cheap signs of a second component in a narrow-template CCF (empty: none).

    Parameters
    ----------
    result : CCFResult
        CCF with a template of lines at the instrumental resolution.
    vsini : float
        Measured projected rotation (km/s); NaN skips the width test.
    fwhm_inst_kms : float
        Instrumental FWHM in km/s.
    min_separation : float
        Smallest peak separation considered (km/s).
    """
    out = []
    loose = ccf_two_peaks(result, min_separation, GATE_MAX_SEPARATION, nsigma=GATE_DIP_NSIGMA,
                          fraction=GATE_DIP_FRACTION)
    if loose is not None:
        out.append(f"secondary CCF peak at {loose[1]:+.0f} km/s")
    c, v = result.ccf, result.velocity
    i = int(np.argmax(c))
    left, right = _level_points(c, v, i, 0.5)
    width = right - left
    if width <= 0:
        return out
    asym = abs(0.5 * (left + right) - result.rv) / width
    if asym > GATE_ASYMMETRY:
        out.append(f"CCF peak asymmetric ({asym:.2f} of its FWHM)")
    l75, r75 = _level_points(c, v, i, 0.75)
    l25, r25 = _level_points(c, v, i, 0.25)
    if r25 > l25 and (r75 - l75) / (r25 - l25) < GATE_TOP_TO_BASE:
        out.append(f"CCF peak narrow on top, broad at the base (width ratio "
                   f"{(r75 - l75) / (r25 - l25):.2f})")
    if math.isfinite(vsini):
        # CCF of a line with a template line of the instrumental width
        expect = math.hypot(single_line_fwhm(vsini, fwhm_inst_kms), fwhm_inst_kms)
        if width > GATE_WIDTH_RATIO * expect:
            out.append(f"CCF peak {width:.0f} km/s wide, {width / expect:.1f} x a single "
                       f"star with v sin i {vsini:.0f} km/s")
    return out


def detect_sb2(wavelength, norm_flux, good, *, noise: float, rest: dict[str, float],
               resolution_fwhm: float, v_guess: float = 0.0, vsini: float = math.nan,
               gate: bool = True) -> SB2Result:
    """Test a normalized spectrum for two velocity components.

    Parameters
    ----------
    wavelength, norm_flux, good : numpy.ndarray
        Spectrum normalized to 1, and the usable pixels.
    noise : float
        Noise per pixel of the normalized flux.
    rest : dict
        Line id -> rest wavelength in the spectrum's medium, for :data:`CCF_LINES`.
    resolution_fwhm : float
        Instrumental FWHM in Angstrom.
    v_guess : float
        Starting velocity (km/s), e.g. the CCF peak.
    vsini : float
        Measured v sin i (km/s) for the width test of the gate; NaN if unknown.
    gate : bool
        Skip the profile fit when the CCF shows no sign of a second component.

    Returns
    -------
    SB2Result
    """
    w = np.asarray(wavelength, float)
    norm_flux = np.asarray(norm_flux, float)
    good = np.asarray(good, bool)
    fwhm_kms = C_KMS * resolution_fwhm / float(np.median(w))
    sigma_inst = fwhm_kms / 2.3548
    min_sep = 0.6 * fwhm_kms
    out = SB2Result()
    peaks, ccf_ok = None, False
    in_range = {k: lam for k, lam in rest.items() if w[0] + 5 < lam < w[-1] - 5}
    if in_range:
        near = np.zeros_like(good)
        for lam in in_range.values():
            near |= np.abs(C_KMS * (w / lam - 1.0)) < 900.0
        tmpl = _narrow_template(tuple(sorted(in_range.values())), round(resolution_fwhm, 3),
                                100.0 * math.floor(w[0] / 100.0 - 0.5),
                                100.0 * math.ceil(w[-1] / 100.0 + 0.5))
        try:
            res = cross_correlate(w, norm_flux, tmpl, noise=noise, good=good & near,
                                  vmax=900.0, refine=False)
            ccf_ok = True
        except ValueError:
            pass
    if ccf_ok:
        peaks = ccf_two_peaks(res, max(min_sep, 2 * res.step_kms))
        v_guess = res.rv
        out.evidence = ccf_evidence(res, vsini=vsini, fwhm_inst_kms=fwhm_kms,
                                    min_separation=max(min_sep, 2 * res.step_kms))
    if peaks is not None:
        out.velocities, out.errors = list(peaks), [math.nan, math.nan]
        out.notes.append(f"two CCF peaks at {peaks[0]:+.0f} and {peaks[1]:+.0f} km/s")
    data = line_data(w, norm_flux, good, {k: rest[k] for k in SB2_LINES if k in rest})
    out.lines = data.ids
    if len(data.ids) < 2:
        out.notes.append("fewer than 2 He I lines for the profile test")
        if peaks is not None:
            out.sb2, out.method = True, "ccf-peaks"
        return out
    if gate and ccf_ok and not out.evidence and peaks is None:
        out.notes.append("single: narrow-line CCF symmetric, of single-star width, one peak")
        return out
    fit = fit_components(data, noise, sigma_inst, v_guess)
    if not math.isfinite(fit.chi2):
        out.velocities, out.errors = [], []
        out.notes.append("He I profile fit: no two-component solution with positive depths")
        return out
    out.delta_bic = fit.delta_bic
    p = fit.pair
    tol = max(50.0, 0.5 * fwhm_kms)
    agree = peaks is not None and (
        max(abs(p[0] - peaks[0]), abs(p[2] - peaks[1])) < tol
        or max(abs(p[0] - peaks[1]), abs(p[2] - peaks[0])) < tol)
    if agree and out.delta_bic > 0:  # CCF peaks confirmed by the He I profiles
        out.sb2, out.method = True, "ccf-peaks"
    elif peaks is not None:
        out.velocities, out.errors = [], []
        out.notes.append("CCF peaks not confirmed by the He I profiles")
    _judge_profile_fit(out, fit, fwhm_kms, noise)
    return out


def _judge_profile_fit(out: SB2Result, fit: ComponentFit, fwhm_kms: float,
                       noise: float) -> None:
    v1, vs1, v2, vs2, sig = fit.pair
    # equivalent width ~ depth x width of each component's profile
    ew1 = fit.depths[0] * math.hypot(sig, 0.6 * vs1)
    ew2 = fit.depths[1] * math.hypot(sig, 0.6 * vs2)
    sep = abs(v2 - v1)
    ratio = min(ew1, ew2) / max(ew1 + ew2, 1e-12)
    comp_fwhm = 0.5 * (component_fwhm(vs1, fwhm_kms) + component_fwhm(vs2, fwhm_kms))
    signif = min(d / e if e > 0 else 0.0 for d, e in zip(fit.depths, fit.depth_errors))
    support = sum(g > LINE_GAIN and min(d) > 0 for g, d in zip(fit.line_gain,
                                                               fit.line_depths))
    excess = fit.chi1 - fit.n
    explained = (fit.chi1 - fit.chi2) / excess if excess > 0 else 0.0
    tests = {
        "dBIC": fit.delta_bic > max(BIC_THRESHOLD, BIC_PER_PIXEL * fit.n),
        "excess": explained >= MIN_EXCESS_EXPLAINED,
        "separation": sep >= MIN_SEPARATION_FWHM * comp_fwhm,
        "share": ratio >= MIN_FLUX_RATIO,
        "depths": signif >= DEPTH_NSIGMA,
        "lines": support >= MIN_SUPPORTING_LINES,
    }
    failed = [k for k, ok in tests.items() if not ok]
    out.notes.append(
        f"He I profile fit: dBIC {fit.delta_bic:.1f} over {fit.n} pixels, excess explained "
        f"{explained:.2f}, components {v1:+.0f}/{v2:+.0f} km/s (separation "
        f"{sep / comp_fwhm:.2f} FWHM), weaker share {ratio:.2f}, depths >= {signif:.1f} "
        f"sigma, {support}/{len(fit.line_gain)} lines support"
        + (f"; fails {', '.join(failed)}" if failed else ""))
    ok = not failed
    if ok and not out.sb2:
        out.sb2, out.method = True, "profile-bic"
    if ok and out.method == "profile-bic":
        order = (0, 1) if ew1 >= ew2 else (1, 0)
        vv = (v1, v2)
        # velocity error of a line centroid ~ width / (S/N) scaled by the number of
        # pixels (common practice, rough), floored by the fine grid step
        err = max(math.hypot(sig, 0.6 * max(vs1, vs2)) * noise * math.sqrt(8.0 / fit.n)
                  / max(min(fit.depths), 1e-3), 10.0 / math.sqrt(12.0))
        out.velocities = [float(vv[i]) for i in order]
        out.errors = [err, err]
