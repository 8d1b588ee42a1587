"""Bootstrap replicates computed on worker processes, in order.

The replicates of a bootstrap are independent: each is a truncated SVD (ARPACK) of its own
resampled counts. ARPACK and scipy's sparse products hold the GIL much of the time, so two
threads gave little (and :func:`tracer.core.ppmi_svd.blas_threads_for` sets a process-wide BLAS
limit that threads would undo for each other); worker processes run them side by side.
:func:`map_replicates` returns ``[fn(item) for item in items]`` in the order of ``items`` (and
:func:`submit_replicates` starts them and lets the caller work meanwhile), the
same values bit for bit whatever the number of workers: every input (weights drawn, counts made)
is made by the caller before it is handed over, and each worker runs the same single-threaded
BLAS (tests/analysis/test_replicate_pool.py compares 1 and 2 workers).

``items`` is consumed as the workers go: a generator that counts one replicate at a time counts
the next while the workers decompose the ones before. The pool is started once per process and
kept (start-up costs about a second); workers are started with ``spawn`` (no copy of this
process's threads or open files, as for the ingest's tokenizers), ignore Ctrl-C (the calling
process handles it) and exit when the process that started them is gone.

The number of workers is the environment variable ``TRACER_REPLICATE_WORKERS`` if set, else the
cores this process may use (:func:`tracer.core.threads.default_workers`); the caller lowers it
to what memory allows (:func:`workers_for`).

:class:`Tasks` is what a caller hands independent tasks to: :class:`LocalTasks` (this pool) and
the dask.distributed cluster's ``ClusterTasks`` (:mod:`tracer.provenance.cluster`) both give the
results of ``submit`` in the order of the items, so a caller need not know where they ran.
"""

from __future__ import annotations

import dataclasses
import multiprocessing
import os
import signal
import threading
import time
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from typing import Callable, Iterable, Protocol

from tracer.core import memory
from tracer.core.threads import default_workers
from tracer.errors import SettingError

WORKERS_ENV = "TRACER_REPLICATE_WORKERS"

_pools: dict[int, ProcessPoolExecutor] = {}
_lock = threading.Lock()


def configured_workers() -> int:
    """Workers asked for: ``TRACER_REPLICATE_WORKERS``, else the cores this process may use."""
    value = os.environ.get(WORKERS_ENV)
    if not value:
        return default_workers()
    try:
        n = int(value)
    except ValueError:
        raise SettingError(f"{WORKERS_ENV} must be a whole number >= 1; got {value!r}") from None
    if n < 1:
        raise SettingError(f"{WORKERS_ENV} must be a whole number >= 1; got {value!r}")
    return n


def workers_for(per_task_bytes: int, n_tasks: int) -> int:
    """How many workers to use for ``n_tasks`` tasks of ``per_task_bytes`` at their peak each: the
    configured number, no more than the tasks, and no more than fit in the memory available
    beside each other (at least 1: one task alone is checked by the task itself)."""
    fit = max(1, memory.available_bytes() // max(1, per_task_bytes))
    return int(max(1, min(configured_workers(), n_tasks, fit)))


def _watch_parent(parent: int) -> None:
    while os.getppid() == parent:
        time.sleep(1.0)
    os._exit(0)


def _start_worker(parent: int) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    threading.Thread(target=_watch_parent, args=(parent,), daemon=True).start()


def _pool(workers: int) -> ProcessPoolExecutor:
    with _lock:
        if workers not in _pools:
            _pools[workers] = ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                                                  initializer=_start_worker, initargs=(os.getpid(),))
        return _pools[workers]


def start_workers() -> None:
    """Start the configured number of workers now, so that the first replicates need not wait the
    second or so a spawned worker takes to start (a caller that knows replicates will follow)."""
    workers = configured_workers()
    if workers > 1:
        pool = _pool(workers)
        for _ in range(workers):  # the pool starts a process for each task it cannot give an idle one
            pool.submit(int)


def submit_replicates(fn: Callable, items: Iterable, workers: int = 1) -> Callable[[], list]:
    """Start ``[fn(item) for item in items]`` on ``workers`` processes (when more than one) and return
    a function that waits for the results and returns them in order, so the caller can do other work
    meanwhile. With one worker nothing starts until that function is called.

    ``fn`` must be a module-level function (or a ``functools.partial`` of one) and the items and
    results picklable. An exception raised by ``fn`` is raised by the returned function.
    """
    if workers <= 1:
        return lambda: [fn(item) for item in items]
    pool = _pool(workers)
    try:
        futures = [pool.submit(fn, item) for item in items]
    except BrokenProcessPool:
        _forget(workers)
        raise

    def results() -> list:
        try:
            return [f.result() for f in futures]
        except BrokenProcessPool:
            _forget(workers)
            raise
    return results


def map_replicates(fn: Callable, items: Iterable, workers: int = 1) -> list:
    """``[fn(item) for item in items]``, on ``workers`` processes when more than one (see
    :func:`submit_replicates`)."""
    return submit_replicates(fn, items, workers)()


class Tasks(Protocol):
    """Somewhere to run independent tasks: ``submit(fn, items)`` starts ``fn(item)`` for every item and
    returns the function that waits for the results and gives them in the order of ``items``."""

    def submit(self, fn: Callable, items: Iterable) -> Callable[[], list]: ...


@dataclasses.dataclass(frozen=True)
class LocalTasks:
    """The replicate pool's :class:`Tasks`: ``workers`` spawned processes, this process when 1."""

    workers: int = 1

    def submit(self, fn: Callable, items: Iterable) -> Callable[[], list]:
        return submit_replicates(fn, items, self.workers)


def _forget(workers: int) -> None:
    """Drop a pool whose worker died, so the next call starts a new one."""
    with _lock:
        _pools.pop(workers, None)
