"""Bounded reading of corpus files: limits, chunks (decompressed under a ratio limit) and lines.

A line is found by ``\\n``, ``\\r\\n`` or a lone ``\\r``; one longer than the limit is
dropped as it is read, so no line is ever held beyond the limit.
"""

from __future__ import annotations

import dataclasses
import gzip
import re
import zlib
from pathlib import Path
from typing import Iterable, Iterator

from tracer.errors import SettingError

_MIB = 1 << 20
_CHUNK = _MIB
_NEWLINE = re.compile(rb"\r\n|\r|\n")
_BOM = b"\xef\xbb\xbf"


@dataclasses.dataclass(frozen=True)
class ReadLimits:
    """Bounds on one record, so a single hostile record cannot exhaust the machine.

    The defaults keep the peak memory of one record (its bytes, decoded text and
    token list, about 15 bytes per input byte) near 1 GB, safe on a 24 GB machine
    with room for the counting that follows.

    Parameters
    ----------
    max_record_bytes : int
        Size of one record: a JSONL line, a CSV row (sum of its fields), a .txt
        file, the strings of a Parquet row. Also the CSV field limit.
    max_line_bytes : int
        Size of one physical line of a JSONL or CSV file; a longer line is skipped
        without being held in memory and rejects the record it belongs to.
    max_depth : int
        Nesting depth of a JSON record (objects and lists).
    max_gzip_ratio : float
        Decompressed over compressed size of a .gz input, checked once more than
        ``gzip_ratio_floor_bytes`` were decompressed (small files compress well
        without being bombs).
    gzip_ratio_floor_bytes : int
        Decompressed bytes before the ratio is checked.
    """

    max_record_bytes: int = 64 * _MIB
    max_line_bytes: int = 64 * _MIB
    max_depth: int = 64
    max_gzip_ratio: float = 200.0
    gzip_ratio_floor_bytes: int = 64 * _MIB

    def __post_init__(self):
        for name in ("max_record_bytes", "max_line_bytes", "max_depth", "gzip_ratio_floor_bytes"):
            if not isinstance(getattr(self, name), int) or getattr(self, name) < 1:
                raise SettingError(f"{name} must be a positive integer; got {getattr(self, name)!r}")
        if not self.max_gzip_ratio > 1:
            raise SettingError(f"max_gzip_ratio must be above 1; got {self.max_gzip_ratio!r}")


class StopFile(Exception):
    """Reading a file cannot go on (damaged stream, ratio limit): the reason becomes a reject."""


def chunks(path: Path, limits: ReadLimits) -> Iterator[bytes]:
    """The bytes of a file in chunks, decompressed if .gz, under the ratio limit.

    A file that cannot be opened or read on (an I/O error, a special file behind a
    link) stops with :class:`StopFile`, after the chunks read before.
    """
    try:
        raw = open(path, "rb")
    except OSError as e:
        raise StopFile(f"unreadable file ({e.strerror or e})") from None
    with raw:
        try:
            yield from _chunks(raw, path, limits)
        except OSError as e:  # gzip's own damage errors are OSErrors too; those are StopFile already
            raise StopFile(f"unreadable file ({e.strerror or e}); the rest of the file is skipped") from None


def _chunks(raw, path: Path, limits: ReadLimits) -> Iterator[bytes]:
    if not path.name.lower().endswith(".gz"):
        yield from iter(lambda: raw.read(_CHUNK), b"")
        return
    out = 0
    try:
        with gzip.GzipFile(fileobj=raw) as f:
            # read1 returns what one compressed block gives, so records before damage come out
            for chunk in iter(lambda: f.read1(_CHUNK), b""):
                out += len(chunk)
                if out > limits.gzip_ratio_floor_bytes and out > limits.max_gzip_ratio * max(raw.tell(), 1):
                    raise StopFile(f"decompression ratio over the limit (over {limits.max_gzip_ratio:g} "
                                   "times the compressed size, limit max_gzip_ratio: a gzip bomb?); "
                                   "the rest of the file is skipped")
                yield chunk
    except (OSError, EOFError, zlib.error) as e:
        if isinstance(e, OSError) and e.errno is not None:  # reading the file failed, not decompressing it
            raise StopFile(f"unreadable file ({e.strerror}); the rest of the file is skipped") from None
        raise StopFile(f"damaged gzip data ({e}); the rest of the file is skipped") from None  # damaged or truncated


_START, _FIELD, _QUOTED, _QUOTE_IN_QUOTED = range(4)
_CSV_SPECIAL = re.compile(rb'[",]')


class CsvQuoteState:
    """Where a physical line of excel-dialect CSV leaves the quoting, fed piece by piece.

    The states are those of Python's :mod:`csv` reader (``strict`` off, ``doublequote`` on):
    a '"' opens a quoted field only at the start of a field; inside one, '""' is a quote and
    '"' followed by anything else closes it; in an unquoted field a '"' is a literal
    character. Counting quotes is not enough: ``1,"ab"c"`` ends outside any quotes with
    three of them.
    """

    def __init__(self, in_quotes: bool):
        self.state = _QUOTED if in_quotes else _START

    def feed(self, piece: bytes) -> None:
        st, pos = self.state, 0
        for m in _CSV_SPECIAL.finditer(piece):
            i = m.start()
            if i > pos and st in (_START, _QUOTE_IN_QUOTED):
                st = _FIELD  # another character: a field begins unquoted, or a closed quote goes on
            if piece[i] == 0x22:
                st = {_START: _QUOTED, _QUOTED: _QUOTE_IN_QUOTED, _QUOTE_IN_QUOTED: _QUOTED}.get(st, st)
            elif st != _QUOTED:
                st = _START  # a delimiter outside quotes ends the field
            pos = i + 1
        if pos < len(piece) and st in (_START, _QUOTE_IN_QUOTED):
            st = _FIELD
        self.state = st

    @property
    def in_quotes(self) -> bool:
        """Whether the line end falls inside a quoted field (the record goes on)."""
        return self.state == _QUOTED


def csv_line_ends_in_quotes(line: bytes, in_quotes: bool) -> bool:
    """:class:`CsvQuoteState` over one whole line that starts ``in_quotes`` or not."""
    if b'"' not in line:
        return in_quotes
    state = CsvQuoteState(in_quotes)
    state.feed(line)
    return state.in_quotes


class _Line:
    """The line being read: its pieces, or, once over the limit, only its size and (for CSV)
    where it leaves the quoting from either starting state."""

    def __init__(self, max_line: int, csv_quotes: bool):
        self.max_line, self.csv_quotes = max_line, csv_quotes
        self.parts: list[bytes] = []
        self.size = 0
        self.over = False
        self.states: tuple[CsvQuoteState, CsvQuoteState] | None = None

    def add(self, piece: bytes) -> None:
        self.size += len(piece)
        if self.over:
            self._scan(piece)
        elif self.size > self.max_line:
            self.over = True
            if self.csv_quotes:
                self.states = (CsvQuoteState(False), CsvQuoteState(True))
            for p in self.parts + [piece]:
                self._scan(p)
            self.parts = []
        elif piece:
            self.parts.append(piece)

    def _scan(self, piece: bytes) -> None:
        if self.states is not None:
            for st in self.states:
                st.feed(piece)

    def value(self) -> tuple[bytes | None, tuple[bool, bool] | None]:
        if not self.over:
            return b"".join(self.parts), None
        return None, None if self.states is None else (self.states[0].in_quotes, self.states[1].in_quotes)


def lines(chunks: Iterable[bytes], max_line: int, *,
          csv_quotes: bool = False) -> Iterator[tuple[int, bytes | None, tuple[bool, bool] | None]]:
    """Physical lines as (number, bytes without the line end, quoting of a too-long line).

    Ends are ``\\r\\n``, ``\\r`` or ``\\n``. A line over ``max_line`` bytes comes as
    None: its bytes are dropped as they are read. With ``csv_quotes`` its third item says
    whether it ends inside a quoted field when it starts outside one, and when it starts
    inside one (:class:`CsvQuoteState`), so a CSV reader can keep its quoting state; else
    None. A leading byte-order mark is dropped.
    """
    line = _Line(max_line, csv_quotes)
    number, first, cr_before = 1, True, False
    for chunk in chunks:
        if first:
            chunk, first = chunk[3:] if chunk.startswith(_BOM) else chunk, False
        if cr_before and chunk.startswith(b"\n"):
            chunk = chunk[1:]  # the \\n of a \\r\\n split between two chunks
        cr_before = chunk.endswith(b"\r")
        pos = 0
        for m in _NEWLINE.finditer(chunk):
            line.add(chunk[pos:m.start()])
            yield (number, *line.value())
            number, line, pos = number + 1, _Line(max_line, csv_quotes), m.end()
        line.add(chunk[pos:])
    if line.size:
        yield (number, *line.value())
