"""What a tokenizing worker process runs (:mod:`tracer.corpus.tokenize_pool`).

Kept apart, with nothing but the tokenizer and numpy to import, because every spawned
worker imports this module before its first chunk: the store and workspace modules would
bring pandas and take most of a second per worker.
"""

from __future__ import annotations

import numpy as np

from tracer.corpus.tokenize import Tokenizer, TokenizerSettings

_worker_tokenizer: Tokenizer | None = None


def start_worker(settings: TokenizerSettings) -> None:
    global _worker_tokenizer
    _worker_tokenizer = Tokenizer(settings)


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
