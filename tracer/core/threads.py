"""Threads for the numba kernels, and large arrays in ordinary pages."""

from __future__ import annotations

import mmap
import multiprocessing
import os
import threading
from concurrent.futures import ThreadPoolExecutor

import numpy as np


def default_workers() -> int:
    """Cores this process may use (at most 8)."""
    n = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return max(1, min(n, 8))


def process_threads() -> int:
    """Threads one compute step of this process may use: 1 in a process started by
    :mod:`multiprocessing` (a bootstrap replicate worker of :mod:`tracer.core.replicate_pool`
    runs beside one such worker per core, so more would only oversubscribe the cores),
    else :func:`default_workers`."""
    if multiprocessing.parent_process() is not None:
        return 1
    return default_workers()


class ThreadPool:
    """Runs kernel calls on ``workers`` threads (the kernels release the GIL).

    The threads are started once per process and kept: a command may count
    hundreds of small slices or replicates, and starting threads for each took
    longer than counting a small slice. Tasks must not submit tasks of their own.
    """

    _shared: dict[int, ThreadPoolExecutor] = {}
    _lock = threading.Lock()

    def __init__(self, workers: int):
        self.workers = workers
        self._exec = None
        if workers > 1:
            with self._lock:
                if workers not in self._shared:
                    self._shared[workers] = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="tracer")
                self._exec = self._shared[workers]

    def map(self, fn, items):
        items = list(items)
        if self._exec is None or len(items) == 1:
            return [fn(*i) for i in items]
        return list(self._exec.map(lambda args: fn(*args), items))


_PLAIN_PAGES_FROM = 1 << 22


def big_empty(n: int, dtype) -> np.ndarray:
    """An uninitialised 1-d array for the counter's large arrays, in ordinary (not huge) pages.

    numpy asks the kernel for transparent huge pages on large arrays. On virtual
    machines the first touch of such memory can cost several times more than of
    ordinary pages (the kernel compacts memory to find each 2 MB page), and first
    touches are most of the counting time; the output arrays are written in order,
    so huge pages buy them nothing. An anonymous mapping without that request
    avoids it; small arrays come from numpy as usual. The memory is freed when the
    array (and every view of it) is gone. ``tests/benchmarks/bench_counting.py``
    measures the effect on the machine at hand.
    """
    dtype = np.dtype(dtype)
    nbytes = int(n) * dtype.itemsize
    if nbytes < _PLAIN_PAGES_FROM:
        return np.empty(n, dtype)
    return np.frombuffer(mmap.mmap(-1, nbytes), dtype=dtype, count=int(n))
