"""The archive across nights (starlines.archive, starlines.archive_schema).

Result rows here are synthetic *inputs* to the store (not measurements). Reference values:
the planted velocity change (80 km/s, errors 5 km/s) against the criterion of Sana et al.
(2013, A&A 550, A107; thresholds from memory); SQLite's own ``PRAGMA integrity_check``;
SHA-256 of the file bytes (hashlib) to show a refused file is untouched.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import sqlite3
import subprocess
import sys

import astropy.units as u
import numpy as np
import pytest

from starlines.archive import Archive, file_checksum
from starlines.archive_schema import APPLICATION_ID, SCHEMA_VERSION, create_v1
from starlines.errors import ArchiveError

LINES = ("HI4340", "HI4861", "HeI4471", "HeII4541", "HeII4686", "SiIII4553")
ERR = 5.0  # km/s, velocity error of every synthetic epoch
SINGLES = [f"HD {100002 + i}" for i in range(6)]
BINARY = "HD 100001"


def _position(k: int) -> tuple[float, float]:
    return 80.0 + 0.1 * k, -5.0 - 0.05 * k


def synthetic_night(night: str, mjd: float, *, binary_rv: float, seed: int,
                    coordinate_only: str | None = None):
    """Rows and line rows of one invented night: one binary and six single stars."""
    rng = np.random.default_rng(seed)
    rows, lines = [], []
    for k, name in enumerate([BINARY, *SINGLES]):
        rv = binary_rv if name == BINARY else 10.0 * k + rng.normal(0.0, ERR)
        ra, dec = _position(k)
        row = {"file": f"{night}/{k:03d}.fits", "label": "", "status": "ok", "error": "",
               "object": None if name == coordinate_only else name,
               "mjd_mid": mjd + 0.01 * k, "ra": ra, "dec": dec, "snr": 150.0,
               "sptype": "O9.5 V", "subtype": 9.5, "teff": 31000.0, "rv": rv, "rv_err": ERR,
               "rv_frame": "barycentric", "rv_ccf": rv, "rv2": None, "flags": "",
               "checksum": f"{night}-{k}", "night": night, "followup_score": 0.1 * k}
        rows.append(row)
        lines += [{"file": row["file"], "label": "", "line": lid, "ew": 0.3 + 0.1 * j,
                   "ew_err": 0.02, "centroid": 4000.0 + 100 * j, "rv": rv, "rv_err": 8.0,
                   "fwhm": 3.0, "status": "measured"} for j, lid in enumerate(LINES)]
    return rows, lines


def two_nights(arch: Archive) -> None:
    arch.store_night(*synthetic_night("2031-01-10", 62500.1, binary_rv=-40.0, seed=1))
    arch.store_night(*synthetic_night("2031-01-14", 62504.1, binary_rv=40.0, seed=2,
                                      coordinate_only=SINGLES[2]))


def test_two_nights_flag_only_the_binary(tmp_path):
    with Archive(tmp_path / "a.db") as arch:
        two_nights(arch)
        res = arch.flag_variables([BINARY, *SINGLES])
        assert [n for n, r in res.items() if r.variable] == [BINARY]
        assert res[BINARY].best_pair_dv == pytest.approx(80.0, abs=1e-9)  # planted
        assert all(r.n_used == 2 for r in res.values())  # coordinate-only file found its star
        counts = arch.counts()
        assert counts["stars"] == 7 and counts["spectra"] == 14 and counts["nights"] == 2
        assert counts["line_measurements"] == 14 * len(LINES)


def test_rerunning_a_night_updates_and_never_duplicates(tmp_path):
    with Archive(tmp_path / "a.db") as arch:
        two_nights(arch)
        before = arch.counts()
        rows, lines = synthetic_night("2031-01-10", 62500.1, binary_rv=-40.0, seed=1)
        ids_again = arch.store_night(rows, lines)
        assert arch.counts() == before
        rows[0]["rv"] = -41.0  # a re-reduction changes a value: updated in place
        assert arch.store_spectrum(rows[0], lines[:2]) == ids_again[0]
        assert arch.epochs(BINARY)["rv"][0] == -41.0
        assert arch.counts()["line_measurements"] == before["line_measurements"] - 4


def test_epochs_table_has_units_and_frame_notes(tmp_path):
    with Archive(tmp_path / "a.db") as arch:
        two_nights(arch)
        row = synthetic_night("2031-01-20", 62510.1, binary_rv=0.0, seed=3)[0][0]
        row.update(checksum="topo", rv_frame="topocentric")
        arch.store_spectrum(row, [])
        tab = arch.epochs("hd100001")
        assert tab["rv"].unit == u.km / u.s and len(tab) == 3
        assert list(tab["used"]) == [True, True, False]
        assert "topocentric" in tab["note"][2]
        assert arch.variability(BINARY).skipped[0].startswith("2031-01-20")


def test_quantities_are_converted_at_the_boundary(tmp_path):
    with Archive(tmp_path / "a.db") as arch:
        row = {"file": "q.fits", "object": "HD 1", "checksum": "q",
               "rv": 80_000.0 * u.m / u.s, "rv_err": 5000.0 * u.m / u.s, "teff": 3.0e4 * u.K,
               "rv_frame": "barycentric", "extra_value": np.float32(1.5)}
        arch.store_spectrum(row, [{"line": "HI4340", "ew": 1200.0 * u.mAA}])
        tab = arch.epochs("HD 1")
        # 80 000 m/s = 80 km/s (astropy.units conversion)
        assert tab["rv"][0] == pytest.approx(80.0, abs=1e-9)
        assert tab["rv_err"][0] == pytest.approx(5.0, abs=1e-9)
        ew = arch._query("SELECT ew FROM line_measurements")[0][0]
        assert ew == pytest.approx(1.2, abs=1e-12)  # 1200 mA = 1.2 A


def test_a_failing_spectrum_stores_nothing(tmp_path):
    rows, lines = synthetic_night("n", 62500.1, binary_rv=0.0, seed=1)
    with Archive(tmp_path / "a.db") as arch:
        arch.store_spectrum(rows[0], lines[:6])
        before = arch.counts()
        doubled = lines[6:12] + lines[6:7]  # the same line twice: the last insert fails
        with pytest.raises(ArchiveError, match="rolled back"):
            arch.store_spectrum(rows[1], doubled)
        assert arch.counts() == before
        with pytest.raises(ArchiveError, match="no checksum"):
            arch.store_spectrum({k: v for k, v in rows[1].items() if k != "checksum"}, [])


def test_migration_from_version_1(tmp_path):
    path = tmp_path / "v1.db"
    conn = sqlite3.connect(path, isolation_level=None)
    create_v1(conn)
    conn.execute("INSERT INTO stars (id, name, name_key, ra, dec) "
                 "VALUES (1, 'HD 1', 'HD 1', 10, 20)")
    conn.execute("INSERT INTO spectra (star_id, checksum, label, night, file, rv, rv_err, "
                 "rv_frame, mjd_mid) VALUES (1, 'x', '', 'old', 'x.fits', 5, 1, "
                 "'barycentric', 60000)")
    conn.execute("INSERT INTO line_measurements (spectrum_id, line, ew) "
                 "VALUES (1, 'HI4340', 1.0)")
    conn.close()
    with Archive(path) as arch:
        assert arch._query("PRAGMA user_version")[0][0] == SCHEMA_VERSION == 3
        indexes = {r[0] for r in arch._query("SELECT name FROM sqlite_master "
                                             "WHERE type = 'index'")}
        assert {"idx_spectra_star", "idx_spectra_night", "idx_stars_dec"} <= indexes
        assert arch.counts() == {"stars": 1, "star_names": 1, "spectra": 1,
                                 "line_measurements": 1, "nights": 1}
        arch.store_spectrum({"file": "y.fits", "object": "HD1", "checksum": "y",
                             "night": "new", "rv": 6.0, "rv_err": 1.0,
                             "rv_frame": "barycentric"}, [])
        assert len(arch.epochs("HD 1")) == 2
        assert arch.integrity_check() == "ok"


def _sha(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def test_random_bytes_are_refused_and_untouched(tmp_path):
    path = tmp_path / "junk.db"
    path.write_bytes(np.random.default_rng(0).bytes(8192))
    before = _sha(path)
    with pytest.raises(ArchiveError, match="not an SQLite database") as exc:
        Archive.open(path)
    assert str(path) in str(exc.value) and "\n" not in str(exc.value)
    assert _sha(path) == before
    assert sorted(os.listdir(tmp_path)) == ["junk.db"]


def test_sqlite_header_with_garbage_is_refused_and_untouched(tmp_path):
    path = tmp_path / "broken.db"
    path.write_bytes(b"SQLite format 3\x00" + np.random.default_rng(1).bytes(4080))
    before = _sha(path)
    with pytest.raises(ArchiveError, match="corrupt|another application"):
        Archive.open(path)
    assert _sha(path) == before


def test_foreign_sqlite_is_refused_and_untouched(tmp_path):
    path = tmp_path / "other.db"
    conn = sqlite3.connect(path)
    conn.execute("CREATE TABLE stars (x)")  # a table name we also use
    conn.commit()
    conn.close()
    before = _sha(path)
    with pytest.raises(ArchiveError, match="another application"):
        Archive(path)
    assert _sha(path) == before
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    tables = [r[0] for r in conn.execute("SELECT name FROM sqlite_master")]
    conn.close()
    assert tables == ["stars"]


def test_newer_schema_is_refused(tmp_path):
    path = tmp_path / "a.db"
    Archive(path).close()
    conn = sqlite3.connect(path)
    assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    conn.commit()
    conn.close()
    before = _sha(path)
    with pytest.raises(ArchiveError, match="newer"):
        Archive(path)
    assert _sha(path) == before


def test_missing_archive_without_create(tmp_path):
    with pytest.raises(ArchiveError, match="no archive"):
        Archive(tmp_path / "none.db", create=False)
    assert not (tmp_path / "none.db").exists()


def test_file_checksum_is_sha256(tmp_path):
    path = tmp_path / "f.bin"
    path.write_bytes(b"abc")
    # SHA-256("abc"), FIPS 180-2 Appendix B.1 test vector
    assert file_checksum(path) == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad")


# ----------------------------------------------------------------- processes
WRITER = """
import json, sys
from starlines.archive import Archive
items = json.load(open(sys.argv[2]))
with Archive(sys.argv[1]) as arch:
    for item in items:
        arch.store_spectrum(item["row"], item["lines"])
        print(item["row"]["checksum"], flush=True)
"""


def _items(first: int, last: int, n_stars: int = 25, n_lines: int = 20) -> list[dict]:
    out = []
    for i in range(first, last):
        k = i % n_stars
        row = {"file": f"s{i:04d}.fits", "label": "", "object": f"HD {200000 + k}",
               "ra": 120.0 + 0.01 * k, "dec": 10.0, "checksum": f"sum{i:04d}",
               "night": f"n{i // 50}", "mjd_mid": 62000.0 + i / 50, "rv": float(i % 7),
               "rv_err": 2.0, "rv_frame": "barycentric"}
        out.append({"row": row, "lines": [{"line": f"L{j:02d}", "ew": 0.1 * j}
                                          for j in range(n_lines)]})
    return out


def _write_items(path, items) -> str:
    with open(path, "w") as fh:
        json.dump(items, fh)
    return str(path)


def _check_whole_spectra(arch: Archive, n_lines: int) -> None:
    assert arch.integrity_check() == "ok"
    per = arch._query("SELECT s.id, count(l.id) FROM spectra s LEFT JOIN line_measurements l "
                      "ON l.spectrum_id = s.id GROUP BY s.id")
    assert {n for _, n in per} <= {n_lines}
    dup = arch._query("SELECT checksum, count(*) FROM spectra GROUP BY checksum, label "
                      "HAVING count(*) > 1")
    assert dup == []


def test_killed_run_leaves_whole_spectra_and_reruns_cleanly(tmp_path):
    db, n = tmp_path / "a.db", 400
    items = _items(0, n)
    data = _write_items(tmp_path / "items.json", items)
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(db), data],
                            stdout=subprocess.PIPE, text=True)
    for _ in range(30):  # wait until 30 spectra are committed, then kill mid-run
        assert proc.stdout.readline()
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    proc.stdout.close()
    with Archive(db) as arch:
        stored = arch.counts()["spectra"]
        assert 30 <= stored < n, "the run was not killed mid-way"
        _check_whole_spectra(arch, 20)
        for item in items:  # rerun the same input
            arch.store_spectrum(item["row"], item["lines"])
        assert arch.counts()["spectra"] == n
        assert arch.counts()["line_measurements"] == 20 * n
        assert arch.counts()["stars"] == 25
        _check_whole_spectra(arch, 20)


def test_two_concurrent_writers(tmp_path):
    db = tmp_path / "a.db"
    a = _write_items(tmp_path / "a.json", _items(0, 150))
    b = _write_items(tmp_path / "b.json", _items(75, 225))  # 75 spectra written by both
    procs = [subprocess.Popen([sys.executable, "-c", WRITER, str(db), f],
                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
             for f in (a, b)]
    errors = [p.communicate(timeout=120)[1] for p in procs]
    assert [p.returncode for p in procs] == [0, 0], errors
    with Archive(db) as arch:
        assert arch.counts()["spectra"] == 225
        assert arch.counts()["line_measurements"] == 225 * 20
        assert arch.counts()["stars"] == 25  # no star created twice by a race
        _check_whole_spectra(arch, 20)


def test_damaged_archive_page_is_reported_in_one_line(tmp_path):
    path = tmp_path / "a.db"
    with Archive(path) as arch:
        for i in range(300):
            arch.store_spectrum({"file": f"{i}", "object": f"HD {i}", "checksum": str(i)},
                                [{"line": f"L{j}", "ew": 1.0} for j in range(10)])
    raw = bytearray(path.read_bytes())
    page = 4096  # SQLite's default page size (sqlite.org, "Database File Format")
    raw[5 * page:6 * page] = np.random.default_rng(2).bytes(page)
    path.write_bytes(bytes(raw))
    before = _sha(path)
    with pytest.raises(ArchiveError, match="corrupt") as exc:
        Archive(path)
    assert "\n" not in str(exc.value)
    assert _sha(path) == before
