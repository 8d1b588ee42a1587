"""The encode step of ingest: a chunk's tokens to vocabulary ids, appended to the token file.

Ids are given in order of first appearance and never change, so appending
documents keeps every earlier id valid. Tokens are buffered and written in
blocks of about a million, so a corpus of any size streams through.
"""

from __future__ import annotations

import itertools
from typing import BinaryIO

import numpy as np

from tracer.errors import InputError

_FLUSH_TOKENS = 1 << 20


class TokenEncoder:
    """Give tokens their ids and append them (little-endian uint32) to an open token file.

    Parameters
    ----------
    words : list of str
        The vocabulary so far (of the store being appended to), extended in place.
    out : binary file
        The token file, open for appending.
    """

    def __init__(self, words: list[str], out: BinaryIO):
        self.words = words
        self.word_ids = {w: i for i, w in enumerate(words)}
        self.out = out
        self._buffer: list[np.ndarray] = []
        self._buffered = 0

    def _new_ids(self, new: list[str]) -> range:
        """Give words not in the vocabulary the next ids, in the order given."""
        bad = next((s for s in new if "\t" in s or "\n" in s), None)
        if bad is not None:  # ingest stops before (tracer.corpus.prepare finds them); a library caller may not
            raise InputError(f"the tokenizer pattern produced a token with a tab or "
                             f"newline ({bad!r}); use a pattern that cannot")
        ids = range(len(self.words), len(self.words) + len(new))
        self.words.extend(new)
        self.word_ids.update(zip(new, ids))
        return ids

    def append(self, words: list[str], local: np.ndarray, *, in_order: bool = False) -> int:
        """Append tokens given as indices into ``words`` (a chunk's distinct words); return their count.

        Parameters
        ----------
        words : list of str, length n_words
        local : numpy.ndarray of uint32, shape (n_tokens,)
            The tokens in order, as indices into ``words``.
        in_order : bool
            ``words`` are in the order they first appear in ``local`` (when ``local`` holds every
            token of the chunk), so the first appearances need not be looked for.

        Words not in the vocabulary get the next ids in the order they first appear in
        ``local``, the order a token-by-token pass would meet them, so the ids are the same.
        """
        get = self.word_ids.get
        ids = np.fromiter(map(get, words, itertools.repeat(-1)), dtype=np.int64, count=len(words))
        if in_order:
            order = np.flatnonzero(ids < 0)
        else:
            new, first = np.unique(local[ids[local] < 0], return_index=True)
            order = new[np.argsort(first)]
        if len(order):
            ids[order] = self._new_ids([words[w] for w in order.tolist()])
        return self._buffer_ids(ids[local].astype(np.uint32))

    def _buffer_ids(self, ids: np.ndarray) -> int:
        self._buffer.append(ids)
        self._buffered += len(ids)
        if self._buffered >= _FLUSH_TOKENS:
            self.flush()
        return len(ids)

    def flush(self) -> None:
        """Write the buffered ids to the token file."""
        if self._buffer:
            self.out.write(np.concatenate(self._buffer).astype("<u4").tobytes())
        self._buffer, self._buffered = [], 0
