"""Deterministic tokenization that needs no downloaded data.

The tokenizer is NLTK's :class:`~nltk.tokenize.RegexpTokenizer` with a fixed
pattern: runs of word characters, with inner hyphens and apostrophes kept
("well-known", "o'brien"). Text is Unicode-normalised first and, by default,
lower-cased. The settings are written to the workspace manifest, so every count
can be traced to the exact rule that produced its tokens.
"""

from __future__ import annotations

import dataclasses
import unicodedata

from nltk.tokenize import RegexpTokenizer

from tracer.errors import SettingError

DEFAULT_PATTERN = r"\w+(?:[-']\w+)*"
NORMALIZATION_FORMS = ("NFC", "NFKC", "NFD", "NFKD", "none")


@dataclasses.dataclass(frozen=True)
class TokenizerSettings:
    """How text becomes tokens.

    Parameters
    ----------
    lowercase : bool
        Lower-case the text (after normalisation).
    normalization : str
        Unicode normal form applied before tokenizing: one of NFC, NFKC, NFD,
        NFKD or ``"none"``.
    pattern : str
        Regular expression for one token (NLTK ``RegexpTokenizer`` semantics,
        ``gaps=False``).
    """

    lowercase: bool = True
    normalization: str = "NFKC"
    pattern: str = DEFAULT_PATTERN

    def __post_init__(self):
        if self.normalization not in NORMALIZATION_FORMS:
            raise SettingError(
                f"normalization must be one of {', '.join(NORMALIZATION_FORMS)}; got {self.normalization!r}"
            )

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "TokenizerSettings":
        return cls(**d)


class Tokenizer:
    """Turn a text into a list of token strings under fixed settings."""

    def __init__(self, settings: TokenizerSettings | None = None):
        self.settings = settings or TokenizerSettings()
        self._regexp = RegexpTokenizer(self.settings.pattern)

    def normalize(self, text: str) -> str:
        s = self.settings
        if s.normalization != "none":
            text = unicodedata.normalize(s.normalization, text)
        if s.lowercase:
            text = text.lower()
        return text

    def tokenize(self, text: str) -> list[str]:
        return self._regexp.tokenize(self.normalize(text))

    def spans(self, text: str) -> list[tuple[int, int]] | None:
        """Character offsets of each token in the original ``text``.

        Normalisation can change lengths (NFKC turns one ligature into two letters),
        so the text is normalised cluster by cluster (a character and the combining
        marks after it) and every output character is mapped back to its cluster.
        Returns None if that gives other tokens than :meth:`tokenize` (offsets unknown).
        """
        pieces, owner = [], []
        start = 0
        for i in range(1, len(text) + 1):
            if i == len(text) or not unicodedata.combining(text[i]):
                piece = self.normalize(text[start:i])
                pieces.append(piece)
                owner.extend([(start, i)] * len(piece))
                start = i
        normalized = "".join(pieces)
        spans = list(self._regexp.span_tokenize(normalized))
        if [normalized[a:b] for a, b in spans] != self.tokenize(text):
            return None
        return [(owner[a][0], owner[b - 1][1]) for a, b in spans]
