"""Deterministic tokenization that needs no downloaded data.

Text becomes tokens in two steps, both recorded in the workspace manifest so
that every count can be traced to the exact rule that produced its tokens:

1. :func:`normalize_text`, the one normalisation of the project, applied alike
   to the corpus and to every word a user types (command options, tests files,
   tables; see :meth:`tracer.corpus.workspace.Workspace.normalize_words`):
   Unicode normal form (NFKC by default), then typographic apostrophes and
   hyphens (’ ‘ ‐ ‑) to ASCII ``'`` and ``-``, then the case rule.
2. A fixed regular expression finds the tokens: runs of word characters, with
   inner hyphens and apostrophes kept ("well-known", "o'brien", "don’t").

The pattern runs on the ``regex`` engine with NLTK's flags (``UNICODE``,
``MULTILINE``, ``DOTALL``), so the tokens are those of
:class:`nltk.tokenize.RegexpTokenizer` with the same pattern, but without its
wall-clock limit per call: a long record takes longer, it never fails because
the machine is busy.

Case rules (``case_rule``; only when ``lowercase`` is true):

``"fold"`` (default)
    Unicode full case folding (``str.casefold``: "Straße" and "STRASSE" give
    "strasse"), except that capital dotted İ folds to plain ``i`` (the Turkic
    mapping of the Unicode case-folding table) rather than ``i`` + combining dot,
    so "İstanbul" and "ISTANBUL" are one word in any corpus.
``"turkish"``
    For Turkish and Azeri: İ → i and I → ı (dotless), then case folding; "KIZ"
    gives "kız", not "kiz".
``"lower"``
    ``str.lower``: the rule of workspaces made before the case rule was
    recorded; their manifests lack the key and keep this rule.
"""

from __future__ import annotations

import dataclasses
import re
import unicodedata

import regex

from tracer.errors import SettingError

DEFAULT_PATTERN = r"\w+(?:[-'’‘‐‑]\w+)*"
#: the pattern of workspaces made before typographic marks were accepted
LEGACY_PATTERN = r"\w+(?:[-']\w+)*"
NORMALIZATION_FORMS = ("NFC", "NFKC", "NFD", "NFKD", "none")
CASE_RULES = ("fold", "turkish", "lower")
#: the engine named in the manifest (NLTK's RegexpTokenizer compiles with it and these flags)
ENGINE = "regex (NLTK RegexpTokenizer flags, no time limit)"
_FLAGS = regex.UNICODE | regex.MULTILINE | regex.DOTALL
_TYPOGRAPHIC = str.maketrans({"’": "'", "‘": "'", "‐": "-", "‑": "-"})
# fields a manifest written before they existed lacks, with the rule those workspaces used
_LEGACY = {"case_rule": "lower", "typographic": False}


@dataclasses.dataclass(frozen=True)
class TokenizerSettings:
    """How text becomes tokens.

    Parameters
    ----------
    lowercase : bool
        Apply the case rule (after normalisation); False keeps case.
    normalization : str
        Unicode normal form applied first: one of NFC, NFKC, NFD, NFKD or ``"none"``.
    pattern : str
        Regular expression for one token (``regex`` engine, NLTK ``RegexpTokenizer``
        semantics with ``gaps=False``).
    case_rule : str
        ``"fold"``, ``"turkish"`` or ``"lower"`` (see the module docstring).
    typographic : bool
        Map ’ ‘ to ``'`` and ‐ ‑ to ``-`` so "don’t" and "don't" are one word.
    """

    lowercase: bool = True
    normalization: str = "NFKC"
    pattern: str = DEFAULT_PATTERN
    case_rule: str = "fold"
    typographic: bool = True

    def __post_init__(self):
        if self.normalization not in NORMALIZATION_FORMS:
            raise SettingError(
                f"normalization must be one of {', '.join(NORMALIZATION_FORMS)}; got {self.normalization!r}"
            )
        if self.case_rule not in CASE_RULES:
            raise SettingError(f"case rule must be one of {', '.join(CASE_RULES)}; got {self.case_rule!r}")
        try:
            regex.compile(self.pattern, _FLAGS)
        except regex.error as e:
            raise SettingError(f"tokenizer pattern {self.pattern!r} is not a valid regular expression: {e}") from None

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "TokenizerSettings":
        """Settings from a manifest; keys it lacks take the rule of the release that wrote it."""
        known = {f.name for f in dataclasses.fields(cls)}
        unknown = set(d) - known
        if unknown:
            raise SettingError(f"unknown tokenizer setting {sorted(unknown)[0]!r}; a newer release wrote it")
        return cls(**{**_LEGACY, **d})

    def matches(self, request: "TokenizerSettings") -> bool:
        """Whether ``request`` (asked for by an ingest or an experiment) fits a workspace with these settings.

        Equal settings fit; so do the defaults of this release and the defaults of the release that
        made an older workspace, for the same case and normal form: an experiment that states no new
        rule keeps working on the workspace it made.
        """
        if request == self:
            return True
        legacy = dataclasses.replace(request, pattern=LEGACY_PATTERN, **_LEGACY)
        default = TokenizerSettings(lowercase=request.lowercase, normalization=request.normalization)
        return request == default and self == legacy


def normalize_text(text: str, settings: TokenizerSettings) -> str:
    """The one normalisation of corpus text and user words: normal form, marks, case rule."""
    if settings.normalization != "none":
        text = unicodedata.normalize(settings.normalization, text)
    if settings.typographic:
        text = text.translate(_TYPOGRAPHIC)
    if settings.lowercase:
        if settings.case_rule == "lower":
            text = text.lower()
        elif settings.case_rule == "turkish":
            text = text.replace("İ", "i").replace("I", "ı").casefold()
        else:
            text = text.replace("İ", "i").casefold()
    return text


class Tokenizer:
    """Turn a text into a list of token strings under fixed settings."""

    def __init__(self, settings: TokenizerSettings | None = None):
        self.settings = settings or TokenizerSettings()
        self._regexp = regex.compile(self.settings.pattern, _FLAGS)
        # the built-in patterns on ASCII text: the standard engine finds the same tokens (an ASCII
        # character is a word character for both engines exactly when it is a letter, a digit or
        # "_"; the patterns' other characters cannot occur), a third faster
        self._ascii = (re.compile(self.settings.pattern, re.ASCII)
                       if self.settings.pattern in (DEFAULT_PATTERN, LEGACY_PATTERN) else None)

    def normalize(self, text: str) -> str:
        return normalize_text(text, self.settings)

    def normalize_word(self, word: str) -> str:
        """A word as typed by a user, in the form its tokens take in the corpus."""
        return self.normalize(word.strip())

    def tokenize(self, text: str) -> list[str]:
        """The whole matches of the pattern in the normalised text, in order."""
        text = self.normalize(text)
        if self._ascii is not None and text.isascii():
            return self._ascii.findall(text)
        if not self._regexp.groups:  # findall gives the whole matches then, without a Match object each
            return self._regexp.findall(text)
        return [m.group() for m in self._regexp.finditer(text)]

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
        spans = [m.span() for m in self._regexp.finditer(normalized)]
        if [normalized[a:b] for a, b in spans] != self.tokenize(text):
            return None
        return [(owner[a][0], owner[b - 1][1]) for a, b in spans]
