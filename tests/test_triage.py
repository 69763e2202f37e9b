"""The night driver: every file accounted for, outputs with units, resume after a kill.

The night is a small subset of the invented demo night (starlines.demo), one file of it
corrupt on purpose, plus files the readers must refuse.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time

import pytest

from starlines.cli import main
from starlines.pipeline import analyse_file
from starlines.triage import Journal, triage_night

STARS = ("H7-01", "H7-02", "H7-05", "H7-14", "H7-26", "FLD-201")


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    from starlines.demo import demo_stars, write_demo_night

    out = tmp_path_factory.mktemp("demo")
    made = write_demo_night(out, stars=[s for s in demo_stars() if s.name in STARS])
    # files that are not spectra: a text file of garbage and an empty FITS-named file
    with open(os.path.join(made["night"], "notes.txt"), "w") as fh:
        fh.write("seeing 1.2 arcsec, clouds after 3h\n")
    open(os.path.join(made["night"], "empty.fits"), "wb").close()
    with open(os.path.join(made["night"], "observing-log.pdf"), "wb") as fh:
        fh.write(b"%PDF-1.4 not a spectrum")
    return made


@pytest.fixture(scope="module")
def triaged(night, tmp_path_factory):
    out = tmp_path_factory.mktemp("out")
    result = triage_night(night["night"], out, targets=night["targets"], workers=2,
                          figures=False, formats=("ecsv", "csv", "fits"), progress=False)
    return out, result


def test_every_file_is_accounted_for(night, triaged):
    _, result = triaged
    files = {r["file"] for r in result.rows}
    spectra = [f for f in os.listdir(night["night"]) if not f.endswith(".pdf")]
    assert len(files) == len(spectra) == len(STARS) + 2
    assert [os.path.basename(p) for p in result.ignored] == ["observing-log.pdf"]
    failed = {os.path.basename(r["file"]): r["error"] for r in result.rows
              if r["status"] == "failed"}
    assert set(failed) == {"20240217_005_H7-26.fits", "notes.txt", "empty.fits"}
    for cause in failed.values():
        assert cause and "\n" not in cause and "Traceback" not in cause
    ok = [r for r in result.rows if r["status"] == "ok"]
    assert len(ok) == len(STARS) - 1
    assert all(r["sptype"] and r["rv_n_lines"] > 0 for r in ok)


def test_tables_carry_units_and_line_rows(triaged):
    from astropy.table import Table

    out, result = triaged
    res = Table.read(out / "results.ecsv")
    assert len(res) == len(result.rows)
    assert str(res["rv"].unit) == "km / s" and str(res["teff"].unit) == "K"
    assert str(res["ra"].unit) == "deg"
    assert set(res["status"]) == {"ok", "failed"}
    lines = Table.read(out / "lines.ecsv")
    assert {"file", "label", "line", "ew", "rv"} <= set(lines.colnames)
    assert str(lines["ew"].unit) == "Angstrom"
    ok_files = {r["file"] for r in result.rows if r["status"] == "ok"}
    assert set(lines["file"]) == ok_files
    fits = Table.read(out / "results.fits")
    assert len(fits) == len(res) and str(fits["rv"].unit) == "km / s"
    assert len(Table.read(out / "results.csv", format="ascii.csv")) == len(res)
    follow = Table.read(out / "followup.ecsv")
    assert list(follow["followup_rank"]) == list(range(1, len(follow) + 1))


def test_target_list_is_compared(triaged):
    _, result = triaged
    by = {r["object"]: r for r in result.rows if r["object"]}
    assert by["H7-01"]["catalogue_type"] and by["H7-01"]["catalogue_rv"] == 24.0
    assert "double-lined" in by["H7-14"]["flags"]


def test_rerun_reuses_the_journal_and_redo_does_not(night, triaged, tmp_path):
    out, first = triaged
    again = triage_night(night["night"], out, targets=night["targets"], workers=1,
                         figures=False, progress=False)
    assert again.analysed == 0 and again.reused == len(STARS) + 2
    assert json.dumps(again.rows, sort_keys=True) == json.dumps(first.rows, sort_keys=True)
    # a touched file is analysed again, the others are not
    victim = sorted(f for f in os.listdir(night["night"]) if "H7-01" in f)[0]
    path = os.path.join(night["night"], victim)
    os.utime(path, ns=(time.time_ns(), time.time_ns()))
    touched = triage_night(night["night"], out, workers=1, figures=False, progress=False)
    assert touched.analysed == 1
    redo = triage_night(night["night"], out, workers=1, figures=False, redo=True,
                        progress=False, report=False)
    assert redo.analysed == len(STARS) + 2 and redo.reused == 0


def test_killed_run_loses_no_finished_file(night, tmp_path):
    out = tmp_path / "killed"
    journal = Journal(str(out))
    cmd = [sys.executable, "-m", "starlines.cli", "-q", "triage", night["night"], "--out",
           str(out), "--workers", "1", "--no-figures"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            if os.path.exists(journal.path) and len(journal.load()) >= 2:
                break
            time.sleep(0.02)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
    done = journal.load()
    assert len(done) >= 2
    with open(journal.path, "a") as fh:  # a record torn by the kill
        fh.write('{"version": 1, "key": {"pa')
    resumed = triage_night(night["night"], out, workers=1, figures=False, progress=False)
    assert resumed.reused >= len(done) and resumed.reused + resumed.analysed == len(STARS) + 2
    assert len({r["file"] for r in resumed.rows}) == len(STARS) + 2


def test_cli_triage_in_process(night, tmp_path, capsys):
    code = main(["-q", "triage", night["night"], "--out", str(tmp_path / "cli"), "--workers",
                 "1", "--no-figures", "--format", "csv"])
    out = capsys.readouterr().out
    assert code == 1  # some spectra failed
    assert "3 failed" in out and "report:" in out
    assert (tmp_path / "cli" / "results.csv").exists()
    assert (tmp_path / "cli" / "report.html").exists()


def test_cli_rejects_unknown_format_and_missing_folder(night, tmp_path, capsys):
    assert main(["triage", night["night"], "--format", "xlsx", "--out", str(tmp_path)]) == 2
    assert "unknown table format" in capsys.readouterr().err
    assert main(["triage", str(tmp_path / "nope")]) == 2
    assert "is not a folder" in capsys.readouterr().err


@pytest.mark.parametrize("content", [b"", b"SIMPLE  = T\n garbage", b"1 2\n3 x\n"])
def test_analyse_file_never_raises(tmp_path, content):
    path = tmp_path / "bad.fits"
    path.write_bytes(content)
    result = analyse_file(path)
    assert [r["status"] for r in result.rows] == ["failed"]
    assert result.rows[0]["error"] and "\n" not in result.rows[0]["error"]
    missing = analyse_file(tmp_path / "absent.fits")
    assert missing.rows[0]["status"] == "failed"


def test_figures_are_written_and_journal_is_json_lines(night, tmp_path):
    night_dir = tmp_path / "two"
    os.makedirs(night_dir)
    for f in sorted(os.listdir(night["night"])):
        if "H7-01" in f or "FLD-201" in f:
            shutil.copy(os.path.join(night["night"], f), night_dir)
    result = triage_night(night_dir, tmp_path / "out", workers=1, progress=False)
    figs = sorted(os.listdir(tmp_path / "out" / "figures"))
    assert len(figs) == 2 and all(f.endswith(".png") for f in figs)
    with open(Journal(str(tmp_path / "out")).path) as fh:
        records = [json.loads(line) for line in fh]
    assert {r["key"]["path"] for r in records} == {os.path.abspath(r["file"])
                                                   for r in result.rows}


# ----------------------------------------------------------------------------- synthetic files
def _synthetic(wave, *, subtype=9.0, vsini=60.0, rv=30.0, fwhm=2.5, snr=200.0, seed=1):
    """Synthetic O9 V flux (starlines.synth) with Gaussian noise of the given S/N."""
    import numpy as np

    from starlines.synth import parameters_for_type, synthetic_spectrum

    teff, logg = parameters_for_type(subtype, "V")
    flux = synthetic_spectrum(wave, teff=teff, logg=logg, he=0.1, vsini=vsini, rv=rv,
                              resolution_fwhm=fwhm, medium="air")
    rng = np.random.default_rng(seed)
    return 1000.0 * (flux + rng.normal(0.0, 1.0 / snr, wave.size))


def _cards(header, fwhm):
    header["OBJECT"] = "SYNTH-1"
    header["RESOLUTN"] = (fwhm, "instrumental FWHM [Angstrom]")
    header["AIRORVAC"] = "air"


def test_vsini_below_the_resolution_floor_is_an_upper_limit_not_a_fast_rotator(tmp_path):
    import numpy as np
    from astropy.io import fits

    from starlines.report import vsini_text

    # 3.0 A FWHM: floor c FWHM / lambda (common practice) = 179-220 km/s at the v sin i
    # lines (Si IV 4089 to He I 5016, starlines.measure.VSINI_TIERS), about the 200 km/s
    # fast-rotator threshold; the star rotates at 60 km/s, so its v sin i can only be an
    # upper limit
    wave = 3850.0 + 0.6 * np.arange(2100)
    hdu = fits.PrimaryHDU(_synthetic(wave, vsini=60.0, fwhm=3.0).astype(np.float32))
    hdu.header.update(CRVAL1=3850.0, CDELT1=0.6, CRPIX1=1.0, CTYPE1="AWAV",
                      CUNIT1="Angstrom")
    _cards(hdu.header, 3.0)
    hdu.writeto(tmp_path / "slow.fits")
    (row,) = analyse_file(tmp_path / "slow.fits").rows
    assert row["status"] == "ok"
    assert row["vsini_limit"] is True
    c_kms = 299792.458
    assert c_kms * 3.0 / 5015.7 - 0.5 <= row["vsini_floor"] <= c_kms * 3.0 / 4088.9 + 0.5
    assert row["vsini"] >= row["vsini_floor"] - 0.5 and np.isnan(row["vsini_err"])
    assert "fast-rotator" not in row["flags"]
    assert vsini_text(row) == f"&lt; {row['vsini']:.0f}"


def _multispec(path, pieces, *, fwhm=2.5):
    """An IRAF multispec file (WAT2 specN strings, dtype 0 = linear) holding ``pieces`` of
    (first wavelength, step, flux); layout as in tests/test_readers.py."""
    import numpy as np
    from astropy.io import fits

    n = max(len(f) for _, _, f in pieces)
    data = np.ones((len(pieces), n), dtype=np.float32)
    specs = []
    for k, (w0, dw, flux) in enumerate(pieces, start=1):
        data[k - 1, :len(flux)] = flux
        specs.append(f'spec{k} = "{k} {70 - k} 0 {w0:.4f} {dw:.4f} {len(flux)} 0. '
                     f'{10 * k}.5 {10 * k + 8}.5"')
    text = "wtype=multispec " + " ".join(specs)
    hdu = fits.PrimaryHDU(data)
    hdu.header["WAT0_001"] = "system=multispec"
    hdu.header["WAT1_001"] = "wtype=multispec label=Wavelength units=angstroms"
    for i in range(0, len(text), 68):
        hdu.header[f"WAT2_{i // 68 + 1:03d}"] = text[i:i + 68]
    hdu.header["CTYPE1"] = "MULTISPE"
    _cards(hdu.header, fwhm)
    hdu.writeto(path)
    return path


def test_echelle_orders_are_merged_into_one_row_and_fibers_kept_apart(tmp_path):
    import numpy as np

    # seven orders of 170 A overlapping by 10 A, 3880-4920 A, and one order (5400-5560 A)
    # holding none of the classification lines: one merged row, every order used
    step = 0.5
    wave = 3880.0 + step * np.arange(int((5560.0 - 3880.0) / step) + 1)
    flux = _synthetic(wave, vsini=80.0, rv=30.0)
    pieces = []
    for w0 in [3880.0 + 160.0 * k for k in range(7)] + [5400.0]:
        sel = (wave >= w0) & (wave < w0 + 170.0)
        pieces.append((w0, step, flux[sel]))
    path = _multispec(tmp_path / "echelle.fits", pieces)
    result = analyse_file(path)
    assert [r["label"] for r in result.rows] == ["merged 8 orders"]
    row = result.rows[0]
    assert row["status"] == "ok" and row["n_orders"] == 8
    # injected O9 V: type within 1.5 subtypes (criteria.md C4, Markova et al. 2011)
    assert abs(row["subtype"] - 9.0) <= 1.5
    # injected 30 km/s (topocentric: no site); 10 km/s = 5x the typical error at S/N 200
    assert row["rv"] == pytest.approx(30.0, abs=10.0)
    # two fibers on the same 3880-5000 A range: one row each, both analysed
    sel = wave <= 5000.0
    fib = _multispec(tmp_path / "fibers.fits", [
        (3880.0, step, flux[sel]),
        (3880.0, step, _synthetic(wave[sel], subtype=10.0, vsini=80.0, rv=-20.0, seed=2))])
    rows = analyse_file(fib).rows
    assert [r["status"] for r in rows] == ["ok", "ok"] and len({r["label"] for r in rows}) == 2
    assert [r["n_orders"] for r in rows] == [1, 1]
    assert rows[1]["rv"] == pytest.approx(-20.0, abs=10.0)


def test_changed_options_are_analysed_again(night, tmp_path):
    from starlines.airvac import refractive_index

    out = tmp_path / "opts"
    first = triage_night(night["night"], out, workers=1, figures=False, progress=False,
                         report=False)
    same = triage_night(night["night"], out, workers=1, figures=False, progress=False,
                        report=False)
    assert same.analysed == 0
    # forcing vacuum on air wavelengths: every file is redone, and the velocities move by
    # -(n - 1) c with n the refractive index of air at ~4500 A (n - 1 = 2.8e-4, -84 km/s;
    # Morton 2000 via starlines.airvac, criteria.md 5a)
    vac = triage_night(night["night"], out, workers=1, figures=False, progress=False,
                       report=False, medium="vacuum")
    assert vac.analysed == len(STARS) + 2 and vac.reused == 0
    shift = -(refractive_index(4500.0) - 1.0) * 299792.458
    by_first = {r["object"]: r for r in first.rows if r["status"] == "ok"}
    for row in vac.rows:
        if row["status"] == "ok" and row["object"] != "H7-14":  # SB2: blended lines
            assert row["rv"] - by_first[row["object"]]["rv"] == pytest.approx(shift, abs=5.0)
    back = triage_night(night["night"], out, workers=1, figures=False, progress=False,
                        report=False)
    assert back.analysed == len(STARS) + 2  # the journal's latest records are vacuum ones
    assert Journal(str(out)).load()[os.path.abspath(first.rows[0]["file"])]["key"]["options"]


REFERENCE = os.environ.get("STARLINES_REFERENCE_SPECTRA") or os.path.join(
    os.path.dirname(__file__), os.pardir, os.pardir, "shared", "reference-spectra")


def _reference(name):
    path = os.path.join(REFERENCE, "miles", name)
    if not os.path.exists(path):
        pytest.skip(f"reference spectra not found at {REFERENCE} (set "
                    "STARLINES_REFERENCE_SPECTRA)")
    return path


def test_bad_library_spectrum_is_suspect_data():
    # MILES HD 216916 (B2 IV): the library notes S/N ~18-40 (reference-spectra README,
    # "data"); resampled to 0.9 A pixels at 2.5 A FWHM, its pixel noise is correlated and
    # DER_SNR (Stoehr et al. 2008, independent pixels) overestimates the S/N
    (row,) = analyse_file(_reference("MILES_res2.50_star_m0853V.fits")).rows
    flags = row["flags"].split(",")
    assert "suspect-data" in flags and "low-snr" in flags
    assert "H-gamma not detected" in row["notes"]
    assert row["snr"] > 50.0  # DER_SNR passes the cut ...
    assert 18.0 <= row["snr_continuum"] <= 45.0  # ... the continuum scatter does not
    assert "balmer-emission" not in flags  # H8 "emission" with H-beta in absorption
    # too noisy in 4000-4700 A to be typed (starlines.quality.MIN_TYPING_SNR): no type,
    # and no claim that it is not a hot star
    assert row["sptype"] == "" and "not-hot-star" not in flags
    assert row["snr_typing_region"] < 10.0
    # a good MILES B2 IV (HD 886, S/N ~220 in the README) is not suspect
    (good,) = analyse_file(_reference("MILES_res2.50_star_m0011V.fits")).rows
    assert "suspect-data" not in good["flags"] and "low-snr" not in good["flags"]
