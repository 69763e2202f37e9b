"""Execution engines: run one function over many spectrum files, serially or in parallel.

:func:`map_files` is the only entry point. It takes a top-level, picklable function of one
path and yields ``(path, result)`` pairs in completion order from one of three engines:

- **serial** (``workers=1``): in this process, one file after the other;
- **local process pool** (default, ``workers`` = all usable cores): a
  :class:`~concurrent.futures.ProcessPoolExecutor` with the ``spawn`` start method, whose
  initializer runs :func:`worker_setup` in every worker;
- **Dask distributed** (``scheduler=`` address or ``scheduler_file=``): tasks carry the
  *path*, never the data; a :class:`~distributed.diagnostics.plugin.WorkerPlugin` runs
  :func:`worker_setup` on every worker, present and future.

All engines stream: at most ``max_in_flight`` tasks (default 4 per worker) are submitted
ahead of the consumer and results are handed over as soon as they arrive, so memory stays
flat for any number of files (the input may be a lazy iterator).

No input is ever dropped. An exception raised by ``func`` becomes an :class:`EngineFailure`
result for that path (the run goes on); so does a worker process that dies. A pipeline
function normally catches :class:`~starlines.errors.StarlinesError` itself and returns its
own failure row; :class:`EngineFailure` is the safety net for everything else.
"""

from __future__ import annotations

import itertools
import os
import sys
import traceback
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass

__all__ = ["map_files", "worker_setup", "EngineFailure", "default_workers", "THREAD_ENV_VARS"]

#: Environment variables that cap the threads of the numerical libraries (BLAS, OpenMP).
THREAD_ENV_VARS = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)


@dataclass(frozen=True)
class EngineFailure:
    """The result that stands in for a task that raised or whose worker died.

    Attributes
    ----------
    path : str
        The input file of the task.
    message : str
        One line: ``"<ExceptionType>: <message>"`` or ``"worker process died: ..."``.
    error_type : str
        Name of the exception class (``"WorkerDied"`` when the process was lost).
    detail : str
        The formatted traceback from the worker, for logs (empty when unavailable).
    """

    path: str
    message: str
    error_type: str = "Exception"
    detail: str = ""


def default_workers() -> int:
    """Number of cores this process may use (CPU affinity aware), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def _pin_thread_env() -> dict[str, str | None]:
    """Set every variable of :data:`THREAD_ENV_VARS` to ``"1"``; return the old values."""
    old = {name: os.environ.get(name) for name in THREAD_ENV_VARS}
    for name in THREAD_ENV_VARS:
        os.environ[name] = "1"
    return old


def _restore_env(old: dict[str, str | None]) -> None:
    for name, value in old.items():
        if value is None:
            os.environ.pop(name, None)
        else:
            os.environ[name] = value


def worker_setup() -> None:
    """Prepare a worker process: one numerical thread, astropy offline.

    Sets the thread environment variables to 1 (effective for libraries not yet loaded),
    limits already loaded BLAS/OpenMP pools to one thread with :mod:`threadpoolctl`, and
    calls :func:`starlines.offline.configure_astropy_offline`. Idempotent.
    """
    _pin_thread_env()
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # optional: the environment variables still apply
        pass
    else:
        threadpool_limits(limits=1)
    from starlines.offline import configure_astropy_offline

    configure_astropy_offline()


def _call_safely(func: Callable[[str], object], path: str) -> object:
    """Run ``func(path)``; turn any exception into an :class:`EngineFailure`."""
    try:
        return func(path)
    except Exception as exc:  # noqa: BLE001 - the safety net: no input may be dropped
        first = str(exc).splitlines()[0] if str(exc) else ""
        return EngineFailure(
            path=path,
            message=f"{type(exc).__name__}: {first}".rstrip(": "),
            error_type=type(exc).__name__,
            detail=traceback.format_exc(),
        )


def _progress(total: int | None, desc: str, enabled: bool):
    """A tqdm bar on an interactive stderr, else a silent stand-in with ``update``/``close``."""
    if enabled and sys.stderr.isatty():
        from tqdm import tqdm

        return tqdm(total=total, desc=desc, unit="file", file=sys.stderr, smoothing=0.1)

    class _Quiet:
        def update(self, n: int = 1) -> None:
            pass

        def close(self) -> None:
            pass

    return _Quiet()


def map_files(
    func: Callable[[str], object],
    paths: Iterable[str | os.PathLike],
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    scheduler_file: str | os.PathLike | None = None,
    progress: bool = True,
    desc: str = "spectra",
    max_in_flight: int | None = None,
) -> Iterator[tuple[str, object]]:
    """Apply ``func`` to every path and yield ``(path, result)`` in completion order.

    Parameters
    ----------
    func : callable
        A top-level (picklable) function of one path (str) returning a picklable result.
    paths : iterable of str or path-like
        Input files; may be a lazy iterator (it is consumed only as tasks are submitted).
    workers : int, optional
        1 runs serially in this process; more uses a local process pool of that size;
        None means all usable cores. Ignored when a Dask scheduler is given.
    scheduler : str, optional
        Address of a running Dask scheduler (``"tcp://host:8786"``); selects Dask.
    scheduler_file : str or path-like, optional
        A Dask scheduler file; selects Dask.
    progress : bool
        Show a tqdm progress bar when stderr is a terminal (never otherwise).
    desc : str
        Label of the progress bar.
    max_in_flight : int, optional
        Tasks submitted but not yet handed over; default 4 per worker (per Dask thread).

    Yields
    ------
    path : str
        The input path, as a string.
    result : object
        ``func(path)``, or an :class:`EngineFailure` when it raised or its worker died.

    Raises
    ------
    starlines.errors.ConfigError
        For an invalid ``workers`` / ``max_in_flight`` or both Dask options at once.
    """
    from starlines.errors import ConfigError

    if scheduler is not None and scheduler_file is not None:
        raise ConfigError("give either scheduler or scheduler_file, not both")
    if workers is not None and (not isinstance(workers, int) or workers < 1):
        raise ConfigError(f"workers must be a positive integer, got {workers!r}")
    if max_in_flight is not None and (not isinstance(max_in_flight, int) or max_in_flight < 1):
        raise ConfigError(f"max_in_flight must be a positive integer, got {max_in_flight!r}")
    total = len(paths) if hasattr(paths, "__len__") else None
    path_iter = (os.fspath(p) for p in paths)
    bar = _progress(total, desc, progress)
    try:
        if scheduler is not None or scheduler_file is not None:
            from starlines.dask_engine import map_dask

            gen = map_dask(func, path_iter, scheduler, scheduler_file, max_in_flight)
        elif (workers or default_workers()) == 1:
            gen = _map_serial(func, path_iter)
        else:
            n = workers or default_workers()
            gen = _map_pool(func, path_iter, n, max_in_flight or 4 * n)
        for item in gen:
            bar.update(1)
            yield item
    finally:
        bar.close()


def _map_serial(func: Callable[[str], object], paths: Iterator[str]) -> Iterator[tuple]:
    """Serial engine: in this process, with numerical libraries limited to one thread."""
    from starlines.offline import configure_astropy_offline

    configure_astropy_offline()
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        threadpool_limits = None
    for path in paths:
        if threadpool_limits is None:
            yield path, _call_safely(func, path)
            continue
        with threadpool_limits(limits=1):  # restored before handing control back
            result = _call_safely(func, path)
        yield path, result


def _pool_worker_init(parent_pid: int) -> None:
    """Initializer of a pool worker: die with the parent (Linux), then :func:`worker_setup`.

    Without this, killing the driver (SIGTERM/SIGKILL) leaves its spawned workers waiting
    on their task queue forever.
    """
    try:
        import ctypes
        import signal

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGTERM), 0, 0, 0)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # not Linux: the executor's own checks remain
        pass
    if os.getppid() != parent_pid:  # the parent died before prctl took effect
        os._exit(1)
    worker_setup()


def _new_pool(workers: int):
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    return ProcessPoolExecutor(
        max_workers=workers,
        mp_context=multiprocessing.get_context("spawn"),
        initializer=_pool_worker_init,
        initargs=(os.getpid(),),
    )


def _map_pool(
    func: Callable[[str], object], paths: Iterator[str], workers: int, max_in_flight: int
) -> Iterator[tuple]:
    """Local process-pool engine with bounded submission and crash isolation.

    When a worker process dies the pool breaks and every task in flight fails with it. The
    pool is then rebuilt and those paths are rerun one at a time, so the file that kills
    its worker is identified exactly and becomes an :class:`EngineFailure`; the others
    are unaffected.
    """
    from concurrent.futures import FIRST_COMPLETED, wait
    from concurrent.futures.process import BrokenProcessPool

    old_env = _pin_thread_env()  # spawned children inherit it before importing numpy
    pool = _new_pool(workers)
    pending: dict = {}  # future -> path
    suspects: list[str] = []
    try:
        while True:
            if suspects:  # isolation mode: one suspect at a time
                path = suspects.pop(0)
                try:
                    yield path, pool.submit(_call_safely, func, path).result()
                except BrokenProcessPool as exc:
                    yield path, _died(path, exc)
                    pool.shutdown(wait=True, cancel_futures=True)
                    pool = _new_pool(workers)
                continue
            for path in itertools.islice(paths, max_in_flight - len(pending)):
                pending[pool.submit(_call_safely, func, path)] = path
            if not pending:
                return
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            broken = False
            for fut in done:
                path = pending.pop(fut)
                try:
                    result = fut.result()
                except BrokenProcessPool:
                    suspects.append(path)
                    broken = True
                    continue
                yield path, result
            if broken:
                suspects.extend(pending.values())
                pending.clear()
                pool.shutdown(wait=True, cancel_futures=True)
                pool = _new_pool(workers)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
        _restore_env(old_env)


def _died(path: str, exc: BaseException) -> EngineFailure:
    return EngineFailure(
        path=path,
        message=f"worker process died while processing this file ({type(exc).__name__})",
        error_type="WorkerDied",
    )
