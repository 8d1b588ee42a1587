"""Tables the user supplies beside the corpus: a CSV of words with one numeric value each."""

from __future__ import annotations

import csv
import dataclasses
from pathlib import Path

import numpy as np

from tracer.errors import InputError


@dataclasses.dataclass(frozen=True)
class WordValues:
    """One value per word, in the file's order.

    Attributes
    ----------
    words : list of str, length n (stripped, lower-case)
    values : numpy.ndarray of float64, shape (n,)
    column : str
        The name of the value column.
    """

    words: list[str]
    values: np.ndarray
    column: str


def read_word_values(path: str | Path, word_column: str, value_column: str) -> WordValues:
    """A CSV with a header: one word column and one numeric column; errors name the line."""
    path = Path(path)
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
            words.append(row[word_column].strip().lower())
            values.append(v)
    if len(words) < 3:
        raise InputError(f"{path}: at least 3 rows are needed to correlate; found {len(words)}")
    return WordValues(words, np.asarray(values), value_column)
