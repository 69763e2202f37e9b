"""MK classification of one spectrum: published rules plus the nearest-neighbour model.

:func:`classify` takes a :class:`~starlines.measure.Measurement` or its line table
(columns ``line, ew, ew_err, status, emission``; EWs in Angstrom, absorption positive) and
returns a :class:`Classification`:

1. Emission-dominated (Wolf-Rayet-like) spectra get the ``wr-like`` flag and no type;
   so do spectra too noisy in the classification region (``low-snr``,
   :data:`starlines.quality.MIN_TYPING_SNR`).
2. Rules (:mod:`starlines.rules`): log W' for O3-O9.7, secondary ratios calibrated on the
   grid for late O and early B, He II presence/absence as limits.
3. Model (:mod:`starlines.knn`): subtype, Teff, log g, He/H from the nearest grid models.
4. Combination: inverse-variance mean; if rules and model differ by more than
   ``starlines.flags.SUBTYPE_TOLERANCE`` the ``type-disagreement`` flag is set and the
   type gets the MK uncertainty mark ":" instead of a silent choice.
5. Gravity and helium: Teff, log g and He/H fitted together to the measured H, He I and
   He II EWs (:mod:`starlines.ewfit`, EWs corrected by :mod:`starlines.recovery`) give
   ``logg`` and ``he_abundance`` and the significance of a helium anomaly
   (``helium_sigma``) when the resolution allows; else the model's values stay.
6. Luminosity class from He II 4686 or Si IV 4089/He I 4144 (:mod:`starlines.lumrules`),
   else from the fitted (or the model's) log g; Of qualifiers from He II 4686 and N III;
   "e" for Balmer emission; helium-strong/weak by :func:`starlines.flags.helium_flag`.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from starlines.errors import ClassificationError, StarlinesError
from starlines.flags import (
    HE_NORMAL,
    HE_TOLERANCE,
    LOW_SNR,
    MIN_TYPING_SNR,
    SUBTYPE_TOLERANCE,
    TYPING_REGION,
    helium_flag,
    too_noisy_to_type,
)
from starlines.lumrules import (
    LUMINOSITY_RULES,
    balmer_emission,
    emission_lines,
    of_qualifier,
    wr_like,
)
from starlines.numeric import as_float
from starlines.rules import PRIMARY, LineValue, RuleResult, line_values
from starlines.sptype import format_sptype
from starlines.teffscale import lumclass_from_number, subtype_for_parameters

__all__ = ["Classification", "classify", "rules_subtype"]

#: Subtype at or after which He II absence is expected: He II 4541 and 4686 both absent
#: means B0.5 or later (criteria.md section 2: "He II 4686 gone by ~B0.5", [memory]).
HEII_ABSENT_SUBTYPE = 10.5
#: He II 4541 detected means no later than this (B0.5; same source).
HEII_PRESENT_SUBTYPE = 10.5


@dataclass
class Classification:
    """Result of :func:`classify`. Subtype numbers: O3 = 3.0 ... B0 = 10.0 ... B3 = 13.0."""

    sptype: str = ""
    subtype: float = math.nan
    subtype_err: float = math.nan
    lumclass: str = ""
    teff: float = math.nan
    teff_err: float = math.nan
    logg: float = math.nan
    logg_err: float = math.nan
    he_abundance: float = math.nan
    he_abundance_err: float = math.nan
    helium_sigma: float = math.nan
    probability: float = math.nan
    rules_subtype: float = math.nan
    model_subtype: float = math.nan
    flags: list[str] = field(default_factory=list)
    notes: str = ""

    def as_row(self) -> dict:
        """Plain dict for a result row; flags comma-separated, notes as ``class_notes``."""
        row = asdict(self)
        row["flags"] = ",".join(self.flags)
        row["class_notes"] = row.pop("notes")
        return row


def _table_of(obj):
    table = getattr(obj, "table", obj)
    names = getattr(table, "colnames", None)
    if names is None:
        raise ClassificationError(f"expected a Measurement or a line table, got {type(obj)}")
    missing = [c for c in ("line", "ew", "ew_err") if c not in names]
    if missing:
        raise ClassificationError(f"line table lacks column(s) {', '.join(missing)}")
    return table


def _combine(results: list[RuleResult]) -> tuple[float, float]:
    """Inverse-variance mean, error inflated by the scatter between the estimates."""
    s = np.array([r.subtype for r in results])
    w = 1.0 / np.array([max(r.subtype_err, 0.1) ** 2 for r in results])
    mean = float(np.sum(w * s) / np.sum(w))
    err = 1.0 / math.sqrt(float(np.sum(w)))
    if len(s) > 1:
        err = math.hypot(err, float(np.sqrt(np.sum(w * (s - mean) ** 2) / np.sum(w))))
    return mean, err


def rules_subtype(values: dict[str, LineValue], secondary=None) -> tuple[float, float, list]:
    """Subtype from the rules alone.

    Returns
    -------
    subtype, error : float
        NaN when no rule gives a definite value.
    used : list of RuleResult
        Every rule that spoke, limits included (for the notes).
    """
    if secondary is None:
        from starlines.rulecal import calibrated_rules

        secondary = calibrated_rules()
    primary = PRIMARY.evaluate(values)
    used = [primary] if primary is not None else []
    lo, hi = -math.inf, math.inf
    he2, he2b = values.get("HeII4541"), values.get("HeII4686")
    if he2 is not None and he2.usable:
        if he2.detected:
            hi = HEII_PRESENT_SUBTYPE
        elif he2b is None or not he2b.usable or not he2b.detected:
            lo = HEII_ABSENT_SUBTYPE
    if primary is not None and primary.limit == "lower":
        lo = max(lo, primary.subtype)
    if primary is not None and not primary.limit and primary.subtype < 9.0:
        return primary.subtype, primary.subtype_err, used
    estimates = [primary] if primary is not None and not primary.limit else []
    for rule in secondary:
        res = rule.evaluate(values)
        if res is None:
            continue
        used.append(res)
        vlo, vhi = rule.valid_range
        if not res.limit and vlo <= res.subtype <= vhi and lo - 0.5 <= res.subtype <= hi + 0.5:
            estimates.append(res)
    if not estimates:
        return math.nan, math.nan, used
    sub, err = _combine(estimates)
    return float(np.clip(sub, lo, hi)), err, used


def _model_estimate(values, model):
    from starlines.knn import TARGETS, feature_limits, feature_vector

    x = feature_vector(values)
    if not np.isfinite(x).any():
        return None
    val, err, proba = model.predict_all(x[None, :], feature_limits(values)[None, :])
    proba = proba[0]
    out = {t: (float(val[0, i]), float(err[0, i])) for i, t in enumerate(TARGETS)}
    out["proba"] = (model.classes_.astype(float), proba)
    return out


def _luminosity(values, log_wprime: float, subtype: float, model_lum: float,
                model_source: str = "model log g"):
    """(class, uncertain, source) from the rules, else from the gravity (``model_lum``: a
    luminosity number from the model or from the EW fit's log g, named by
    ``model_source``)."""
    he_rule, si_rule = LUMINOSITY_RULES
    res = None
    he2 = values.get("HeII4686")
    if subtype < 10.5 and he2 is not None and he2.in_emission:
        # He II 4686 emission appears when Mv < about -6 (Conti & Leep 1974, abstract)
        res = he_rule.evaluate(values)
    elif he_rule.applies(log_wprime):
        res = he_rule.evaluate(values)
    elif si_rule.applies(log_wprime, subtype):
        res = si_rule.evaluate(values)
    if res is not None:
        return res.lumclass, res.uncertain, res.rule
    if math.isfinite(model_lum):
        return lumclass_from_number(model_lum), False, model_source
    return "", False, ""


def classify(measurement_or_line_table, *, model=None, secondary_rules=None) -> Classification:
    """Classify one spectrum.

    Parameters
    ----------
    measurement_or_line_table : Measurement or astropy.table.Table
        A :class:`~starlines.measure.Measurement` (its ``table`` is used) or a line table
        with columns ``line, ew, ew_err`` and optionally ``status, emission``; ``meta``
        may hold ``snr``.
    model : LineRatioNeighbors, optional
        Fitted model; default :func:`starlines.knn.default_model` (fitted once, cached).
    secondary_rules : sequence of RatioCurveRule, optional
        Calibrated secondary rules; default :func:`starlines.rulecal.calibrated_rules`.

    Returns
    -------
    Classification

    Raises
    ------
    ClassificationError
        If the input is not a line table.
    """
    table = _table_of(measurement_or_line_table)
    values = line_values(table)
    out = Classification()
    notes: list[str] = []
    meta = getattr(table, "meta", {}) or {}
    snr = as_float(meta.get("snr"))
    if snr is not None and snr < LOW_SNR:
        out.flags.append("low-snr")
    if wr_like(values):
        out.flags.append("wr-like")
        out.notes = "emission-dominated spectrum (Wolf-Rayet-like): no MK type forced"
        return out
    if too_noisy_to_type(meta):
        if "low-snr" not in out.flags:
            out.flags.append("low-snr")
        out.notes = (f"S/N {float(meta['snr_typing_region']):.0f} per pixel in "
                     f"{TYPING_REGION[0]:.0f}-{TYPING_REGION[1]:.0f} A, below "
                     f"{MIN_TYPING_SNR:g}: no type")
        return out
    r_sub, r_err, used = rules_subtype(values, secondary_rules)
    out.rules_subtype = r_sub
    notes += [f"{r.rule}={r.value:.2f}" + (f"({r.limit} limit)" if r.limit else "")
              for r in used if math.isfinite(r.value)]
    if model is None:
        from starlines.knn import default_model

        model = default_model()
    est = _model_estimate(values, model)
    m_sub = m_err = m_lum = math.nan
    lum_from = "model log g"
    if est is not None:
        m_sub, m_err = est["subtype"]
        m_lum = est["lumnumber"][0]
        out.model_subtype = m_sub
        out.teff, out.teff_err = est["teff"]
        out.logg, out.logg_err = est["logg"]
        out.he_abundance, out.he_abundance_err = est["he"]
        fit, why = _ew_fit(values, out, table)
        _adopt_ew_fit(values, out, notes, fit, why)
        if fit is not None:  # the row's Teff is the model's: read the class with it
            m_lum = float(subtype_for_parameters(out.teff, fit.logg)[1])
            lum_from = "EW-fit log g"
    sub, err, uncertain = _final_subtype(r_sub, r_err, m_sub, m_err, out.flags)
    if not math.isfinite(sub):
        out.flags.append("not-hot-star")
        out.notes = "; ".join(notes + ["key lines missing or undetected: no type"])
        return out
    out.subtype, out.subtype_err = sub, err
    if est is not None:
        classes, proba = est["proba"]
        out.probability = float(np.sum(proba[np.abs(classes - sub) <= 0.5]))
    primary = next((r for r in used if r.rule == PRIMARY.name), None)
    log_wp = primary.value if primary is not None and not primary.limit else math.nan
    lum, lum_unc, lum_src = _luminosity(values, log_wp, sub, m_lum, lum_from)
    out.lumclass = lum + (":" if lum and lum_unc else "")
    if lum_src:
        notes.append(f"luminosity from {lum_src}")
    qual = _qualifiers(values, sub, out.flags)
    _helium_flags(out)
    out.sptype = format_sptype(sub, lum, qual, subtype_uncertain=uncertain,
                               lumclass_uncertain=lum_unc)
    out.notes = "; ".join(notes)
    return out


def _final_subtype(r_sub, r_err, m_sub, m_err, flags) -> tuple[float, float, bool]:
    if math.isfinite(r_sub) and math.isfinite(m_sub):
        e_r, e_m = max(r_err, 0.1), max(m_err, 0.1)
        w_r, w_m = 1.0 / e_r**2, 1.0 / e_m**2
        sub = (w_r * r_sub + w_m * m_sub) / (w_r + w_m)
        err = 1.0 / math.sqrt(w_r + w_m)
        if abs(r_sub - m_sub) > SUBTYPE_TOLERANCE:
            flags.append("type-disagreement")
            return sub, max(err, 0.5 * abs(r_sub - m_sub)), True
        return sub, err, False
    if math.isfinite(r_sub):
        return r_sub, r_err, False
    if math.isfinite(m_sub):
        return m_sub, m_err, m_err > 1.0
    return math.nan, math.nan, False


def _qualifiers(values, subtype: float, flags: list[str]) -> str:
    em = emission_lines(values)
    qual = of_qualifier(values) if subtype < 10.0 else ""
    if subtype < 10.5 and any(i in em for i in ("HeII4686", "NIII4634", "NIII4641",
                                                 "NIII4642")):
        flags.append("of-emission")  # Of emission is an O / B0 phenomenon
    if balmer_emission(values):
        flags.append("balmer-emission")
        if "f" not in qual:
            qual += "e"
    return qual


def _ew_fit(values, out: Classification, table):
    """Joint Teff, log g, He/H fit to the EWs (:mod:`starlines.ewfit`), or None.

    Needs the observing conditions in the line table's meta (resolution, S/N, pixel step),
    a resolution from a trusted source (:data:`starlines.ewfit.RESOLUTION_SOURCES`) no
    coarser than :data:`starlines.ewfit.MAX_RESOLUTION_FWHM`, no Balmer emission (the grid
    has no wind: filled-in Balmer lines would read as low gravity) and enough lines
    (:func:`starlines.ewfit.enough_lines`). Measured EWs are divided by the recovery
    factors of :mod:`starlines.recovery`; the model's Teff is the prior.

    Returns
    -------
    (EwFit or None, note)
        The note says why there is no fit ("" when there is one).
    """
    from starlines.ewfit import (
        FIT_LINES,
        MAX_RESOLUTION_FWHM,
        RESOLUTION_SOURCES,
        enough_lines,
        fit_ews,
    )
    from starlines.recovery import recovery_factors

    fwhm, snr = as_float(meta_of(table, "resolution_fwhm")), as_float(meta_of(table, "snr"))
    vsini = as_float(meta_of(table, "vsini"))
    detected = [k for k in FIT_LINES if k in values and values[k].detected]
    if fwhm is None or snr is None or meta_of(table, "resolution_source") not in \
            RESOLUTION_SOURCES or fwhm > MAX_RESOLUTION_FWHM:
        return None, "resolution unknown or coarser than 6 A"
    if balmer_emission(values):
        return None, "Balmer emission"
    if not enough_lines(detected):
        return None, "too few lines"
    try:
        rec = recovery_factors(
            FIT_LINES, teff=out.teff, logg=out.logg, resolution_fwhm=fwhm, snr=snr,
            pixel_step=as_float(meta_of(table, "pixel_step")),
            vsini=0.0 if vsini is None or meta_of(table, "vsini_upper_limit") else vsini,
            wavelength_range=meta_of(table, "wavelength_range"))
        fit = fit_ews(values, rec, teff0=out.teff, teff0_err=out.teff_err, logg0=out.logg,
                      normal=(HE_NORMAL - HE_TOLERANCE, HE_NORMAL + HE_TOLERANCE))
    except (ValueError, FloatingPointError, np.linalg.LinAlgError, StarlinesError) as exc:
        return None, f"EW fit failed ({exc})"
    return fit, "" if fit is not None else "EW fit failed"


def meta_of(table, key: str):
    """``table.meta[key]`` or None."""
    return (getattr(table, "meta", None) or {}).get(key)


def _adopt_ew_fit(values, out: Classification, notes: list[str], fit, why: str) -> None:
    """He/H and log g from the EW fit when there is one; else keep the model's.

    The model reads He/H from line ratios, where helium is degenerate with temperature
    and gravity, quantized to the grid's He/H nodes, and its log g from ratios that barely
    see gravity; the fit adds the Balmer lines, which do (demo night: fitted log g within
    0.1 dex of the input, the model's 4.25 for most dwarfs of 4.0; MILES luminosity
    classes 68 % -> 79 % with the fit's log g). The model's values go to the notes.
    Without a fit the direct He I estimate (:mod:`starlines.helium`, not corrected for
    the measurement) is only noted, with the reason.
    """
    from starlines.helium import helium_from_ews

    if fit is not None:
        notes.append(f"model He/H {out.he_abundance:.2f} +- {out.he_abundance_err:.2f}, "
                     f"log g {out.logg:.2f} +- {out.logg_err:.2f}; EW fit of "
                     f"{len(fit.lines)} lines, reduced chi2 {fit.chi2_red:.2f}")
        out.he_abundance, out.he_abundance_err = fit.he, fit.he_err
        out.logg, out.logg_err = fit.logg, fit.logg_err
        out.helium_sigma = fit.sigma_outside(HE_NORMAL - HE_TOLERANCE,
                                             HE_NORMAL + HE_TOLERANCE)
        return
    h = helium_from_ews(values, out.teff, out.logg, teff_err=out.teff_err,
                        logg_err=out.logg_err)
    if h is None:
        notes.append(f"He/H from the model's line ratios (no EW fit: {why})")
        return
    notes.append(f"He/H {h.he:.3f} +- {h.err:.3f} from He I EWs ({len(h.lines)} lines"
                 + (", beyond the grid's He/H axis" if h.extrapolated else "")
                 + f", uncorrected; flags use the model's He/H; no EW fit: {why})")


def _helium_flags(out: Classification) -> None:
    flag = helium_flag(out.he_abundance, out.he_abundance_err, out.helium_sigma)
    if flag:
        out.flags.append(flag)
