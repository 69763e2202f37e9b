"""Flags, follow-up scoring and target lists: the deciding rules on hand-made rows.

Thresholds are the module constants of starlines.flags (their rationale is documented
there); the tests check that rows just inside and just outside each threshold are decided
accordingly, and compare the robust statistics with scipy.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from starlines import flags as fl
from starlines.cli import main
from starlines.followup import confidence, interest, rank_rows, score
from starlines.targets import match_targets, read_targets


def _row(**kw):
    row = {"status": "ok", "file": "a.fits", "label": "", "object": "X", "snr": 150.0,
           "subtype": 9.0, "rv": 10.0, "rv_err": 2.0, "flags": "", "rv_frame": "barycentric"}
    row.update(kw)
    return row


def _line(ident, kind, *, emission=False, sig=10.0, ew=0.5, fwhm=3.0, status="measured"):
    return {"line": ident, "kind": kind, "status": status, "emission": emission,
            "significance": sig, "ew": ew, "fwhm": fwhm}


HE_LINES = [_line("HeI4471", "hei"), _line("HeII4541", "heii")]


def test_every_flag_is_documented_and_named_lowercase_hyphenated():
    assert len(fl.FLAGS) == len(set(fl.flag_names()))
    for f in fl.FLAGS:
        assert f.name == f.name.lower() and " " not in f.name and "_" not in f.name
        assert f.description and f.rule and f.interest >= 0


def test_flags_command_prints_every_flag(capsys):
    assert main(["flags"]) == 0
    out = capsys.readouterr().out
    for f in fl.FLAGS:
        assert f.name in out and f.description in out


def test_flags_command_writes_a_table(tmp_path):
    from astropy.table import Table

    path = tmp_path / "flags.ecsv"
    assert main(["flags", "--out", str(path)]) == 0
    assert list(Table.read(path)["name"]) == list(fl.flag_names())


def test_normal_hot_star_gets_no_flag():
    assert fl.spectrum_flags(_row(vsini=120.0), HE_LINES) == []


@pytest.mark.parametrize("ident,kind,expected", [
    ("HI4861", "balmer", {"balmer-emission"}),
    ("HeII4686", "heii", {"of-emission"}),
    ("NIII4641", "metal", {"of-emission"}),
])
def test_emission_lines_raise_their_flag(ident, kind, expected):
    lines = HE_LINES + [_line(ident, kind, emission=True, ew=-1.0)]
    assert set(fl.spectrum_flags(_row(), lines)) == expected


def test_of_emission_only_in_o_and_b0_stars():
    # the Of phenomenon belongs to O/B0 stars (criteria.md 3a, Walborn): He II 4686
    # "emission" in a B2 star (subtype 12) is no Of-like emission
    lines = HE_LINES + [_line("HeII4686", "heii", emission=True, ew=-0.12)]
    assert fl.spectrum_flags(_row(subtype=12.0), lines) == []
    assert fl.spectrum_flags(_row(subtype=10.0), lines) == ["of-emission"]


def test_weak_emission_below_significance_is_not_flagged():
    lines = HE_LINES + [_line("HI4861", "balmer", emission=True, sig=fl.MIN_SIGNIFICANCE - 0.1)]
    assert fl.spectrum_flags(_row(), lines) == []


def test_broad_4686_emission_is_wolf_rayet_like():
    # FWHM 30 A at 4686 A is 1900 km/s, beyond the 20 A (~1300 km/s) threshold
    lines = HE_LINES + [_line("HeII4686", "heii", emission=True, ew=-4.0, fwhm=30.0)]
    assert set(fl.spectrum_flags(_row(), lines)) == {"of-emission", "wr-like"}


def test_fast_rotator_threshold():
    assert "fast-rotator" in fl.spectrum_flags(_row(vsini=fl.FAST_ROTATOR_VSINI + 1), HE_LINES)
    assert fl.spectrum_flags(_row(vsini=fl.FAST_ROTATOR_VSINI - 1), HE_LINES) == []


def test_fast_rotator_never_from_an_upper_limit_or_a_double_lined_binary():
    from starlines.vsini import resolution_floor

    # at 3.0 A FWHM the floor c FWHM / lambda at He I 4471.48 A is 201.1 km/s (c =
    # 299792.458 km/s, common practice): an upper limit there is above the threshold
    floor = resolution_floor(4471.48, 3.0)
    assert floor == pytest.approx(201.1, abs=0.1)
    limit = _row(vsini=floor + 10.0, vsini_limit=True, vsini_floor=floor)
    assert fl.spectrum_flags(limit, HE_LINES) == []
    measured = _row(vsini=floor + 10.0, vsini_limit=False, vsini_floor=floor)
    assert fl.spectrum_flags(measured, HE_LINES) == ["fast-rotator"]
    # the blended profile of an SB2 is no rotation profile
    sb2 = _row(vsini=300.0, rv2=-100.0)
    assert fl.spectrum_flags(sb2, HE_LINES) == ["double-lined"]


def test_helium_strong_and_weak_need_both_size_and_significance():
    strong = _row(he_abundance=0.25, he_abundance_err=0.02)
    weak = _row(he_abundance=0.03, he_abundance_err=0.01)
    unsure = _row(he_abundance=0.25, he_abundance_err=0.1)  # 1.5 sigma only
    assert fl.spectrum_flags(strong, HE_LINES) == ["helium-strong"]
    assert fl.spectrum_flags(weak, HE_LINES) == ["helium-weak"]
    assert fl.spectrum_flags(unsure, HE_LINES) == []


def test_rules_model_disagreement_and_velocity_methods():
    row = _row(rules_subtype=7.0, model_subtype=8.5, rv=10.0, rv_err=1.0, rv_ccf=40.0,
               rv_ccf_err=1.0)
    assert set(fl.spectrum_flags(row, HE_LINES)) == {"type-disagreement",
                                                     "velocity-methods-disagree"}
    close = _row(rules_subtype=7.0, model_subtype=7.5, rv=10.0, rv_ccf=20.0)
    assert fl.spectrum_flags(close, HE_LINES) == []


def test_low_snr_double_lined_not_hot_and_failed():
    assert "low-snr" in fl.spectrum_flags(_row(snr=fl.LOW_SNR - 1), HE_LINES)
    assert "double-lined" in fl.spectrum_flags(_row(rv2=-100.0), HE_LINES)
    no_he = [_line("HI4340", "balmer"), _line("HeI4471", "hei", status="not detected")]
    assert fl.spectrum_flags(_row(), no_he) == ["not-hot-star"]
    assert fl.spectrum_flags(_row(subtype=math.nan), HE_LINES) == ["not-hot-star"]
    assert fl.spectrum_flags(_row(status="failed"), HE_LINES) == ["failed"]


def test_robust_sigma_matches_scipy():
    from scipy.stats import median_abs_deviation

    rng = np.random.default_rng(1)
    rv = rng.normal(20.0, 10.0, 41)
    sigma = median_abs_deviation(rv, scale="normal")  # scipy: 1.4826 x MAD
    med = float(np.median(rv))
    limit = max(fl.OUTLIER_NSIGMA * sigma, fl.OUTLIER_FLOOR_KMS)
    probe = [med + limit * 0.9, med - limit * 1.15]
    out = fl.velocity_outliers(list(rv) + probe)
    # adding the two probes raises the MAD by ~4 % here; 10-15 % margins absorb that
    assert out[-2:] == [False, True]
    assert not any(out[:-2])


def test_velocity_outliers_need_five_velocities_and_ignore_nan():
    assert fl.velocity_outliers([0.0, 1.0, 500.0, math.nan]) == [False] * 4
    assert fl.velocity_outliers([0, 1, 2, 1, 0, math.nan, 300]) == [False] * 6 + [True]


def test_night_flags_systemic_catalogue_and_variable():
    rows = [_row(object=f"S{i}", rv=10.0 + i % 3) for i in range(6)]
    rows.append(_row(object="RUN", rv=10.0 + fl.SYSTEMIC_TOLERANCE_KMS + 5))
    expected = [None] * 6 + [{"rv": 10.0, "subtype": 12.0}]
    got = fl.night_flags(rows, expected=expected, variable={"S2"})
    assert got[-1] == ["catalogue-type-differs", "velocity-outlier"]
    assert got[2] == ["velocity-variable"]
    assert all(g == [] for i, g in enumerate(got[:-1]) if i != 2)


def test_catalogue_type_needs_three_sigma_as_well():
    # O9 V in the catalogue (9.0), measured B0 V (10.1) at S/N 25 with +-0.5: 2.2 sigma
    rows = [_row(object=f"S{i}") for i in range(3)]
    noisy = _row(object="N", subtype=10.1, subtype_err=0.5)
    sure = _row(object="M", subtype=10.1, subtype_err=0.2)
    got = fl.night_flags(rows + [noisy, sure], expected=[None] * 3 + [{"subtype": 9.0}] * 2)
    assert got[3] == [] and got[4] == ["catalogue-type-differs"]


def test_followup_score_is_interest_times_confidence():
    row = _row(snr=50.0, flags="double-lined,low-snr")
    assert interest(["double-lined", "low-snr"]) == fl.flag("double-lined").interest
    assert confidence(row) == pytest.approx(0.5)
    assert score(row) == pytest.approx(0.5 * fl.flag("double-lined").interest)


def test_rank_rows_orders_by_score_then_snr():
    rows = [_row(file="a", snr=300.0, flags="fast-rotator"),
            _row(file="b", snr=120.0, flags="wr-like"),
            _row(file="c", snr=200.0, flags="fast-rotator"),
            _row(file="d", snr=200.0, flags=""),
            _row(file="e", status="failed", flags="failed")]
    chosen = rank_rows(rows)
    assert [r["file"] for r in chosen] == ["b", "a", "c"]
    assert [r["followup_rank"] for r in rows] == [2, 1, 3, 0, 0]
    assert "Wolf-Rayet" in rows[1]["followup_reason"] and "S/N 120" in rows[1]["followup_reason"]


def test_target_list_reads_and_matches_by_name_and_position(tmp_path):
    from astropy.coordinates import SkyCoord

    path = tmp_path / "targets.csv"
    path.write_text("Name,RA,Dec,SpType,vsys\n"
                    "HD 1234,10.0,-20.0,O9.5 V,12.5\n"
                    "Nameless,10h00m00s,+05d00m00s,B0.5 III,\n")
    targets = read_targets(path)
    assert targets[0].subtype == 9.5 and targets[0].rv == 12.5
    assert targets[1].subtype == 10.5 and math.isnan(targets[1].rv)
    assert targets[1].ra == pytest.approx(150.0)  # 10 h = 150 deg
    # 2 arcsec east of the second target: inside the 3 arcsec radius (astropy separation)
    ra = 150.0 + 2.0 / 3600 / math.cos(math.radians(5.0))
    assert SkyCoord(ra, 5.0, unit="deg").separation(
        SkyCoord(150.0, 5.0, unit="deg")).arcsec == pytest.approx(2.0, abs=0.01)
    rows = [{"object": "HD1234", "ra": math.nan, "dec": math.nan},
            {"object": "", "ra": ra, "dec": 5.0},
            {"object": "", "ra": ra + 10 / 3600, "dec": 5.0}]
    assert match_targets(rows, targets) == [targets[0], targets[1], None]


def test_bad_target_list_is_a_config_error(tmp_path):
    from starlines.errors import ConfigError

    path = tmp_path / "t.csv"
    path.write_text("colour,size\nred,3\n")
    with pytest.raises(ConfigError, match="needs a 'name' column"):
        read_targets(path)
    path.write_text("name,sptype\nA,K9 III\n")
    with pytest.raises(ConfigError, match="catalogue type"):
        read_targets(path)


# ----------------------------------------------------------------------------- frames
def test_velocity_outliers_compare_only_one_frame():
    # eight barycentric velocities at 20 +- 2 km/s and two topocentric ones carrying the
    # Earth's orbital motion (29.8 km/s, common practice): 20 + 28 km/s. Mixed, the two
    # would be > 20 km/s (the floor) and > 4 robust sigma from the median.
    rows = [_row(object=f"B{i}", rv=20.0 + (i % 5 - 2), rv_err=1.0) for i in range(8)]
    topo = [_row(object=f"T{i}", rv=48.0 + i, rv_err=1.0, rv_frame="topocentric")
            for i in range(2)]
    mixed = fl.velocity_outliers([r["rv"] for r in rows + topo])
    assert mixed[-2:] == [True, True]  # what mixing frames would do
    expected = [None] * 8 + [{"rv": 20.0}, None]
    got = fl.night_flags(rows + topo, expected=expected)
    assert got == [[]] * 10
    notes = fl.night_notes(rows + topo, expected=expected)
    assert notes[:8] == [""] * 8
    assert "topocentric" in notes[8] and "not with the target list" in notes[8]
    assert "too few" in notes[9]


def test_heliocentric_and_barycentric_form_one_sample():
    # they differ by the Sun's reflex motion, ~0.013 km/s ([memory]): one sample, so a
    # heliocentric star 65 km/s off a barycentric cluster is an outlier
    rows = [_row(object=f"B{i}", rv=20.0 + (i % 5 - 2), rv_err=1.0) for i in range(6)]
    rows.append(_row(object="H", rv=85.0, rv_err=1.0, rv_frame="heliocentric"))
    assert fl.night_flags(rows)[-1] == ["velocity-outlier"]
    # five topocentric velocities are compared among themselves
    topo = [_row(object=f"T{i}", rv=-5.0 + i, rv_frame="topocentric") for i in range(5)]
    topo.append(_row(object="T9", rv=90.0, rv_frame="topocentric"))
    got = fl.night_flags(rows[:6] + topo)
    assert got[-1] == ["velocity-outlier"] and got[:-1] == [[]] * 11


# ----------------------------------------------------------------------------- suspect data
def _balmer(hd=3.0, hg=3.2, hb=4.0, **kw):
    out = [_line("HI4102", "balmer", ew=hd), _line("HI4340", "balmer", ew=hg),
           _line("HI4861", "balmer", ew=hb)]
    for ln in out:
        ln["ew_err"] = 0.05
        ln.update(kw.get(ln["line"], {}))
    return HE_LINES + out


def test_normal_balmer_lines_are_not_suspect():
    assert fl.spectrum_flags(_row(), _balmer()) == []


@pytest.mark.parametrize("change,reason", [
    ({"HI4340": {"status": "not detected", "sig": 0.8, "ew": -1.56, "ew_err": 2.04}},
     "H-gamma not detected"),
    ({"HI4102": {"ew": 0.3}}, "H-delta EW 0.30 A"),
    ({"HI4340": {"ew": 1.2, "ew_err": 1.5}}, "error 1.50 A larger"),
    ({"HI4102": {"ew": -0.8, "emission": True}}, "H-delta in emission while"),
])
def test_bad_balmer_lines_make_suspect_data(change, reason):
    from starlines.quality import suspect_reasons

    lines = _balmer()
    for ln in lines:
        for key, value in change.get(ln["line"], {}).items():
            ln["significance" if key == "sig" else key] = value
    # every O/early-B star has H-delta, H-gamma and H-beta in absorption above ~1 A
    # (the weakest in 19 MILES O/B spectra: 0.76 A, data; [memory] for O stars)
    assert "suspect-data" in fl.spectrum_flags(_row(), lines)
    assert any(reason in r for r in suspect_reasons(_row(), lines))
    # an inverted Balmer emission pattern is no balmer-emission (emission decreases up
    # the series, H-alpha first: common practice)
    assert "balmer-emission" not in fl.spectrum_flags(_row(), lines)


def test_wind_filled_h_beta_of_an_emission_line_star_is_not_suspect():
    lines = _balmer(hb=0.2) + [_line("HeII4686", "heii", emission=True, ew=-1.0)]
    assert fl.spectrum_flags(_row(), lines) == ["of-emission"]
    be = _balmer(HI4861={"ew": -2.0, "emission": True}) + [
        _line("HI6563", "balmer", emission=True, ew=-10.0)]
    assert fl.spectrum_flags(_row(), be) == ["balmer-emission"]


def test_continuum_scatter_far_above_der_snr_noise_is_suspect_and_lowers_snr():
    # white noise at native sampling: scatter x S/N = 1 (DER_SNR is unbiased, Stoehr et
    # al. 2008); 2.5 A FWHM on 0.9 A pixels (MILES) bounds smoothed noise at 1.65
    known = {"resolution_fwhm": 2.5, "pixel_step": 0.9, "resolution_source": "header"}
    assert fl.spectrum_flags(_row(snr=150.0, continuum_scatter=1 / 140.0, **known),
                             _balmer()) == []
    # 8x the DER_SNR noise: above 4 x 1.65, and its S/N by the scatter is 37.5
    ripples = _row(snr=300.0, continuum_scatter=8.0 / 300.0, **known)
    assert set(fl.spectrum_flags(ripples, _balmer())) == {"suspect-data", "low-snr"}
    # without a stated resolution the bound is unknown: no scatter verdict
    guessed = dict(known, resolution_source="lines")
    assert "suspect-data" not in fl.spectrum_flags(
        _row(snr=300.0, continuum_scatter=8.0 / 300.0, **guessed), _balmer())
    # correlated noise (2x, as in resampled library spectra): S/N 90 by DER_SNR is 45 by
    # the continuum scatter, below the 50 of low-snr
    smooth = _row(snr=90.0, continuum_scatter=2.0 / 90.0, **known)
    assert fl.spectrum_flags(smooth, _balmer()) == ["low-snr"]


def test_der_snr_bias_matches_smoothed_white_noise():
    from scipy.ndimage import gaussian_filter1d

    from starlines.quality import der_snr_bias
    from starlines.snr import der_snr_noise

    rng = np.random.default_rng(3)
    assert der_snr_bias(0.0) == 1.0
    for fwhm_px in (2.78, 4.0, 10.7):  # MILES, demo-like, Jacoby et al. sampling
        noise = gaussian_filter1d(rng.normal(0.0, 1.0, 200_000), fwhm_px / 2.3548200450309493)
        measured = float(np.std(noise)) / der_snr_noise(1.0 + noise)
        # scipy smoothing as the reference; 5 % covers the estimate of 2e5 samples
        assert der_snr_bias(fwhm_px) == pytest.approx(measured, rel=0.05)


def test_degenerate_low_resolution_blend_and_wind_stars_are_not_suspect():
    from starlines.quality import suspect_reasons

    # H-delta "not detected" with a normal EW (4.5 +- 1.5 A): Si IV / He II share its fit
    # at ~15 A resolution (Jacoby et al. 1984 spectra, data): no verdict
    blend = _balmer(HI4102={"status": "not detected", "significance": 2.9, "ew_err": 1.5,
                            "ew": 4.5})
    assert suspect_reasons(_row(), blend) == []
    # an Of supergiant: He II 4686 in emission, H-delta filled in by the wind
    wind = _balmer(hd=0.1) + [_line("HeII4686", "heii", emission=True, ew=-1.5)]
    assert suspect_reasons(_row(), wind) == []


def test_suspect_data_halves_the_followup_confidence():
    row = _row(snr=200.0, flags="double-lined,suspect-data")
    assert confidence(row) == pytest.approx(0.5)
    assert "suspect data" in rank_rows([row])[0]["followup_reason"]


def test_helium_sigma_column_decides_when_present():
    # the joint EW fit's profile significance (starlines.ewfit) overrides the symmetric error
    strong = _row(he_abundance=0.31, he_abundance_err=0.11, helium_sigma=4.9)
    unsure = _row(he_abundance=0.31, he_abundance_err=0.01, helium_sigma=1.2)
    assert fl.spectrum_flags(strong, HE_LINES) == ["helium-strong"]
    assert fl.spectrum_flags(unsure, HE_LINES) == []
