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

    def append(self, tokens: list[str]) -> int:
        """Give each token its id (new words get the next ids) and buffer them; return the count."""
        ids = np.empty(len(tokens), dtype=np.uint32)
        for k, s in enumerate(tokens):
            i = self.word_ids.get(s)
            if i is None:
                if "\t" in s or "\n" in s:
                    raise InputError(f"the tokenizer pattern produced a token with a tab or "
                                     f"newline ({s!r}); use a pattern that cannot")
                i = self.word_ids[s] = len(self.words)
                self.words.append(s)
            ids[k] = i
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
