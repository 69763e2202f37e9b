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
           "subtype": 9.0, "rv": 10.0, "rv_err": 2.0, "flags": ""}
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
