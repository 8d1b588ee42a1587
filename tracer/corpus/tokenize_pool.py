"""Tokenizing the records of an ingest on worker processes, in order.

The tokenizer (:mod:`tracer.corpus.tokenize`) is pure Python on one thread, so on a large
input it is most of the ingest's time. Records are read and validated in the ingesting
process as before; the texts of valid ones are cut into chunks of about ``CHUNK_CHARS``
characters, each chunk is tokenized by a worker with the same :class:`Tokenizer` and its
settings, and the results come back in the order the chunks were read (a window of at most
``2 * jobs`` chunks in flight bounds the memory). A worker sends back its chunk's distinct
words and every token as an index into them; the ids of the store's vocabulary (given in order
of first appearance) are assigned in the ingesting process, record by record, only for records
that are stored (:meth:`tracer.corpus.encode.TokenEncoder.append`), so the stored tokens and the
corpus hash are those of the serial path.

Workers are started with ``spawn``: they hold none of the ingesting process's open files (the
workspace lock, the store's SQLite connection and token file) and no copy of its threads, and
they exit when the ingesting process is gone (their task pipe closes), so an ingest killed with
signal 9 leaves the lock free (``tests/corpus/test_tokenize_pool.py``). An input that fits in one chunk never starts
the workers, so small ingests pay nothing for them.
"""

from __future__ import annotations

import collections
import contextlib
import itertools
import multiprocessing
import os
import sys
from typing import Iterable, Iterator

import numpy as np

from tracer.corpus.encode import ChunkWords, LocalTokens
from tracer.corpus.store import checkpoint
from tracer.corpus.tokenize import Tokenizer, TokenizerSettings
from tracer.corpus.tokenize_worker import start_worker, tokenize_texts

# characters of text per chunk: about a second of tokenizing, so a worker's start-up and
# the transfer of a chunk stay small beside its work
CHUNK_CHARS = 1_000_000

def _chunks(items: Iterable[tuple[object, str | None]]) -> Iterator[list[tuple[object, str | None]]]:
    """Runs of consecutive items holding about ``CHUNK_CHARS`` characters of text."""
    chunk, chars = [], 0
    for item in items:
        chunk.append(item)
        chars += len(item[1] or "")
        if chars >= CHUNK_CHARS:
            yield chunk
            chunk, chars = [], 0
    if chunk:
        yield chunk


def tokenized(items: Iterable[tuple[object, str | None]], settings: TokenizerSettings,
              jobs: int) -> Iterator[tuple[object, list[str] | None]]:
    """``(payload, tokens of text)`` for each ``(payload, text)`` of ``items``, in order.

    A text of None (a record rejected before tokenizing) gives None. With ``jobs`` > 1
    and more than one chunk of text, ``jobs`` worker processes tokenize the chunks.
    """
    chunks = _chunks(items)
    head = list(itertools.islice(chunks, 2))
    if jobs <= 1 or len(head) < 2:
        tok = Tokenizer(settings)
        for chunk in itertools.chain(head, chunks):
            for payload, text in chunk:
                yield payload, None if text is None else tok.tokenize(text)
        return
    ctx = multiprocessing.get_context("spawn")
    # leaving the block (the end, an error, or the consumer stopping early) terminates the workers
    with children_without_stderr():
        pool = ctx.Pool(jobs, initializer=start_worker, initargs=(settings,))
    with pool:
        pending: collections.deque = collections.deque()
        for chunk in itertools.chain(head, chunks):
            pending.append((chunk, pool.apply_async(tokenize_texts, ([t for _, t in chunk],))))
            if len(pending) >= 2 * jobs:
                yield from _results(*pending.popleft())
                checkpoint("tokenizing")  # the workers busy with the next chunks
        while pending:
            yield from _results(*pending.popleft())


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


def _results(chunk, result) -> Iterator[tuple[object, LocalTokens | None]]:
    words, local, lengths = result.get()
    shared = ChunkWords(words)
    ends = np.cumsum(np.maximum(lengths, 0))
    for (payload, _), n, end in zip(chunk, lengths, ends):
        yield payload, None if n < 0 else LocalTokens(local[end - n:end], shared)
