"""Tests of the execution engines (serial, local process pool, Dask LocalCluster).

The reference for every parallel engine is the serial engine: the same deterministic
function of the same path must give bit-identical results whatever runs it (common
practice for checking a parallel map). No timing is asserted.
"""

from __future__ import annotations

import io
import os
import zlib

import numpy as np
import pytest

from starlines.engines import EngineFailure, map_files
from starlines.errors import ConfigError

PATHS = [f"/nonexistent/night/spec_{i:03d}.fits" for i in range(24)]


# --- task functions: top level so that spawned workers can import them ---------------------


def deterministic_task(path: str) -> tuple[str, float, int]:
    """A seeded computation of the path: a float that changes with every bit of the work."""
    seed = zlib.crc32(path.encode())
    rng = np.random.default_rng(seed)
    x = rng.normal(size=2000)
    return os.path.basename(path), float(np.sum(np.sin(x) * np.exp(-(x**2)))), seed


def failing_task(path: str) -> float:
    """Raise for every fifth spectrum, as an unexpected bug in a pipeline stage would."""
    if path.endswith(("_000.fits", "_005.fits", "_010.fits")):
        raise ZeroDivisionError(f"synthetic failure for {os.path.basename(path)}\nmore text")
    return deterministic_task(path)[1]


def dying_task(path: str) -> float:
    """Kill the worker process outright for one file (as a segfault or OOM kill would)."""
    if path.endswith("_007.fits"):
        os._exit(3)
    return deterministic_task(path)[1]


def setup_state(path: str) -> dict:
    """Report the worker-process state that worker_setup() is meant to establish."""
    from astropy.utils import iers
    from astropy.utils.data import conf as data_conf
    from threadpoolctl import threadpool_info

    return {
        "env": {k: os.environ.get(k) for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS")},
        "threads": sorted({pool["num_threads"] for pool in threadpool_info()}),
        "auto_download": bool(iers.conf.auto_download),
        "allow_internet": bool(data_conf.allow_internet),
        "pid": os.getpid(),
    }


# --- helpers ---------------------------------------------------------------------------------


def run(func, paths, **kw) -> dict:
    out = {}
    for path, result in map_files(func, paths, progress=False, **kw):
        assert path not in out, f"{path} yielded twice"
        out[path] = result
    return out


class CountingPaths:
    """A lazy iterator of paths that records how far it has been consumed."""

    def __init__(self, paths):
        self._it = iter(paths)
        self.pulled = 0

    def __iter__(self):
        return self

    def __next__(self):
        item = next(self._it)
        self.pulled += 1
        return item


@pytest.fixture(scope="module")
def serial_reference():
    return run(deterministic_task, PATHS, workers=1)


# --- serial and process pool -----------------------------------------------------------------


def test_serial_yields_every_path_once(serial_reference):
    assert sorted(serial_reference) == sorted(PATHS)
    assert serial_reference[PATHS[3]][0] == "spec_003.fits"


def test_pool_matches_serial_bit_for_bit(serial_reference):
    pooled = run(deterministic_task, PATHS, workers=2)
    assert pooled == serial_reference


def test_path_objects_come_back_as_strings(tmp_path):
    paths = [tmp_path / "a.fits", tmp_path / "b.fits"]
    got = run(deterministic_task, paths, workers=1)
    assert set(got) == {str(p) for p in paths}


@pytest.mark.parametrize("workers", [1, 2])
def test_exception_becomes_failure_result(workers, serial_reference):
    got = run(failing_task, PATHS, workers=workers)
    assert sorted(got) == sorted(PATHS)  # nothing dropped
    failed = {p for p, r in got.items() if isinstance(r, EngineFailure)}
    assert failed == {PATHS[0], PATHS[5], PATHS[10]}
    bad = got[PATHS[5]]
    assert bad.path == PATHS[5]
    assert bad.error_type == "ZeroDivisionError"
    assert bad.message == "ZeroDivisionError: synthetic failure for spec_005.fits"
    assert "failing_task" in bad.detail  # traceback kept for the log
    for p in set(PATHS) - failed:
        assert got[p] == serial_reference[p][1]


def test_pool_survives_a_dying_worker(serial_reference):
    got = run(dying_task, PATHS, workers=2, max_in_flight=4)
    assert sorted(got) == sorted(PATHS)
    failed = {p for p, r in got.items() if isinstance(r, EngineFailure)}
    assert failed == {PATHS[7]}  # isolated exactly: innocent files in flight were rerun
    assert got[PATHS[7]].error_type == "WorkerDied"
    for p in set(PATHS) - failed:
        assert got[p] == serial_reference[p][1]


@pytest.mark.parametrize(("workers", "limit"), [(1, 1), (2, 3)])
def test_in_flight_tasks_are_bounded(workers, limit):
    source = CountingPaths(PATHS)
    handed = 0
    max_ahead = 0
    for _path, _result in map_files(
        deterministic_task, source, workers=workers, max_in_flight=limit, progress=False
    ):
        handed += 1
        max_ahead = max(max_ahead, source.pulled - handed)
        assert source.pulled - handed <= limit
    assert handed == len(PATHS)
    assert max_ahead <= limit


def test_pool_workers_are_set_up_and_parent_env_restored(monkeypatch):
    monkeypatch.setenv("OMP_NUM_THREADS", "7")
    monkeypatch.delenv("MKL_NUM_THREADS", raising=False)
    got = run(setup_state, PATHS[:8], workers=2)
    for state in got.values():
        assert state["env"] == {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1"}
        assert state["threads"] in ([], [1])  # [] when no BLAS/OpenMP pool is loaded
        assert state["auto_download"] is False
        assert state["allow_internet"] is False
    assert os.getpid() not in {s["pid"] for s in got.values()}
    assert os.environ["OMP_NUM_THREADS"] == "7"  # the parent's own settings come back
    assert "MKL_NUM_THREADS" not in os.environ


def test_early_stop_shuts_the_pool_down():
    gen = map_files(deterministic_task, PATHS, workers=2, progress=False)
    first = next(gen)
    gen.close()  # the consumer gives up: no hang, no stray exception
    assert first[0] in PATHS


# --- options and progress --------------------------------------------------------------------


@pytest.mark.parametrize(
    ("kw", "match"),
    [
        ({"workers": 0}, "workers must be a positive integer"),
        ({"max_in_flight": 0}, "max_in_flight must be a positive integer"),
        ({"scheduler": "tcp://127.0.0.1:1", "scheduler_file": "x.json"}, "not both"),
    ],
)
def test_bad_options_raise_config_error(kw, match):
    with pytest.raises(ConfigError, match=match):
        list(map_files(deterministic_task, PATHS, **kw))


def test_progress_quiet_when_not_a_terminal(capsys):
    list(map_files(deterministic_task, PATHS[:3], workers=1, progress=True))
    assert capsys.readouterr().err == ""


def test_progress_bar_on_a_terminal(monkeypatch):
    class FakeTTY(io.StringIO):
        def isatty(self):
            return True

    fake = FakeTTY()
    monkeypatch.setattr("sys.stderr", fake)
    list(map_files(deterministic_task, PATHS[:3], workers=1, desc="night-test"))
    assert "night-test" in fake.getvalue()
    assert "3/3" in fake.getvalue()


# --- Dask distributed ------------------------------------------------------------------------


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
    ) as lc:
        yield lc


def test_dask_matches_serial_and_reports_failures(cluster, serial_reference):
    got = run(deterministic_task, PATHS, scheduler=cluster.scheduler_address)
    assert got == serial_reference
    failed = run(failing_task, PATHS, scheduler=cluster.scheduler_address, max_in_flight=3)
    assert sorted(failed) == sorted(PATHS)
    assert failed[PATHS[10]].message == "ZeroDivisionError: synthetic failure for spec_010.fits"
    assert failed[PATHS[11]] == serial_reference[PATHS[11]][1]


def test_dask_via_scheduler_file_and_worker_setup(cluster, tmp_path):
    import json

    sched = tmp_path / "scheduler.json"
    sched.write_text(json.dumps({"address": cluster.scheduler_address}))
    got = run(setup_state, PATHS[:6], scheduler_file=sched)
    assert len({s["pid"] for s in got.values()}) >= 1
    for state in got.values():
        assert state["threads"] in ([], [1])
        assert state["auto_download"] is False
        assert state["allow_internet"] is False


def test_dask_in_flight_is_bounded(cluster):
    source = CountingPaths(PATHS)
    handed = 0
    for _ in map_files(
        deterministic_task, source, scheduler=cluster.scheduler_address, max_in_flight=2,
        progress=False,
    ):
        handed += 1
        assert source.pulled - handed <= 2
    assert handed == len(PATHS)


def test_dask_unreachable_scheduler_is_a_config_error(tmp_path):
    pytest.importorskip("distributed")
    missing = tmp_path / "none.json"
    with pytest.raises(ConfigError, match="cannot connect to the Dask scheduler"):
        list(map_files(deterministic_task, PATHS, scheduler_file=missing))


# --- the real per-file analysis --------------------------------------------------------------


def _write_spectrum(path, v_kms: float, seed: int) -> None:
    """A B-star-like spectrum (analytic lines of tests/linesynth.py) as FITS, linear WCS."""
    from astropy.io import fits
    from linesynth import b_star_lines

    w = 3900.0 + 0.5 * np.arange(3201)
    norm, _, _ = b_star_lines(w, v=v_kms)
    rng = np.random.default_rng(seed)
    flux = 1000.0 * norm + rng.normal(0.0, 1000.0 / 150.0, w.size)
    h = fits.Header()
    h["OBJECT"], h["CTYPE1"], h["CUNIT1"] = f"ENGINE-{seed}", "AWAV", "Angstrom"
    h["CRPIX1"], h["CRVAL1"], h["CDELT1"] = 1.0, 3900.0, 0.5
    fits.PrimaryHDU(flux.astype(np.float32), header=h).writeto(path)


def _comparable(result) -> dict:
    """FileResult without its wall time, NaN made comparable."""

    def clean(d):
        return {k: ("nan" if isinstance(v, float) and v != v else v) for k, v in d.items()}

    return {
        "rows": [clean(r) for r in result.rows],
        "lines": [clean(r) for r in result.lines],
        "key": result.key, "checksum": result.checksum,
    }


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    folder = tmp_path_factory.mktemp("engine-night")
    paths = []
    for k, v in enumerate((-40.0, 25.0)):
        p = folder / f"star{k}.fits"
        _write_spectrum(p, v, seed=100 + k)
        paths.append(str(p))
    bad = folder / "cut.fits"  # a transfer that died inside the header
    bad.write_bytes(b"SIMPLE  =                    T" + b" " * 100)
    paths.append(str(bad))
    return paths


@pytest.mark.slow
def test_real_analysis_identical_on_every_engine(night, cluster):
    from starlines.pipeline import FileResult, analyse_file

    serial = {p: _comparable(r) for p, r in map_files(analyse_file, night, workers=1,
                                                       progress=False)}
    assert serial[night[0]]["rows"][0]["status"] == "ok"
    assert serial[night[2]]["rows"][0]["status"] == "failed"
    # injected velocities (tests/linesynth.py shifts every line by v): recovered within
    # 5 km/s at S/N 150 and 0.5 A pixels (tolerance: common practice, ~1/20 pixel)
    assert serial[night[0]]["rows"][0]["rv"] == pytest.approx(-40.0, abs=5.0)
    assert serial[night[1]]["rows"][0]["rv"] == pytest.approx(25.0, abs=5.0)
    for engine in ({"workers": 2}, {"scheduler": cluster.scheduler_address}):
        got = {}
        for p, r in map_files(analyse_file, night, progress=False, **engine):
            assert isinstance(r, FileResult)
            got[p] = _comparable(r)
        assert got == serial, f"engine {engine} differs from serial"
