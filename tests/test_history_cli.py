"""``starlines history`` and the velocity-history figure, in process with capsys.

The archive holds synthetic result rows (inputs, see tests/test_archive.py): a binary whose
velocity changes by 80 km/s (errors 5 km/s) between two nights, which the criterion of
Sana et al. (2013, A&A 550, A107; thresholds from memory) flags, and a topocentric epoch
that must be shown but left out of the test.
"""

from __future__ import annotations

import hashlib
import subprocess
import sys

import astropy.units as u
import pytest
from astropy.table import Table

from starlines.archive import Archive
from starlines.cli import main
from starlines.plots_history import plot_velocity_history

sys.path.insert(0, str(__import__("pathlib").Path(__file__).parent))
from test_archive import BINARY, SINGLES, synthetic_night, two_nights  # noqa: E402


@pytest.fixture
def archive(tmp_path):
    path = tmp_path / "archive.db"
    with Archive(path) as arch:
        two_nights(arch)
        row = synthetic_night("2031-01-20", 62510.1, binary_rv=0.0, seed=3)[0][0]
        row.update(checksum="topo", rv_frame="topocentric")
        arch.store_spectrum(row, [])
    return path


def test_history_of_the_binary_writes_table_and_figure(archive, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["history", "hd 100001", "--archive", str(archive), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "HD 100001" in text and "3 spectra, 2 with a comparable velocity" in text
    assert "velocity variable" in text and "max |dv|=80.0 km/s" in text
    assert "skipped 2031-01-20" in text and "'topocentric'" in text
    tab = Table.read(out / "HD_100001_epochs.ecsv")
    assert tab["rv"].unit == u.km / u.s
    assert list(tab["rv"]) == pytest.approx([-40.0, 40.0, 0.0], abs=1e-9)  # stored inputs
    assert list(tab["used"]) == [True, True, False]
    assert tab.meta["variable"] is True
    assert (out / "HD_100001_rv.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_history_of_a_single_star(archive, capsys):
    assert main(["history", SINGLES[0].replace(" ", ""), "--archive", str(archive)]) == 0
    assert "no significant variability" in capsys.readouterr().out


def test_unknown_star_is_a_one_line_error(archive, capsys):
    assert main(["history", "HD 1", "--archive", str(archive)]) == 2
    err = capsys.readouterr().err.strip()
    assert err == f"starlines history: error: {archive}: no star named 'HD 1' in the archive"


def test_missing_archive_is_not_created(tmp_path, capsys):
    path = tmp_path / "none.db"
    assert main(["history", BINARY, "--archive", str(path)]) == 2
    assert "no archive" in capsys.readouterr().err
    assert not path.exists()


def test_foreign_file_is_refused_and_untouched(tmp_path, capsys):
    path = tmp_path / "notes.db"
    path.write_text("observing notes, not a database\n")
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    assert main(["history", BINARY, "--archive", str(path)]) == 2
    assert "not an SQLite database" in capsys.readouterr().err
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


def test_plot_draws_on_given_axes(archive):
    from matplotlib.figure import Figure

    with Archive(archive) as arch:
        tab, res = arch.epochs(BINARY), arch.variability(BINARY)
    ax = Figure().add_subplot()
    assert plot_velocity_history(tab, result=res, ax=ax) is ax
    assert ax.get_title() == "HD 100001: velocity variable"
    labels = ax.get_legend_handles_labels()[1]
    assert "barycentric" in labels and "not comparable (frame or error)" in labels
    new = plot_velocity_history(tab)
    assert new is not ax and isinstance(new.figure, Figure)


def test_core_modules_do_not_import_pyplot(archive, tmp_path):
    code = ("import sys; from starlines.archive import Archive; "
            "from starlines.plots_history import save_velocity_history as s; "
            f"a = Archive({str(archive)!r}); t = a.epochs('HD 100001'); "
            f"s(t, {str(tmp_path / 'x.png')!r}, result=a.variability(1)); "
            "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot imported'")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert (tmp_path / "x.png").stat().st_size > 1000
