"""Preparing the records of an ingest on worker processes, in order.

Parsing, validating and tokenizing records (:mod:`tracer.corpus.prepare`) is pure Python on
one thread and most of an ingest's time. The ingesting process reads the input (decompressing,
finding the lines) and cuts its items into chunks of about ``CHUNK_CHARS`` characters; each
chunk is prepared by a worker and the results come back in the order the chunks were read (a
window of at most ``2 * jobs`` chunks in flight bounds the memory). What is left to the
ingesting process is what depends on the corpus stored so far: whether an id is taken, the
vocabulary ids, the documents table (:meth:`tracer.corpus.store.StoreWriter.add_rows`), so the
stored corpus is that of one process.

Workers are started with ``spawn``: they hold none of the ingesting process's open files (the
workspace lock, the store's SQLite connection and token file) and no copy of its threads, and
they exit when the ingesting process is gone (their task pipe closes), so an ingest killed with
signal 9 leaves the lock free (``tests/corpus/test_prepare_pool.py``). An input that fits in one
chunk never starts the workers, so small ingests pay nothing for them; with one job the chunks
are prepared in the ingesting process by the same code.
"""

from __future__ import annotations

import collections
import contextlib
import itertools
import multiprocessing
import os
import sys
from typing import Iterable, Iterator

from tracer.corpus.prepare import PrepareSettings, Prepared, Preparer, prepare_chunk
from tracer.corpus.readers import RawRecord
from tracer.corpus.store import checkpoint

# characters of input per chunk: about half a second of a worker's work, so its start-up and the
# transfer of a chunk stay small beside it
CHUNK_CHARS = 1_000_000
# what an item counts for beside its text, so a run of tiny or rejected records still makes chunks
_ITEM_CHARS = 64


def _size(item) -> int:
    if isinstance(item, tuple):  # a JSONL line
        return len(item[1]) + _ITEM_CHARS
    if isinstance(item, RawRecord):
        return sum(len(v) for v in item.fields.values() if isinstance(v, str)) + _ITEM_CHARS
    return _ITEM_CHARS


def _chunks(items: Iterable) -> Iterator[list]:
    """Runs of consecutive items of about ``CHUNK_CHARS`` characters."""
    chunk, chars = [], 0
    for item in items:
        chunk.append(item)
        chars += _size(item)
        if chars >= CHUNK_CHARS:
            yield chunk
            chunk, chars = [], 0
    if chunk:
        yield chunk


class PreparePool:
    """The worker processes of one ingest: started when an input first needs them (more than one
    chunk and ``jobs`` > 1), kept for the inputs after it, terminated when the block is left (the
    end, an error, or the consumer stopping early)."""

    def __init__(self, jobs: int):
        self.jobs = jobs
        self.pool = None

    def __enter__(self) -> "PreparePool":
        return self

    def __exit__(self, *exc) -> None:
        if self.pool is not None:
            self.pool.terminate()
            self.pool.join()
            self.pool = None

    def prepared(self, items: Iterable, settings: PrepareSettings) -> Iterator[Prepared]:
        """Each chunk of ``items`` (of :func:`tracer.corpus.readers.read_items`) prepared, in order."""
        chunks = _chunks(items)
        head = list(itertools.islice(chunks, 2))
        if self.jobs <= 1 or len(head) < 2:
            prepare = Preparer(settings)
            for chunk in itertools.chain(head, chunks):
                yield prepare(chunk)
            return
        if self.pool is None:
            with children_without_stderr():
                self.pool = multiprocessing.get_context("spawn").Pool(self.jobs)
        pending: collections.deque = collections.deque()
        for chunk in itertools.chain(head, chunks):
            pending.append(self.pool.apply_async(prepare_chunk, (settings, chunk)))
            if len(pending) >= 2 * self.jobs:
                yield pending.popleft().get()
                checkpoint("tokenizing")  # the workers busy with the next chunks
        while pending:
            yield pending.popleft().get()


@contextlib.contextmanager
def children_without_stderr() -> Iterator[None]:
    """Processes started inside get /dev/null as stderr (this process keeps its own).

    When the ingest is killed, its workers find the pipes to it closed, while starting or
    when sending a chunk back, and Python prints that as a traceback on the terminal the
    ingest ran in, after the ingest has ended; the resource tracker adds a warning about
    leaked semaphores. Nothing a worker could print concerns the user: a task's error reaches
    the ingest as the task's exception, and a killed ingest leaves the corpus as it was.
    """
    sys.stderr.flush()
    saved, devnull = os.dup(2), os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(devnull, 2)
        yield
    finally:
        os.dup2(saved, 2)
        os.close(saved)
        os.close(devnull)
