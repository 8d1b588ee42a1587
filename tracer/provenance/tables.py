"""Tables the user supplies beside the corpus: a CSV of words with one numeric value each."""

from __future__ import annotations

import csv
import dataclasses
from pathlib import Path

import numpy as np

from tracer.corpus.tokenize import TokenizerSettings, normalize_text
from tracer.errors import InputError


@dataclasses.dataclass(frozen=True)
class WordValues:
    """One value per word, in the file's order.

    Attributes
    ----------
    words : list of str, length n (stripped and normalised like the corpus, all different)
    values : numpy.ndarray of float64, shape (n,)
    column : str
        The name of the value column.
    """

    words: list[str]
    values: np.ndarray
    column: str


def read_word_values(path: str | Path, word_column: str, value_column: str,
                     settings: TokenizerSettings | None = None) -> WordValues:
    """A CSV with a header: one word column and one numeric column; errors name the line.

    Each word is normalised as the corpus text was (``settings``: the workspace's tokenizer
    settings, :attr:`tracer.corpus.workspace.Workspace.tokenizer_settings`; default those of a
    new workspace), so "STRASSE" finds the token of "Straße" under case folding. Two rows whose
    words normalise alike are an error: each word has one value.
    """
    path = Path(path)
    settings = settings or TokenizerSettings()
    seen: dict[str, tuple[int, str]] = {}
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    words, values = [], []
    with open(path, newline="", encoding="utf-8") as f:
        reader = csv.DictReader(f)
        for col in (word_column, value_column):
            if reader.fieldnames is None or col not in reader.fieldnames:
                raise InputError(f"{path}: no column {col!r} (the columns are {', '.join(reader.fieldnames or [])})")
        for line, row in enumerate(reader, start=2):
            try:
                v = float(row[value_column])
            except (TypeError, ValueError):
                raise InputError(f"{path}, line {line}: {value_column} is not a number: {row[value_column]!r}") from None
            typed = row[word_column] or ""
            word = normalize_text(typed.strip(), settings)
            if word in seen:
                first, as_typed = seen[word]
                raise InputError(f"{path}, line {line}: {typed.strip()!r} is the word {word!r}, as is {as_typed!r} "
                                 f"on line {first} (words are compared as the corpus normalises them); "
                                 "keep one row per word")
            seen[word] = (line, typed.strip())
            words.append(word)
            values.append(v)
    if len(words) < 3:
        raise InputError(f"{path}: at least 3 rows are needed to correlate; found {len(words)}")
    return WordValues(words, np.asarray(values), value_column)
