"""The Dask distributed engine behind :func:`starlines.engines.map_files`.

Kept apart so that ``distributed`` is imported only when a scheduler is actually used.
Tasks carry the file *path* (a short string), never arrays: every worker reads its own
files, so the scheduler and the network carry only paths and result rows.

Worker setup: a :class:`~distributed.diagnostics.plugin.WorkerPlugin` runs
:func:`starlines.engines.worker_setup` on every worker, including workers that join later.
Dask's nanny already sets ``OMP_NUM_THREADS``/``MKL_NUM_THREADS``/``OPENBLAS_NUM_THREADS``
to 1 before it spawns a worker (``distributed.nanny.pre-spawn-environ``); the plugin adds
the :mod:`threadpoolctl` limit and the offline astropy configuration.
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Callable, Iterator

from distributed import Client, as_completed
from distributed.diagnostics.plugin import WorkerPlugin

from starlines.engines import EngineFailure, _call_safely, worker_setup

__all__ = ["map_dask", "WorkerSetupPlugin"]


class WorkerSetupPlugin(WorkerPlugin):
    """Run :func:`starlines.engines.worker_setup` once in every Dask worker process."""

    name = "starlines-worker-setup"
    idempotent = True

    def setup(self, worker) -> None:  # noqa: D401 - Dask hook
        worker_setup()


def _connect(scheduler: str | None, scheduler_file: str | os.PathLike | None) -> Client:
    from starlines.errors import ConfigError

    if scheduler_file is not None and not os.path.isfile(scheduler_file):
        # distributed would wait forever for the file to appear
        raise ConfigError(
            f"cannot connect to the Dask scheduler: no scheduler file {scheduler_file}"
        )
    try:
        if scheduler_file is not None:
            return Client(scheduler_file=os.fspath(scheduler_file), timeout="30s")
        return Client(scheduler, timeout="30s")
    except (OSError, TimeoutError, ValueError) as exc:
        where = scheduler_file if scheduler_file is not None else scheduler
        raise ConfigError(f"cannot connect to the Dask scheduler {where}: {exc}") from exc


def map_dask(
    func: Callable[[str], object],
    paths: Iterator[str],
    scheduler: str | None,
    scheduler_file: str | os.PathLike | None,
    max_in_flight: int | None,
) -> Iterator[tuple[str, object]]:
    """Yield ``(path, result)`` from a Dask cluster in completion order.

    At most ``max_in_flight`` tasks (default 4 per worker thread) are on the cluster at a
    time; each result is released on the cluster as soon as it is handed over. A task that
    raises inside ``func`` comes back as :class:`~starlines.engines.EngineFailure`; so
    does one whose worker died repeatedly (Dask's ``KilledWorker``) or that failed to run.
    """
    client = _connect(scheduler, scheduler_file)
    try:
        client.register_plugin(WorkerSetupPlugin(), name=WorkerSetupPlugin.name)
        nthreads = sum(client.nthreads().values()) or 1
        limit = max_in_flight or 4 * nthreads
        owner: dict[str, str] = {}  # future key -> path
        queue = as_completed()

        def submit(batch: int) -> None:
            for path in itertools.islice(paths, batch):
                fut = client.submit(_call_safely, func, path, pure=False)
                owner[fut.key] = path
                queue.add(fut)

        submit(limit)
        for fut in queue:
            path = owner.pop(fut.key)
            try:
                result = fut.result()
            except Exception as exc:  # noqa: BLE001 - KilledWorker, deserialisation errors...
                result = _failure(path, exc)
            fut.release()
            yield path, result
            submit(1)
    finally:
        client.close()


def _failure(path: str, exc: BaseException) -> EngineFailure:
    """Describe a task that Dask could not run to the end."""
    if type(exc).__name__ == "KilledWorker":
        return EngineFailure(
            path=path,
            message="worker process died on every worker that ran this file (KilledWorker)",
            error_type="WorkerDied",
        )
    first = str(exc).splitlines()[0] if str(exc) else ""
    return EngineFailure(
        path=path, message=f"{type(exc).__name__}: {first}".rstrip(": "),
        error_type=type(exc).__name__,
    )
