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
