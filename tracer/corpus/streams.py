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


class _Line:
    """The line being read: its pieces, or only its size and quote count once over the limit."""

    def __init__(self, max_line: int):
        self.max_line = max_line
        self.parts: list[bytes] = []
        self.size = self.quotes = 0
        self.over = False

    def add(self, piece: bytes) -> None:
        self.size += len(piece)
        if self.over:
            self.quotes += piece.count(b'"')
        elif self.size > self.max_line:
            self.over = True
            self.quotes = sum(p.count(b'"') for p in self.parts) + piece.count(b'"')
            self.parts = []
        elif piece:
            self.parts.append(piece)

    def value(self) -> tuple[bytes | None, int]:
        return (None, self.quotes) if self.over else (b"".join(self.parts), 0)


def lines(chunks: Iterable[bytes], max_line: int) -> Iterator[tuple[int, bytes | None, int]]:
    """Physical lines as (number, bytes without the line end, count of '"' when too long).

    Ends are ``\\r\\n``, ``\\r`` or ``\\n``. A line over ``max_line`` bytes comes as
    None: its bytes are dropped as they are read; its quote count lets a CSV
    reader keep its quoting state. A leading byte-order mark is dropped.
    """
    line = _Line(max_line)
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
            number, line, pos = number + 1, _Line(max_line), m.end()
        line.add(chunk[pos:])
    if line.size:
        yield (number, *line.value())
