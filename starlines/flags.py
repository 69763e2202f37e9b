"""Follow-up flags: what each flag means, how it is decided, and the deciding code.

A flag is a short lowercase-hyphenated name attached to one result row. Flags come in two
scopes:

- ``spectrum`` flags are decided from one spectrum alone (its result row and its line rows)
  by :func:`spectrum_flags`, inside the worker that analysed the file;
- ``night`` flags need the whole night (the velocity sample), the target list or the
  archive, and are decided by :func:`night_flags` once every file is done.

Every threshold is a module constant, so the numbers printed by ``starlines flags`` and
shown in the report are the numbers the code uses. The rationale of each threshold is in
its comment; "common practice" marks a convention of the trade without a single source.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

from starlines.nightflags import (
    OUTLIER_FLOOR_KMS,
    OUTLIER_NSIGMA,
    SUBTYPE_TOLERANCE,
    SYSTEMIC_TOLERANCE_KMS,
    VELOCITY_FRAMES,
    night_flags,
    night_notes,
    velocity_outliers,
)
from starlines.numeric import is_finite as _finite
from starlines.quality import (
    MIN_BALMER_EW,
    MIN_TYPING_SNR,
    SCATTER_EXCESS,
    TYPING_REGION,
    effective_snr,
    inverted_emission,
    suspect_reasons,
    too_noisy_to_type,
)

__all__ = [
    "Flag",
    "FLAGS",
    "flag",
    "flag_names",
    "spectrum_flags",
    "night_flags",
    "velocity_outliers",
    "join_flags",
    "split_flags",
    "LOW_SNR",
    "MIN_TYPING_SNR",
    "too_noisy_to_type",
    "TYPING_REGION",
    "FAST_ROTATOR_VSINI",
    "BROAD_EMISSION_FWHM",
    "BROAD_EMISSION_EW",
    "OUTLIER_NSIGMA",
    "OUTLIER_FLOOR_KMS",
    "SYSTEMIC_TOLERANCE_KMS",
    "RV_METHOD_TOLERANCE_KMS",
    "SUBTYPE_TOLERANCE",
    "HE_NORMAL",
    "HE_TOLERANCE",
    "HELIUM_SIGMA",
    "helium_flag",
    "MIN_SIGNIFICANCE",
    "OF_LATEST_SUBTYPE",
    "VELOCITY_FRAMES",
    "night_notes",
]

#: S/N per pixel below which a spectrum is flagged ``low-snr`` (the smaller of DER_SNR and
#: 1 / continuum scatter: DER_SNR overestimates the S/N of oversampled or smoothed spectra,
#: see :mod:`starlines.quality`). With ~0.5 A pixels and a
#: 2.5 A resolution element a weak line spans ~10 pixels, so sigma(EW) ~ sqrt(10) * 0.5 A /
#: (S/N) = 1.6 A / (S/N) (pixel-sum formula, criteria.md section 7a): at S/N 50 that is
#: 0.03 A, a third of the weakest lines the type ratios use (He II 4541 ~ 0.1 A at late O).
LOW_SNR = 50.0

#: v sin i (km/s) above which a star is a ``fast-rotator``; only a *measured* value counts:
#: below the resolution floor c FWHM / lambda of the line used (165-168 km/s at 2.5 A for
#: Si III 4553 or He I 4471; measure stage: narrow metal and He I lines first) it gives an
#: upper limit (``vsini_limit``), which never raises the flag, and the
#: composite profile of a double-lined binary is not a rotation profile. OB dwarfs and
#: giants range from < 30 to ~450 km/s and most O stars rotate slower than ~150 km/s
#: (criteria.md 6b, Simon-Diaz & Herrero 2007 abstract; [memory] for the 150); above
#: ~200 km/s blended lines make types and velocities less certain and such stars are
#: Oe/Be candidates (common practice).
FAST_ROTATOR_VSINI = 200.0

#: He II 4686 emission broader than this FWHM (A, ~1300 km/s) or stronger than this EW (A,
#: emission negative) is Wolf-Rayet-like: Of-star 4686 emission is a few A wide at most,
#: WR emission lines are thousands of km/s wide with EWs of tens of A ([memory]).
BROAD_EMISSION_FWHM = 20.0
BROAD_EMISSION_EW = -10.0
#: He II 4686 / N III emission counts as Of-like only before this subtype (B0.5 = 10.5):
#: the Of phenomenon belongs to O and B0 stars (criteria.md 3a, Walborn; the classifier
#: uses the same limit); in a typed later-B star such "emission" is a continuum artefact.
OF_LATEST_SUBTYPE = 10.5

#: Centroid and cross-correlation velocities disagree when they differ by more than this
#: (km/s) and by more than 3 combined sigma: a sign of blends, emission or a companion.
RV_METHOD_TOLERANCE_KMS = 15.0
#: Normal helium abundance by number, y = N(He)/N(H) (solar 0.085, Asplund et al. 2009,
#: [memory]; hot-star model grids use 0.1, common practice), and the departure beyond
#: which a star is helium-strong or helium-weak (also at least 3 sigma).
HE_NORMAL = 0.1
HE_TOLERANCE = 0.05
#: Significance (sigma) with which the normal range must be excluded.
HELIUM_SIGMA = 3.0
#: A line counts as detected when measured with at least this significance (sigma).
MIN_SIGNIFICANCE = 3.0

Scope = Literal["spectrum", "night"]


@dataclass(frozen=True)
class Flag:
    """One follow-up flag.

    Attributes
    ----------
    name : str
        Lowercase-hyphenated name used in tables.
    description : str
        One short sentence for the report and ``starlines flags``.
    rule : str
        How the flag is decided, with its threshold.
    interest : float
        Scientific-interest weight used by :mod:`starlines.followup` (0 = none).
    scope : {"spectrum", "night"}
        Whether one spectrum suffices or the whole night is needed.
    """

    name: str
    description: str
    rule: str
    interest: float
    scope: Scope = "spectrum"


FLAGS: tuple[Flag, ...] = (
    Flag("wr-like", "Wolf-Rayet-like broad emission",
         f"He II 4686 in emission with FWHM > {BROAD_EMISSION_FWHM:g} A "
         f"or EW < {BROAD_EMISSION_EW:g} A", 5.0),
    Flag("of-emission", "Of-like emission in He II 4686 and/or N III 4634-42",
         "He II 4686 or N III 4634/4641/4642 measured in emission "
         f"at >= {MIN_SIGNIFICANCE:g} sigma in a star typed earlier than B0.5 (or untyped)",
         3.0),
    Flag("balmer-emission", "emission in Balmer lines (Be/Oe-like)",
         f"any Balmer line measured in emission at >= {MIN_SIGNIFICANCE:g} sigma", 3.0),
    Flag("double-lined", "two sets of lines: double-lined binary (SB2)",
         "the velocity stage found two velocity components", 4.0),
    Flag("fast-rotator", f"v sin i above {FAST_ROTATOR_VSINI:g} km/s",
         f"measured v sin i > {FAST_ROTATOR_VSINI:g} km/s (blended lines; Oe/Be "
         "candidate); never from an upper limit (below the resolution floor) nor from "
         "a double-lined binary", 2.0),
    Flag("helium-strong", "helium lines too strong for the subtype",
         f"He/H by number above {HE_NORMAL:g} + {HE_TOLERANCE:g} at > {HELIUM_SIGMA:g} sigma", 3.0),
    Flag("helium-weak", "helium lines too weak for the subtype",
         f"He/H by number below {HE_NORMAL:g} - {HE_TOLERANCE:g} at > {HELIUM_SIGMA:g} sigma", 3.0),
    Flag("type-disagreement", "line-ratio rules and model disagree on the type",
         f"|rules subtype - model subtype| > {SUBTYPE_TOLERANCE:g} subtype", 1.0),
    Flag("catalogue-type-differs", "type differs from the target list",
         f"|measured - catalogue subtype| > {SUBTYPE_TOLERANCE:g} subtype and > 3 x the "
         "measured subtype error", 2.0, "night"),
    Flag("velocity-outlier", "velocity far from the night's sample or the expected value",
         f"|rv - median| > max({OUTLIER_NSIGMA:g} x 1.4826 MAD, {OUTLIER_FLOOR_KMS:g} km/s, "
         f"3 rv_err), or |rv - expected systemic| > max({SYSTEMIC_TOLERANCE_KMS:g} km/s, "
         "3 rv_err)", 4.0, "night"),
    Flag("velocity-methods-disagree", "line-centroid and cross-correlation velocities differ",
         f"|rv - rv_ccf| > {RV_METHOD_TOLERANCE_KMS:g} km/s and > 3 combined sigma", 1.0),
    Flag("velocity-variable", "velocity varies between nights (from the archive)",
         "the archive's variability test rejects a constant velocity", 4.0, "night"),
    Flag("low-snr", f"S/N per pixel below {LOW_SNR:g}",
         f"min(DER_SNR, 1 / continuum scatter) < {LOW_SNR:g}: weak-line ratios and types "
         f"are unreliable; below {MIN_TYPING_SNR:g} in {TYPING_REGION[0]:.0f}-"
         f"{TYPING_REGION[1]:.0f} A (errors inflated by the line fits' chi-square) no type "
         "is given", 0.0),
    Flag("suspect-data", "the data look bad although the S/N passes: check the spectrum",
         "a hot star with H-delta, H-gamma or H-beta not detected, weaker than "
         f"{MIN_BALMER_EW:g} A, with an EW error larger than the EW, or in emission while a "
         f"lower Balmer line is in absorption (stars with wind emission excepted); or "
         f"continuum scatter > {SCATTER_EXCESS:g} x what smoothed noise gives with the DER_SNR "
         "noise at the stated resolution (reasons in the notes)", 0.0),
    Flag("rv-topocentric", "velocity NOT corrected to the barycentre (topocentric)",
         "mid-exposure time, RA/Dec or observatory site missing, so rv and rv_ccf are "
         "topocentric: up to +-30 km/s off (give the site with --site)", 0.0),
    Flag("medium-assumed", "air/vacuum wavelengths assumed, not stated in the file",
         "the reader assumed the wavelength medium; the other medium would shift every "
         "velocity by ~84 km/s at 4500 A", 0.0),
    Flag("few-rv-lines", "velocity from fewer than 3 line centroids",
         "fewer than 3 lines survived the line choice and clipping of the centroid "
         "velocity: rv rests on one or two lines (rv_ccf may be better)", 0.0),
    Flag("not-hot-star", "no helium lines: later than about B3, or not a star",
         f"no He I or He II absorption line detected at >= {MIN_SIGNIFICANCE:g} sigma, "
         "or the classifier could not place the spectrum", 0.0),
    Flag("failed", "the spectrum could not be analysed (cause in the error column)",
         "reading or measuring raised an error", 0.0),
)

_BY_NAME = {f.name: f for f in FLAGS}


def flag(name: str) -> Flag:
    """Return the :class:`Flag` called ``name``.

    Raises
    ------
    KeyError
        With the list of valid names, if ``name`` is unknown.
    """
    try:
        return _BY_NAME[name]
    except KeyError:
        raise KeyError(f"unknown flag {name!r}; valid: {', '.join(_BY_NAME)}") from None


def flag_names() -> tuple[str, ...]:
    """Names of all flags, in display order."""
    return tuple(_BY_NAME)


def join_flags(names: Iterable[str]) -> str:
    """Comma-separated flags in display order (unknown names last, sorted), no duplicates."""
    names = set(names)
    known = [n for n in _BY_NAME if n in names]
    return ",".join(known + sorted(names - set(known)))


def split_flags(text: str) -> list[str]:
    """Inverse of :func:`join_flags`."""
    return [s for s in (text or "").split(",") if s]



def _detected(line: Mapping, *, emission: bool) -> bool:
    if line.get("status") != "measured" or bool(line.get("emission")) != emission:
        return False
    sig = line.get("significance")
    return _finite(sig) and abs(float(sig)) >= MIN_SIGNIFICANCE


def _emission_flags(lines: Sequence[Mapping], subtype=math.nan) -> set[str]:
    out: set[str] = set()
    inverted = set(inverted_emission(lines, MIN_SIGNIFICANCE))  # not a stellar pattern
    late_b = _finite(subtype) and float(subtype) >= OF_LATEST_SUBTYPE
    for ln in lines:
        if not _detected(ln, emission=True):
            continue
        ident = str(ln.get("line", ""))
        if ln.get("kind") == "balmer" and ident not in inverted:
            out.add("balmer-emission")
        elif (ident == "HeII4686" or ident.startswith("NIII46")) and not late_b:
            out.add("of-emission")
        if ident == "HeII4686":
            fwhm, ew = ln.get("fwhm"), ln.get("ew")
            if (_finite(fwhm) and fwhm > BROAD_EMISSION_FWHM) or (
                _finite(ew) and ew < BROAD_EMISSION_EW
            ):
                out.add("wr-like")
    return out


def helium_flag(he, he_err, sigma=None) -> str | None:
    """``helium-strong``, ``helium-weak`` or None for one He/H estimate.

    ``sigma`` is the significance with which the fit excludes the normal range
    HE_NORMAL +- HE_TOLERANCE (positive above, negative below; profile likelihood of the
    joint EW fit, :meth:`starlines.ewfit.EwFit.sigma_outside`); when it is missing (NaN,
    or older tables) the symmetric error ``he_err`` is used instead.
    """
    if _finite(sigma):
        if abs(float(sigma)) > HELIUM_SIGMA:
            return "helium-strong" if float(sigma) > 0 else "helium-weak"
        return None
    if not _finite(he):
        return None
    err = float(he_err) if _finite(he_err) else 0.0
    dy = float(he) - HE_NORMAL
    if abs(dy) > HE_TOLERANCE and abs(dy) > HELIUM_SIGMA * err:
        return "helium-strong" if dy > 0 else "helium-weak"
    return None


def _helium_flags(row: Mapping) -> set[str]:
    f = helium_flag(row.get("he_abundance"), row.get("he_abundance_err"),
                    row.get("helium_sigma"))
    return {f} if f else set()


def spectrum_flags(
    row: Mapping, lines: Sequence[Mapping], stage_flags: Iterable[str] = ()
) -> list[str]:
    """Decide the flags that one spectrum alone supports.

    Parameters
    ----------
    row : mapping
        Result row (keys of DEVELOPERS.md "Result rows"; ``rules_subtype`` and
        ``model_subtype`` and ``he_abundance_err`` are used when present).
    lines : sequence of mapping
        Per-line rows with ``line, kind, status, emission, significance, ew, fwhm``.
    stage_flags : iterable of str
        Flags set by the classification and velocity stages; those named like ours are
        kept, others are ignored here (the stage's own notes keep them).

    Returns
    -------
    list of str
        Flag names in display order.
    """
    if row.get("status") == "failed":
        return ["failed"]
    out = {f for f in stage_flags if f in _BY_NAME and flag(f).scope == "spectrum"}
    out |= _emission_flags(lines, row.get("subtype"))
    if row.get("rv2") is not None and _finite(row.get("rv2")):
        out.add("double-lined")
    if (_finite(row.get("vsini")) and not row.get("vsini_limit")
            and row["vsini"] > FAST_ROTATOR_VSINI and "double-lined" not in out):
        out.add("fast-rotator")
    out |= _helium_flags(row)
    rs, ms = row.get("rules_subtype"), row.get("model_subtype")
    if _finite(rs) and _finite(ms) and abs(float(rs) - float(ms)) > SUBTYPE_TOLERANCE:
        out.add("type-disagreement")
    rv, ccf = row.get("rv"), row.get("rv_ccf")
    if _finite(rv) and _finite(ccf):
        e1 = float(row.get("rv_err")) if _finite(row.get("rv_err")) else 0.0
        e2 = float(row.get("rv_ccf_err")) if _finite(row.get("rv_ccf_err")) else 0.0
        diff = abs(float(rv) - float(ccf))
        if diff > RV_METHOD_TOLERANCE_KMS and diff > 3 * math.hypot(e1, e2):
            out.add("velocity-methods-disagree")
    if _finite(effective_snr(row)) and effective_snr(row) < LOW_SNR:
        out.add("low-snr")
    if suspect_reasons(row, lines, MIN_SIGNIFICANCE):
        out.add("suspect-data")
    he_seen = any(
        _detected(ln, emission=False) for ln in lines if ln.get("kind") in ("hei", "heii")
    )
    if too_noisy_to_type(row):
        out.add("low-snr")  # not typed for noise: says nothing about the star
    elif not he_seen or not _finite(row.get("subtype")):
        out.add("not-hot-star")
    return split_flags(join_flags(out))
