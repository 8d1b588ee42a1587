"""What ingest does to a run of read items before storing them: parse, validate, tokenize.

This is the part of an ingest that does not depend on what is stored already, so it runs on
ingest's worker processes (:mod:`tracer.corpus.prepare_pool`), a chunk at a time, or in the
ingesting process for one job. A chunk comes back as a :class:`Prepared`: each item's reject or
document row in order, the rows' tokens as indices into the chunk's distinct words, and the
lines the input's content hash takes. Whether a row is stored (its id may be taken) and the
vocabulary ids are decided in the ingesting process (:mod:`tracer.corpus.store`).

A worker imports this module before its first chunk, so it imports nothing beyond the readers,
the validator, the tokenizer and numpy: the store and workspace modules would bring pandas and
take most of a second per worker.
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np

from tracer.corpus.readers import RawRecord, ReadLimits, Reject, json_record
from tracer.corpus.tokenize import Tokenizer, TokenizerSettings
from tracer.corpus.validate import FieldMap, FieldUse, RecordValidator

#: the columns of a row, in the order of :attr:`Prepared.rows`
ROW_FIELDS = ("doc_id", "source", "time", "year", "time_value", "title", "text", "input_file", "input_line",
              "fields")
_FILE, _LINE = ROW_FIELDS.index("input_file"), ROW_FIELDS.index("input_line")


@dataclasses.dataclass(frozen=True)
class PrepareSettings:
    """Everything a chunk's work depends on: one ingest's settings and the input's name."""

    tokenizer: TokenizerSettings
    fields: FieldMap
    default_source: str | None
    limits: ReadLimits
    input_name: str


@dataclasses.dataclass
class Prepared:
    """A chunk of items parsed, validated and tokenized.

    Attributes
    ----------
    outcomes : list of Reject or None, one per item
        The item's reject, or None: the item is the next row.
    rows : list of tuple, length n_rows
        Document rows (columns :data:`ROW_FIELDS`) of the items that are no rejects; each has tokens.
    lengths : numpy.ndarray of int64, shape (n_rows,)
        Tokens of each row.
    words : list of str, length n_words
        The rows' distinct tokens in order of first appearance.
    local : numpy.ndarray of uint32, shape (lengths.sum(),)
        Every token of the rows in order, as an index into ``words``.
    content : bytes
        Each row's line of the content hash (:func:`content_line`), concatenated.
    content_ends : numpy.ndarray of int64, shape (n_rows,)
        Where each row's line ends in ``content``.
    records : int
        Records that were read (not rejected by the reader), for :class:`FieldUse`.
    found : dict
        Field names of those records and how many have each (:meth:`FieldUse.merge`).
    bad_tokens : dict
        Row number -> the row's first token holding a tab or newline (a vocabulary cannot hold
        it); empty for any usual pattern.
    """

    outcomes: list
    rows: list
    lengths: np.ndarray
    words: list
    local: np.ndarray
    content: bytes
    content_ends: np.ndarray
    records: int
    found: dict
    bad_tokens: dict

    @staticmethod
    def row_place(row: tuple) -> tuple[str, int]:
        """The file and line a row was read from."""
        return row[_FILE], row[_LINE]


def content_line(row: dict) -> bytes:
    """A stored document's line in its input's content hash: id, source, time, title and text."""
    doc = [row["doc_id"], row["source"], row["time"], row["title"], row["text"]]
    return json.dumps(doc, ensure_ascii=False).encode("utf-8", "surrogatepass") + b"\n"


class Preparer:
    """Parse, validate and tokenize chunks of one input's items (see :func:`tracer.corpus.readers.read_items`)."""

    def __init__(self, settings: PrepareSettings):
        self.settings = settings
        self.tokenizer = Tokenizer(settings.tokenizer)
        self.validate = RecordValidator(settings.fields, settings.default_source)

    def _record(self, item) -> RawRecord | Reject:
        if isinstance(item, (RawRecord, Reject)):
            return item
        return json_record(item[1], self.settings.input_name, item[0], self.settings.limits)

    def __call__(self, items: list) -> Prepared:
        s = self.settings
        # every name of the chunk (bounded by its size): which ones the input keeps is decided
        # when the chunks are merged in order (FieldUse.merge)
        use = FieldUse(s.fields, s.default_source, s.input_name, max_names=None)
        outcomes, rows, lengths, content, local = [], [], [], [], []
        # the rows' distinct words in order of first appearance, and each token's index among them
        index = _FirstSeen()
        index_of = index.__getitem__
        for item in items:
            rec = self._record(item)
            if isinstance(rec, Reject):
                outcomes.append(rec)
                continue
            use.add(rec)
            row = self.validate(rec)
            if isinstance(row, str):
                outcomes.append(Reject(rec.file, rec.line, row, ""))
                continue
            toks = self.tokenizer.tokenize(row["text"])
            if not toks:
                outcomes.append(Reject(rec.file, rec.line, "the text has no tokens", ""))
                continue
            outcomes.append(None)
            rows.append(tuple(row[k] for k in ROW_FIELDS))
            lengths.append(len(toks))
            content.append(content_line(row))
            local += map(index_of, toks)
        words = list(index)
        local = np.fromiter(local, dtype=np.uint32, count=len(local))
        lengths = np.array(lengths, dtype=np.int64)
        return Prepared(outcomes, rows, lengths, words, local, b"".join(content),
                        np.cumsum([len(c) for c in content], dtype=np.int64), use.records, use.found,
                        _bad_tokens(words, local, lengths))


class _FirstSeen(dict):
    """Word -> its index in order of first appearance; a word not met before gets the next one
    (a lookup of a known word stays in C)."""

    def __missing__(self, word: str) -> int:
        i = self[word] = len(self)
        return i


def _bad_tokens(words: list[str], local: np.ndarray, lengths: np.ndarray) -> dict[int, str]:
    """Row -> its first token with a tab or newline (usually none: one pass over the distinct words)."""
    bad = np.array([i for i, w in enumerate(words) if "\t" in w or "\n" in w], dtype=np.int64)
    if not len(bad):
        return {}
    where = np.flatnonzero(np.isin(local, bad))
    rows = np.searchsorted(np.cumsum(lengths), where, side="right")
    first = {}
    for r, k in zip(rows.tolist(), where.tolist()):
        first.setdefault(r, words[local[k]])
    return first


_worker: Preparer | None = None


def prepare_chunk(settings: PrepareSettings, items: list) -> Prepared:
    """A worker's task: one chunk (the worker keeps its :class:`Preparer` while the input is the same)."""
    global _worker
    if _worker is None or _worker.settings != settings:
        _worker = Preparer(settings)
    return _worker(items)
