"""The user cache of derived data: results identical with and without it, never a failure.

The reference in every comparison is the computation without any cache (the definition of
the right answer): the cached model, rules and grid must equal it exactly.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import starlines
from starlines import cache, grid, knn, rulecal


def _clear_memory_caches():
    knn.default_model.cache_clear()
    rulecal.calibrated_rules.cache_clear()
    grid._GRID_MEMO.clear()


@pytest.fixture
def cache_in(tmp_path, monkeypatch):
    """A fresh cache folder for the test; in-process memos cleared before and after."""
    folder = tmp_path / "cache"
    monkeypatch.setenv(cache.CACHE_ENV, str(folder))
    _clear_memory_caches()
    yield folder
    _clear_memory_caches()


def _entries(folder: Path, name: str) -> list[Path]:
    return sorted(folder.glob(f"{name}-*.npz"))


def test_cache_folder_choice(tmp_path, monkeypatch):
    monkeypatch.setenv(cache.CACHE_ENV, "off")
    assert cache.cache_dir() is None
    monkeypatch.delenv(cache.CACHE_ENV)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert cache.cache_dir() == tmp_path / "xdg" / "starlines"
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder")
    monkeypatch.setenv(cache.CACHE_ENV, str(blocker / "sub"))
    assert cache.cache_dir() is None  # cannot be created: no cache, no error
    assert cache.save_arrays("x", "k", {"a": np.zeros(2)}) is None
    assert cache.load_arrays("x", "k") is None


def test_knn_model_identical_with_and_without_cache(cache_in, monkeypatch):
    first = knn.default_model()  # trains, writes the entry
    (entry,) = _entries(cache_in, knn.MODEL_CACHE_NAME)
    knn.default_model.cache_clear()

    def no_training(grid=None):
        raise AssertionError("the model should have come from the cache")

    monkeypatch.setattr(knn, "fit_default_model", no_training)
    loaded = knn.default_model()
    monkeypatch.undo()
    fresh = knn.fit_default_model()  # no cache involved
    for model in (first, loaded):
        assert model.get_params() == fresh.get_params()
        assert set(vars(model)) == set(vars(fresh))
        for name, value in vars(fresh).items():
            other = getattr(model, name)
            if isinstance(value, np.ndarray):
                assert other.dtype == value.dtype and np.array_equal(other, value), name
            else:
                assert type(other) is type(value) and other == value, name
    # the same predictions, including queries with missing and censored features
    queries = fresh.X_[::1500].copy()
    queries[1, :4] = np.nan
    limits = np.zeros_like(queries)
    limits[2, 0] = 1.0
    for a, b in zip(loaded.predict_all(queries, limits), fresh.predict_all(queries, limits)):
        assert np.array_equal(a, b, equal_nan=True)
    assert entry.is_file()


def test_calibrated_rules_identical_with_and_without_cache(cache_in, monkeypatch):
    first = rulecal.calibrated_rules()
    assert _entries(cache_in, rulecal.RULES_CACHE_NAME)
    rulecal.calibrated_rules.cache_clear()

    def no_calibration(grid, rules=None):
        raise AssertionError("the rules should have come from the cache")

    monkeypatch.setattr(rulecal, "calibrate_rules", no_calibration)
    loaded = rulecal.calibrated_rules()
    monkeypatch.undo()
    fresh = rulecal.calibrate_rules(grid.load_grid())
    assert loaded == first == fresh
    assert [r.notes for r in loaded] == [r.notes for r in fresh]  # notes: compare=False
    assert any(r.knots is not None for r in fresh)
    for a, b in zip(loaded, fresh):
        assert type(a.knots) is type(b.knots) and a.scatter == b.scatter


def test_grid_identical_with_and_without_cache(cache_in):
    first = grid.load_grid()  # parses the ECSV file, writes the entry
    assert _entries(cache_in, grid.GRID_CACHE_NAME)
    grid._GRID_MEMO.clear()
    loaded = grid.load_grid()  # from the .npz entry
    fresh = grid._read_ecsv(grid.shipped_grid_path())
    for tab in (first, loaded):
        assert tab.colnames == fresh.colnames
        assert dict(tab.meta) == dict(fresh.meta)
        for name in fresh.colnames:
            assert tab[name].dtype == fresh[name].dtype, name
            assert tab[name].unit == fresh[name].unit, name
            assert np.array_equal(np.asarray(tab[name]), np.asarray(fresh[name])), name
    loaded["teff"][0] = -1.0  # a caller's change must not reach the next caller
    loaded.meta["model_version"] = "changed"
    again = grid.load_grid()
    assert again["teff"][0] == fresh["teff"][0]
    assert again.meta["model_version"] == fresh.meta["model_version"]


def test_corrupt_entry_is_a_miss(cache_in):
    reference = rulecal.calibrate_rules(grid.load_grid())
    rulecal.calibrated_rules()
    (entry,) = _entries(cache_in, rulecal.RULES_CACHE_NAME)
    entry.write_bytes(b"truncated")
    rulecal.calibrated_rules.cache_clear()
    assert rulecal.calibrated_rules() == reference
    assert cache.load_arrays(rulecal.RULES_CACHE_NAME, entry.stem.split("-", 1)[1]) is not None


def test_unwritable_cache_still_works(tmp_path, monkeypatch):
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder")
    monkeypatch.setenv(cache.CACHE_ENV, str(blocker / "cache"))
    _clear_memory_caches()
    try:
        rules = rulecal.calibrated_rules()
        tab = grid.load_grid()
    finally:
        _clear_memory_caches()
    assert rules == rulecal.calibrate_rules(tab)


def test_grid_loads_from_an_uninstalled_source_checkout(tmp_path):
    """With only PYTHONPATH pointing at a copy of the source tree, the grid is found.

    ``starlines.grids`` exists only in an installed package (pyproject's package-dir maps
    grids/ to it); the subprocess removes the editable-install finder so that the copy is a
    plain, uninstalled checkout.
    """
    src = Path(starlines.__file__).resolve().parent
    grids = Path(grid.shipped_grid_path()).parent
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc")
    # an installed (non-editable) package holds grids/ as starlines/grids: leave it out
    shutil.copytree(src, tmp_path / "starlines",
                    ignore=shutil.ignore_patterns("__pycache__", "*.pyc", "grids"))
    shutil.copytree(grids, tmp_path / "grids", ignore=ignore)
    script = textwrap.dedent("""
        import sys
        sys.meta_path[:] = [f for f in sys.meta_path
                            if not getattr(f, "__module__", "").startswith("__editable__")]
        import importlib.util
        import starlines
        from starlines.grid import load_grid, shipped_grid_path
        assert importlib.util.find_spec("starlines.grids") is None, "grids installed"
        print(starlines.__file__)
        print(shipped_grid_path())
        print(len(load_grid()))
    """)
    env = dict(os.environ, PYTHONPATH=str(tmp_path), **{cache.CACHE_ENV: "off"})
    out = subprocess.run([sys.executable, "-c", script], cwd=tmp_path, env=env,
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    module_file, grid_path, rows = out.stdout.split()
    assert Path(module_file).resolve().is_relative_to(tmp_path.resolve())
    assert Path(grid_path) == (tmp_path / "grids" / grid.GRID_FILENAME).resolve()
    assert int(rows) == len(grid.grid_points())


def test_old_entries_are_pruned(cache_in):
    for k in range(cache.KEEP_ENTRIES + 3):
        path = cache.save_arrays("demo", f"key{k:02d}", {"a": np.arange(3)})
        os.utime(path, ns=(k * 10**9, k * 10**9))  # distinct ages, oldest first
    left = sorted(p.stem for p in _entries(cache_in, "demo"))
    newest = [f"demo-key{k:02d}" for k in range(3, cache.KEEP_ENTRIES + 3)]
    assert left == newest
