"""The tokenize step of ingest: text to tokens to vocabulary ids, appended to the token file.

Ids are given in order of first appearance and never change, so appending
documents keeps every earlier id valid. Tokens are buffered and written in
blocks of about a million, so a corpus of any size streams through.
"""

from __future__ import annotations

from typing import BinaryIO

import numpy as np

from tracer.errors import InputError
from tracer.corpus.tokenize import Tokenizer, TokenizerSettings

_FLUSH_TOKENS = 1 << 20


class ChunkWords:
    """The distinct words of a chunk of records tokenized elsewhere, in order of first appearance,
    and (filled as the chunk is stored) each one's id in the store's vocabulary (-1: none yet)."""

    __slots__ = ("words", "ids")

    def __init__(self, words: list[str]):
        self.words = words
        self.ids = np.full(len(words), -1, dtype=np.int64)


class LocalTokens:
    """One record's tokens as indices into its chunk's :class:`ChunkWords`, shape (n_tokens,)."""

    __slots__ = ("local", "chunk")

    def __init__(self, local: np.ndarray, chunk: ChunkWords):
        self.local, self.chunk = local, chunk

    def __len__(self) -> int:
        return len(self.local)


class TokenEncoder:
    """Tokenize documents and append their ids (little-endian uint32) to an open token file.

    Parameters
    ----------
    settings : TokenizerSettings
    words : list of str
        The vocabulary so far (of the store being appended to), extended in place.
    out : binary file
        The token file, open for appending.
    """

    def __init__(self, settings: TokenizerSettings, words: list[str], out: BinaryIO):
        self.tokenizer = Tokenizer(settings)
        self.words = words
        self.word_ids = {w: i for i, w in enumerate(words)}
        self.out = out
        self._buffer: list[np.ndarray] = []
        self._buffered = 0

    def tokenize(self, text: str) -> list[str]:
        return self.tokenizer.tokenize(text)

    def _new_id(self, s: str) -> int:
        if "\t" in s or "\n" in s:
            raise InputError(f"the tokenizer pattern produced a token with a tab or "
                             f"newline ({s!r}); use a pattern that cannot")
        i = self.word_ids[s] = len(self.words)
        self.words.append(s)
        return i

    def _append_local(self, tokens: LocalTokens) -> np.ndarray:
        """Ids of a record tokenized elsewhere. The chunk's words not met before in this chunk are
        looked up (or given the next ids) in the order they first appear in this record, which is the
        order a token-by-token pass would meet them: the ids are the same."""
        chunk = tokens.chunk
        unseen = tokens.local[chunk.ids[tokens.local] < 0]
        if len(unseen):
            words, first = np.unique(unseen, return_index=True)
            order = words[np.argsort(first)].tolist()
            get, new = self.word_ids.get, self._new_id
            found = [get(chunk.words[w]) for w in order]
            chunk.ids[order] = [new(chunk.words[w]) if i is None else i for w, i in zip(order, found)]
        return chunk.ids[tokens.local].astype(np.uint32)

    def append(self, tokens: list[str] | LocalTokens) -> int:
        """Give each token its id (new words get the next ids) and buffer them; return the count."""
        if isinstance(tokens, LocalTokens):
            return self._buffer_ids(self._append_local(tokens))
        ids = np.empty(len(tokens), dtype=np.uint32)
        for k, s in enumerate(tokens):
            i = self.word_ids.get(s)
            ids[k] = self._new_id(s) if i is None else i
        return self._buffer_ids(ids)

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
