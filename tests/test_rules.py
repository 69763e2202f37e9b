"""Line-ratio rules against the published tables they transcribe.

Sources (quoted from /work/shared/reference/criteria.md):
- log W' bins: Conti & Alschuler (1971) / Mathys (1988), section 1 [transcribed: Mathys 1988].
- "He I 4471 = He II 4541" at O7 (common practice; Walborn & Fitzpatrick 1990 from memory).
- Luminosity thresholds: section 3b [transcribed: Mathys 1988; Markova et al. 2011;
  Conti & Alschuler 1971].
- Of notation: section 3a [published: Walborn, IAU Symp. paper, abstract].
"""

import math

import numpy as np
import pytest
from toygrid import line_table, toy_grid

from starlines.lumrules import (
    HeII4686LuminosityRule,
    SiIVLuminosityRule,
    balmer_emission,
    of_qualifier,
    wr_like,
)
from starlines.rulecal import calibrate_rule
from starlines.rules import (
    PRIMARY,
    SECONDARY,
    SIIV_DOUBLET_RATIO,
    LineValue,
    line_values,
    log_ratio,
    remove_oii_4089,
)

# Conti & Alschuler (1971) / Mathys (1988) log W' bins, criteria.md section 1 (transcribed)
PUBLISHED_LOG_WPRIME = [
    ("O4", 4.0, -0.90, -0.60), ("O5", 5.0, -0.60, -0.45), ("O5.5", 5.5, -0.45, -0.30),
    ("O6", 6.0, -0.30, -0.20), ("O6.5", 6.5, -0.20, -0.10), ("O7", 7.0, -0.10, 0.00),
    ("O7.5", 7.5, 0.00, 0.10), ("O8", 8.0, 0.10, 0.20), ("O8.5", 8.5, 0.20, 0.30),
    ("O9", 9.0, 0.30, 0.45), ("O9.5", 9.5, 0.45, 0.65), ("O9.7", 9.7, 0.65, 1.00),
]


def _values(he1: float, he2: float, err: float = 0.005) -> dict:
    return {"HeI4471": LineValue(he1, err), "HeII4541": LineValue(he2, err)}


@pytest.mark.parametrize("label, number, lo, hi", PUBLISHED_LOG_WPRIME)
def test_log_wprime_bin_midpoints(label, number, lo, hi):
    mid = 0.5 * (lo + hi)
    he2 = 0.5
    res = PRIMARY.evaluate(_values(he2 * 10**mid, he2))
    assert res is not None
    assert res.value == pytest.approx(mid, abs=1e-9)
    assert res.subtype == pytest.approx(number), label
    # just inside both edges (0.005 dex) stays in the bin
    assert PRIMARY.subtype_of(lo + 0.005) == pytest.approx(number)
    assert PRIMARY.subtype_of(hi - 0.005) == pytest.approx(number)


def test_log_wprime_o3_and_beyond():
    # O3 below -0.90 (Mathys 1988, transcribed); above 1.00 only "O9.7 or later"
    assert PRIMARY.subtype_of(-1.2) == pytest.approx(3.0)
    res = PRIMARY.evaluate(_values(1.0 * 10**1.3, 1.0))
    assert res.limit == "lower" and res.subtype == pytest.approx(9.7)


def test_equal_lines_land_at_o7_to_o75():
    # He I 4471 = He II 4541 is O7 (common practice; Walborn & Fitzpatrick 1990 [memory])
    res = PRIMARY.evaluate(_values(0.6, 0.6))
    assert res.value == pytest.approx(0.0, abs=1e-12)
    assert 7.0 <= res.subtype <= 7.5
    # the error bar on log W' spans both neighbours of the boundary
    assert res.subtype_err >= 0.25


def test_undetected_he2_gives_lower_limit():
    vals = {"HeI4471": LineValue(1.1, 0.01), "HeII4541": LineValue(0.005, 0.01)}
    res = PRIMARY.evaluate(vals)
    assert res.limit == "lower"
    # the limit uses the 3-sigma upper limit 0.035 A: log W' >= log10(1.1/0.035) = 1.50
    assert res.value == pytest.approx(math.log10(1.1 / 0.035), abs=1e-9)


def test_missing_lines_give_none():
    assert PRIMARY.evaluate({"HeI4471": LineValue(1.0, 0.01)}) is None
    bad = {"HeI4471": LineValue(1.0, 0.01), "HeII4541": LineValue(math.nan, 0.01)}
    assert PRIMARY.evaluate(bad) is None
    out = {"HeI4471": LineValue(1.0, 0.01, "outside range"), "HeII4541": LineValue(0.5, 0.01)}
    assert PRIMARY.evaluate(out) is None


def test_log_ratio_error_propagation():
    # sigma(log10 a/b) = hypot(sa/a, sb/b) / ln 10 (first-order propagation)
    v, e, lim = log_ratio(LineValue(1.0, 0.1), LineValue(0.5, 0.05))
    assert v == pytest.approx(math.log10(2.0))
    assert e == pytest.approx(math.hypot(0.1, 0.1) / math.log(10))
    assert lim == ""


def test_line_values_reads_quantity_table():
    import astropy.units as u

    tab = line_table({"HeI4471": 1.0, "HeII4541": 0.5})
    tab["ew"] = tab["ew"].to(u.nm)  # units are converted back to Angstrom
    tab["ew_err"] = tab["ew_err"].to(u.nm)
    vals = line_values(tab)
    assert vals["HeI4471"].ew == pytest.approx(1.0)
    assert vals["HeII4541"].err == pytest.approx(0.01)


@pytest.mark.parametrize("ew4089, ew4116, expected", [
    # Si IV 4089 : 4116 is at most 2 : 1, the doublet's gf ratio (LS coupling, common
    # practice): an excess over twice 4116 is O II 4089 and is removed
    (0.25, 0.01, 0.02),   # supergiant-like: 4089 mostly O II (MILES HD 41117-like numbers)
    (0.25, -0.05, 0.0),   # 4116 undetected: 4089 replaced by 0 +- 0.02 (undetected)
    (0.34, 0.24, 0.34),   # O9-like Si IV doublet (ratio 1.4): unchanged
    (0.10, 0.05, 0.10),   # exactly at the bound: unchanged
])
def test_remove_oii_4089_bounds_siiv_by_4116(ew4089, ew4116, expected):
    vals = {"SiIV4089": LineValue(ew4089, 0.02), "SiIV4116": LineValue(ew4116, 0.01)}
    out = remove_oii_4089(vals)
    assert out["SiIV4089"].ew == pytest.approx(expected, abs=1e-12)
    if expected < ew4089:
        assert out["SiIV4089"].err == pytest.approx(SIIV_DOUBLET_RATIO * 0.01)
    assert vals["SiIV4089"].ew == ew4089  # the input mapping is not modified


def test_remove_oii_4089_needs_a_usable_4116():
    vals = {"SiIV4089": LineValue(0.25, 0.02),
            "SiIV4116": LineValue(float("nan"), float("nan"), "blended")}
    assert remove_oii_4089(vals)["SiIV4089"].ew == 0.25
    blended = {"SiIV4089": LineValue(0.25, 0.02), "SiIV4116": LineValue(0.05, 0.01, "blended")}
    assert remove_oii_4089(blended)["SiIV4089"].ew == 0.25
    assert remove_oii_4089({"SiIV4089": LineValue(0.25, 0.02)})["SiIV4089"].ew == 0.25


@pytest.mark.parametrize("ew, expected", [
    # criteria.md 3b: log EW(4686) > -0.25 -> V; net emission -> I; otherwise III
    (0.80, "V"), (0.40, "III"), (0.0, "III"), (-0.50, "I"),
])
def test_he2_4686_luminosity_thresholds(ew, expected):
    rule = HeII4686LuminosityRule()
    assert rule.applies(-0.3) and not rule.applies(0.0)
    res = rule.evaluate({"HeII4686": LineValue(ew, 0.02, emission=ew < 0)})
    assert res.lumclass == expected
    assert 10**rule.log_ew_dwarf == pytest.approx(0.562, abs=0.001)  # criteria.md [computed]


@pytest.mark.parametrize("log_w2, expected", [
    # criteria.md 3b, Conti & Alschuler (1971): -0.20..0.10 V, 0.10..0.30 III, > 0.30 I
    (-0.05, "V"), (0.20, "III"), (0.45, "I"),
])
def test_si4_luminosity_thresholds(log_w2, expected):
    rule = SiIVLuminosityRule()
    vals = {"SiIV4089": LineValue(0.3 * 10**log_w2, 0.005), "HeI4144": LineValue(0.3, 0.005)}
    res = rule.evaluate(vals)
    assert res.value == pytest.approx(log_w2, abs=1e-9)
    assert res.lumclass == expected


@pytest.mark.parametrize("subtype, applies", [
    # criteria.md 3a (Walborn, abstract): the Si IV luminosity effect is stated for O9-B0;
    # the rule starts at O7 (log W' >= -0.10, criteria.md 3b) and stops at B0
    (7.0, True), (9.5, True), (10.0, True), (10.5, False), (11.0, False),
])
def test_si4_luminosity_rule_range(subtype, applies):
    assert SiIVLuminosityRule().applies(0.5, subtype) is applies


def test_of_notation():
    # criteria.md 3a (Walborn): ((f)) strong 4686 abs + N III em; (f) weak 4686 + N III em;
    # f both in emission
    n3 = {"NIII4634": LineValue(-0.2, 0.02, emission=True),
          "NIII4641": LineValue(-0.3, 0.02, emission=True)}
    assert of_qualifier({"HeII4686": LineValue(0.8, 0.02), **n3}) == "((f))"
    assert of_qualifier({"HeII4686": LineValue(0.1, 0.02), **n3}) == "(f)"
    assert of_qualifier({"HeII4686": LineValue(-1.0, 0.02, emission=True), **n3}) == "f"
    assert of_qualifier({"HeII4686": LineValue(0.8, 0.02)}) == ""


def test_emission_diagnostics():
    vals = {"HI6563": LineValue(-3.0, 0.1, emission=True), "HI4861": LineValue(2.0, 0.1)}
    assert balmer_emission(vals) == ["HI6563"]
    # He II 4686 emission of tens of Angstrom is Wolf-Rayet-like ([memory]), a few is Of
    assert wr_like({"HeII4686": LineValue(-25.0, 0.5, emission=True)})
    assert not wr_like({"HeII4686": LineValue(-2.0, 0.1, emission=True)})


def test_secondary_rules_cite_and_store_ranges():
    for rule in SECONDARY:
        assert rule.valid_range[0] < rule.valid_range[1]
        assert rule.reference
        assert rule.knots is None  # uncalibrated until calibrate_rule
        assert rule.evaluate({}) is None


def test_calibration_recovers_injected_relation():
    # On the toy grid Si IV 4089 / Si III 4553 falls with subtype; a toy model's own ratio
    # must map back to its own subtype (injected-signal test)
    from toygrid import toy_ews

    from starlines.teffscale import type_parameters

    grid = toy_grid()
    rule = next(r for r in SECONDARY if r.name == "SiIV4089/SiIII4553")
    cal = calibrate_rule(rule, grid)
    assert cal.knots is not None and "not published" in cal.notes
    sub, ratio = (np.asarray(k) for k in cal.knots)
    assert np.all(np.diff(ratio) <= 0)  # monotonic
    # a giant (class III, the middle of the grid's gravities, where the median curve lies)
    teff, logg = type_parameters(10.5, 3.0)
    ews = toy_ews(teff, logg, 0.1)
    vals = {k: LineValue(float(v), 0.001) for k, v in ews.items()}
    res = cal.evaluate(vals)
    assert res.subtype == pytest.approx(10.5, abs=0.2)


def test_anchor_pins_equality():
    grid = toy_grid()
    rule = next(r for r in SECONDARY if r.name == "HeI4388/HeII4541")
    cal = calibrate_rule(rule, grid)
    # equal lines -> the remembered equality subtype O9.5 (Sota et al. 2011, [memory])
    res = cal.evaluate({"HeI4388": LineValue(0.3, 0.003), "HeII4541": LineValue(0.3, 0.003)})
    assert res.subtype == pytest.approx(9.5, abs=0.05)
