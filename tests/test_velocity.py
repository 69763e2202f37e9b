"""Velocity combination, line choice, media, frames, real library spectra, CLI."""

import math
import os

import numpy as np
import pytest
from astropy.table import QTable

from starlines.ccf import C_KMS, line_template
from starlines.errors import VelocityError
from starlines.lines import line
from starlines.spectrum import ObservationMeta, Spectrum
from starlines.velocity import combine_velocities, line_velocities, measure_velocity

REF = "/work/shared/reference-spectra/jacoby1984"
IDS = ["HI4102", "HI4340", "HI4861", "HeI4471", "HeI4026", "HeI4922", "HeI4388", "HeI4713",
       "HeII4541", "HeII4200", "HeII4686"]
DEP = [0.35, 0.35, 0.35, 0.2, 0.15, 0.12, 0.1, 0.06, 0.08, 0.06, 0.08]
FWHM = [12, 12, 12, 2, 1.5, 1.5, 1.5, 1, 1, 1, 1]


def table_for(rv, medium="air", errs=None, **overrides):
    """A hand-built line table as measure_lines would give it, centroids shifted by rv."""
    rest = np.array([line(i).wavelength(medium) for i in IDS])
    err = np.full(len(IDS), 0.05) if errs is None else np.asarray(errs)
    t = QTable()
    t["line"] = IDS
    t["wavelength_rest"] = rest
    t["centroid"] = rest * (1 + rv / C_KMS)
    t["centroid_err"] = err
    t["status"] = ["measured"] * len(IDS)
    t["emission"] = [False] * len(IDS)
    t["depth"], t["fwhm"] = DEP, FWHM
    t["ew"] = np.array(DEP) * np.array(FWHM)
    for k, v in overrides.items():
        t[k] = v
    t.meta["medium"] = medium
    return t


def spectrum_for(rv, medium="air", meta=None, assumed=False):
    w = np.arange(3950.0, 4950.0, 0.5)
    cen = [line(i).wavelength(medium) for i in IDS]
    shapes = ["lorentzian"] * 3 + ["gaussian"] * 8
    f = line_template(w, cen, DEP, FWHM, shapes=shapes, rv=rv, vsini=60, resolution_fwhm=1.5)
    noisy = f + np.random.default_rng(1).normal(0, 0.005, w.size)
    return Spectrum(w, noisy, medium=medium, medium_assumed=assumed,
                    meta=meta or ObservationMeta(resolution_fwhm=1.5), path="injected.fits")


def test_robust_mean_rejects_outlier_and_error_floor():
    rng = np.random.default_rng(3)
    rv = 40 + rng.normal(0, 2.0, 8)
    rv[3] = 140.0  # a misidentified or blended line
    mean, err, keep = combine_velocities(rv, np.full(8, 2.0))
    assert not keep[3] and keep.sum() == 7
    assert mean == pytest.approx(40, abs=3 * 2 / math.sqrt(7))
    # error of the weighted mean vs scatter/sqrt(n): the larger wins
    mean, err, _ = combine_velocities(np.array([0.0, 10.0, 20.0]), np.full(3, 0.1))
    assert err == pytest.approx(10.0 / math.sqrt(3), rel=1e-9)


def test_line_choice_recorded():
    t = table_for(50.0, emission=[False] * 10 + [True])
    ids, rv, err, reasons = line_velocities(t, "air")
    why = dict(zip(ids, reasons))
    assert why["HeII4686"] == "emission" and why["HI4861"] == "wind line"
    assert why["HeI4471"] == "" and rv[ids.index("HeI4471")] == pytest.approx(50.0, abs=1e-6)


def test_medium_mismatch_is_an_error():
    t = table_for(0.0, medium="vacuum")
    t.meta["medium"] = "air"  # table claims air but holds vacuum wavelengths
    with pytest.raises(VelocityError, match="not air values"):
        line_velocities(t, "air", path="x.fits")
    with pytest.raises(VelocityError, match="line table is in vacuum"):
        measure_velocity(spectrum_for(0.0), table_for(0.0, medium="vacuum"),
                         continuum=np.ones(2000))


@pytest.mark.parametrize("rv", [-480.0, 95.5])
def test_end_to_end_injected(rv):
    spec = spectrum_for(rv)
    res = measure_velocity(spec, table_for(rv), continuum=spec.flux)
    assert res.rv == pytest.approx(rv, abs=0.05)  # exact centroids in the table
    assert res.rv_ccf == pytest.approx(rv, abs=3 * res.rv_ccf_err + 0.5)
    assert res.frame == "topocentric" and "rv-topocentric" in res.flags
    assert "HI4861" not in res.lines_used and res.n_lines == 9  # 11 less HI4861, HeII4686
    assert not res.sb2 and "velocity-methods-disagree" not in res.flags
    row = res.as_row()
    assert row["rv_frame"] == "topocentric" and math.isnan(row["rv2"])


def test_barycentric_applied_and_medium_assumed_flagged():
    meta = ObservationMeta(ra_deg=83.82, dec_deg=-5.39, mjd_mid=62100.3, site_name="CTIO",
                           resolution_fwhm=1.5)
    spec = spectrum_for(20.0, meta=meta, assumed=True)
    res = measure_velocity(spec, table_for(20.0), continuum=spec.flux)
    corr = res.barycentric_correction
    assert res.frame == "barycentric" and abs(corr) < 30.8
    assert res.rv == pytest.approx(20.0 + corr + 20.0 * corr / C_KMS, abs=0.05)
    assert "medium-assumed" in res.flags and "ctio" in res.frame_reason


def _pair(star):
    csv = os.path.join(REF, f"{star}-Jacoby-spec.csv")
    reg = os.path.join(REF, "regridded", f"{star}_jacoby_regridded.txt")
    if not (os.path.exists(csv) and os.path.exists(reg)):
        pytest.skip(f"reference spectra folder {REF} absent")
    return csv, reg


def test_jacoby_grid_offset_reproduced():
    """README of the reference folder: the CSV wavelengths are 1.0 A too red relative to the
    library grid, i.e. c * 1.0 / lambda = 61-75 km/s over 4000-4900 A (+69 at 4340 A).
    At the library's ~15 A resolution one star's velocity is good to 30-100 km/s, so the
    median over three stars is compared, with the same generic template for both versions.
    """
    from starlines.measure import measure_spectrum
    from starlines.readers import read_spectrum
    from starlines.velocity import catalogue_template

    d_ccf, d_lines = [], []
    for star in ("HD12323", "HD13494", "HD37767"):
        res = []
        for path in _pair(star):
            spec = read_spectrum(path)
            m = measure_spectrum(spec)
            res.append(measure_velocity(spec, m.table, continuum=m.continuum,
                                        template=catalogue_template(spec, 15.0)))
        d_ccf.append(res[0].rv_ccf - res[1].rv_ccf)
        d_lines.append(res[0].rv - res[1].rv)
    assert np.median(d_ccf) == pytest.approx(69.0, abs=15.0)
    assert np.median(d_lines) == pytest.approx(69.0, abs=20.0)


def test_cli_rows_and_failures(tmp_path, capsys):
    from astropy.table import Table

    from starlines.cli import main

    _, reg = _pair("HD12323")
    bad = tmp_path / "broken.txt"
    bad.write_text("not a spectrum\n")
    out = tmp_path / "rv.ecsv"
    code = main(["velocity", reg, str(bad), "--out", str(out), "--site", "kpno"])
    assert code == 1  # one file failed
    t = Table.read(out)
    assert list(t["status"]) == ["ok", "failed"]
    assert t["error"][1] and str(bad) in t["error"][1]
    assert t["rv_frame"][0] == "topocentric"  # library file: no time or coordinates
    assert main(["velocity", reg, "--site", "nowhere"]) == 2
    assert "unknown site" in capsys.readouterr().err


def test_synthetic_template_of_a_neighbouring_type_recovers_an_injected_shift():
    """Branch of default_template using starlines.synth: the star is a synthetic O9.5 V-like
    spectrum (Teff 32000 K, log g 4.0, v sin i 80 km/s, 2.2 A resolution, S/N 100), the
    classification says Teff 29000 K, log g 3.7 (about two subtypes cooler), so the template
    (snapped to its 2000 K / 0.5 dex bin) does not match. The reference is the injected
    shift: synth applies the relativistic Doppler factor, the optical-convention velocity
    is c (sqrt((1 + b) / (1 - b)) - 1). Measured during development: biases -0.2 to -0.8
    km/s (+0.7 to +0.8 at -142 km/s) for 0-5000 K mismatch, i.e. within 2 standard errors
    of zero over 10 noise draws, scatter 1.3-1.7 km/s; we assert |bias| < 1.5 km/s plus
    three standard errors."""
    from types import SimpleNamespace

    from starlines.synth import synthetic_spectrum

    rv_in = 63.2
    b = rv_in / C_KMS
    rv_opt = C_KMS * (math.sqrt((1 + b) / (1 - b)) - 1)
    w = np.arange(3850.0, 5050.0, 0.6)
    clean = synthetic_spectrum(w, teff=32000.0, logg=4.0, he=0.1, vsini=80.0, rv=rv_in,
                               resolution_fwhm=2.2, medium="air")
    cls = SimpleNamespace(teff=29000.0, logg=3.7, he_abundance=0.1)
    tab = QTable({"line": ["HeI4471"], "status": ["not detected"],
                  "centroid": [np.nan], "centroid_err": [np.nan]})
    tab.meta.update(medium="air", vsini=95.0)  # measured v sin i, a little high
    rng = np.random.default_rng(7)
    vel, err = [], []
    for _ in range(10):
        flux = clean + rng.normal(0, 0.01, w.size)
        spec = Spectrum(w, flux, medium="air", meta=ObservationMeta(resolution_fwhm=2.2),
                        path="injected.fits")
        res = measure_velocity(spec, tab, classification=cls, continuum=flux,
                               detect_binary=False)
        vel.append(res.rv_ccf)
        err.append(res.rv_ccf_err)
    assert "synthetic spectrum Teff 28000 K" in " ".join(res.notes)
    vel = np.array(vel)
    se = vel.std(ddof=1) / math.sqrt(vel.size)
    assert abs(vel.mean() - rv_opt) < 1.5 + 3 * se
    assert 0.5 * vel.std(ddof=1) < np.mean(err) < 2.0 * vel.std(ddof=1)  # Zucker realistic
    assert math.isnan(res.rv) and "few-rv-lines" in res.flags  # no centroids in the table


def _o_star_table(rv, pull_kms=35.0):
    """An O-star line table as measure_lines gives it: He II present, the Pickering lines
    beside H-delta/H-gamma not separated (status "blended"), so the Balmer centroids are
    pulled to the blue by ``pull_kms`` (the He II lines lie 1.7-2.0 A bluer)."""
    t = table_for(rv)
    t["significance"] = [20.0] * len(IDS)
    for ident in ("HI4102", "HI4340"):
        k = IDS.index(ident)
        t["centroid"][k] = t["wavelength_rest"][k] * (1 + (rv - pull_kms) / C_KMS)
    extra = QTable({"line": ["HeII4100", "HeII4339"],
                    "wavelength_rest": [line("HeII4100").wavelength("air"),
                                        line("HeII4339").wavelength("air")],
                    "centroid": [np.nan, np.nan], "centroid_err": [np.nan, np.nan],
                    "status": ["blended", "blended"], "emission": [False, False],
                    "depth": [np.nan, np.nan], "fwhm": [np.nan, np.nan],
                    "ew": [np.nan, np.nan], "significance": [np.nan, np.nan]})
    from astropy.table import vstack

    out = vstack([t, extra])
    out.meta["medium"] = "air"
    return out


def test_balmer_lines_pulled_by_pickering_blends_are_left_out():
    """Injected pull: Balmer centroids 35 km/s blue of the star (the size seen on the demo
    O stars); the line choice drops them when He II is detected, so the mean is exact."""
    ids, rv, err, reasons = line_velocities(_o_star_table(40.0), "air")
    why = dict(zip(ids, reasons))
    assert why["HI4102"].startswith("blended with HeII4100")
    assert why["HI4340"].startswith("blended with HeII4339")
    mean, _, _ = combine_velocities(rv[[r == "" for r in reasons]],
                                    err[[r == "" for r in reasons]])
    assert mean == pytest.approx(40.0, abs=0.05)
    # a B star: no He II line detected -> the (absent) Pickering lines pull nothing
    t = _o_star_table(40.0, pull_kms=0.0)
    t["status"] = [("not detected" if s == "measured" else s) if str(i).startswith("HeII")
                   else s for i, s in zip(t["line"], t["status"])]
    why = dict(zip(*line_velocities(t, "air")[::3]))
    assert why["HI4102"] == "" and why["HI4340"] == ""


def test_of_complex_and_lines_near_emission_are_left_out():
    t = table_for(10.0, emission=[False] * 10 + [True])  # He II 4686 in emission
    t["fwhm"][IDS.index("HeII4686")] = 14.0  # broad emission: He I 4713 is 27 A away
    why = dict(zip(*line_velocities(t, "air")[::3]))
    assert why["HeII4686"] == "emission" and why["HeI4713"] == "near an emission line"
    assert why["HeI4471"] == ""


def test_demo_of_star_velocity_not_pulled_by_emission(tmp_path):
    """The demo's O5 If star (starlines.demo, planted Of emission in He II 4686 and N III)
    written alone, read, measured and classified: the barycentric velocity must match the
    injected one within 3 sigma + 2 km/s (before: 9 km/s for an injected 27)."""
    from starlines.classify import classify
    from starlines.demo import demo_stars, write_demo_night
    from starlines.measure import measure_spectrum
    from starlines.readers import read_spectrum

    star = {s.name: s for s in demo_stars()}["H7-03"]
    made = write_demo_night(tmp_path, stars=[star])
    spec = read_spectrum(made["files"][0])
    m = measure_spectrum(spec)
    res = measure_velocity(spec, m.table, classification=classify(m), continuum=m.continuum)
    assert res.frame == "barycentric"
    assert abs(res.rv - star.rv) < 3 * res.rv_err + 2.0
    assert abs(res.rv_ccf - star.rv) < 3 * res.rv_ccf_err + 2.0
    assert "HeII4686" not in res.lines_used and "NIII4641" not in res.lines_used


def test_triage_site_options_reach_the_velocity_stage(tmp_path, capsys):
    """--site overrides the header's site (frame_reason names it, and the correction
    differs from the header site's by the rotation term); an unknown site stops the
    triage before any work with exit status 2."""
    from starlines.cli import main
    from starlines.demo import demo_stars, write_demo_night
    from starlines.pipeline import AnalysisOptions, analyse_file

    star = {s.name: s for s in demo_stars()}["H7-20"]
    path = write_demo_night(tmp_path / "n", stars=[star])["files"][0]
    cfg = tmp_path / "sites.toml"
    cfg.write_text('[sites.antipode]\nname = "Antipode"\nlat_deg = 27.63\n'
                   'lon_east_deg = 111.79\nheight_m = 0\n')
    header = analyse_file(path).rows[0]
    moved = analyse_file(path, AnalysisOptions(site="antipode", site_config=str(cfg))).rows[0]
    assert header["rv_frame"] == moved["rv_frame"] == "barycentric"
    assert "antipode" in moved["rv_frame_reason"]
    # the site's rotation velocity (<= 0.47 km/s) projected differently: not identical
    diff = abs(header["barycentric_correction"] - moved["barycentric_correction"])
    assert 1e-3 < diff < 1.0
    assert main(["triage", str(tmp_path / "n" / "night"), "--site", "nowhere"]) == 2
    assert "unknown site" in capsys.readouterr().err
