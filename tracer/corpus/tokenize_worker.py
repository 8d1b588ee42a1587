"""What a tokenizing worker process runs (:mod:`tracer.corpus.tokenize_pool`).

Kept apart, with nothing but the tokenizer and numpy to import, because every spawned
worker imports this module before its first chunk: the store and workspace modules would
bring pandas and take most of a second per worker.
"""

from __future__ import annotations

import os
import sys

import numpy as np

from tracer.corpus.tokenize import Tokenizer, TokenizerSettings

_worker_tokenizer: Tokenizer | None = None


class WhileParentLives:
    """A worker's stderr that writes only while the process that started it is alive.

    When the ingesting process is killed, a worker that finishes its chunk finds the result
    pipe broken and the process machinery prints that as a traceback on the terminal the
    ingest ran in, after the ingest has ended. Nothing a worker could say then concerns the
    user: the ingest it served is gone, and the corpus is as it was. Errors of a task while
    the parent lives still reach the parent as the task's exception, and stderr as usual.
    """

    def __init__(self, stream, parent: int):
        self.stream, self.parent = stream, parent

    def write(self, text: str) -> int:
        if os.getppid() != self.parent:
            return len(text)
        return self.stream.write(text)

    def flush(self) -> None:
        if os.getppid() == self.parent:
            self.stream.flush()

    def __getattr__(self, name):
        return getattr(self.stream, name)


def start_worker(settings: TokenizerSettings) -> None:
    global _worker_tokenizer
    _worker_tokenizer = Tokenizer(settings)
    sys.stderr = WhileParentLives(sys.stderr, os.getppid())


def tokenize_texts(texts: list[str | None]):
    """A chunk's distinct words (first appearance first), every token as an index into them
    (uint32, concatenated), and each text's token count (-1 for None): compact to send back."""
    index: dict[str, int] = {}
    local, lengths = [], []
    for t in texts:
        if t is None:
            lengths.append(-1)
            continue
        toks = _worker_tokenizer.tokenize(t)
        local.extend(index.setdefault(w, len(index)) for w in toks)
        lengths.append(len(toks))
    return list(index), np.array(local, dtype=np.uint32), np.array(lengths, dtype=np.int64)
