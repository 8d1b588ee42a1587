"""Readers for corpus files: JSONL (plain or gzip), CSV, folders of .txt files, Parquet.

Each reader yields, record by record, either a :class:`RawRecord` (the record's
fields as a dict, with the file and line it came from) or a :class:`Reject`
(with the reason it cannot be read). Nothing is held in memory beyond one
record, so a corpus of any size streams through.
"""

from __future__ import annotations

import csv
import dataclasses
import gzip
import io
import json
import os
from pathlib import Path
from typing import Iterator

from tracer.errors import InputError

FORMATS = ("jsonl", "csv", "txt", "parquet")


@dataclasses.dataclass(frozen=True)
class RawRecord:
    fields: dict
    file: str
    line: int


@dataclasses.dataclass(frozen=True)
class Reject:
    file: str
    line: int
    reason: str
    excerpt: str = ""

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


def detect_format(path: Path) -> str:
    """Tell the format from the path: a folder is .txt files, else by suffix."""
    if path.is_dir():
        return "txt"
    name = path.name.lower()
    if name.endswith(".gz"):
        name = name[:-3]
    for suffix, fmt in ((".jsonl", "jsonl"), (".ndjson", "jsonl"), (".json", "jsonl"),
                        (".csv", "csv"), (".txt", "txt"), (".parquet", "parquet")):
        if name.endswith(suffix):
            return fmt
    raise InputError(
        f"{path}: cannot tell the format from the name; use .jsonl, .jsonl.gz, .csv, .parquet, "
        "a .txt file or a folder of .txt files, or pass --input-format"
    )


def _open_binary(path: Path):
    if path.name.lower().endswith(".gz"):
        return gzip.open(path, "rb")
    return open(path, "rb")


def _excerpt(text: str, n: int = 80) -> str:
    text = text.replace("\n", " ")
    return text if len(text) <= n else text[: n - 3] + "..."


def read_jsonl(path: Path) -> Iterator[RawRecord | Reject]:
    name = str(path)
    with _open_binary(path) as f:
        try:
            for line_no, raw in enumerate(f, start=1):
                if not raw.strip():
                    continue
                try:
                    line = raw.decode("utf-8")
                except UnicodeDecodeError as e:
                    yield Reject(name, line_no, f"not valid UTF-8 (byte {e.start} of the line)",
                                 _excerpt(raw.decode("utf-8", "replace")))
                    continue
                try:
                    obj = json.loads(line)
                except json.JSONDecodeError as e:
                    yield Reject(name, line_no, f"malformed JSON: {e.msg} at column {e.colno}", _excerpt(line))
                    continue
                if not isinstance(obj, dict):
                    yield Reject(name, line_no, f"a JSON object was expected, found {type(obj).__name__}",
                                 _excerpt(line))
                    continue
                yield RawRecord(obj, name, line_no)
        except (OSError, EOFError) as e:  # a damaged gzip stream
            raise InputError(f"{name}: cannot read the file: {e}") from None


def _has_surrogates(s: str) -> bool:
    try:
        s.encode("utf-8")
    except UnicodeEncodeError:
        return True
    return False


def read_csv(path: Path) -> Iterator[RawRecord | Reject]:
    name = str(path)
    with _open_binary(path) as fb:
        # surrogateescape keeps bad bytes visible so that the one record holding
        # them is rejected, instead of the whole file failing to decode
        f = io.TextIOWrapper(fb, encoding="utf-8", errors="surrogateescape", newline="")
        reader = csv.DictReader(f)
        if reader.fieldnames is None:
            return
        if any(_has_surrogates(h) for h in reader.fieldnames):
            raise InputError(f"{name}, line 1: the header is not valid UTF-8")
        start = reader.line_num + 1
        while True:
            try:
                row = next(reader)
            except StopIteration:
                break
            except csv.Error as e:
                raise InputError(f"{name}, line {reader.line_num}: malformed CSV: {e}") from None
            line_no, start = start, reader.line_num + 1
            if None in row:
                yield Reject(name, line_no, "more fields than the header names", _excerpt(str(row[None])))
                continue
            if any(v is None for v in row.values()):
                yield Reject(name, line_no, "fewer fields than the header names", "")
                continue
            if any(_has_surrogates(v) for v in row.values()):
                yield Reject(name, line_no, "not valid UTF-8", "")
                continue
            yield RawRecord(dict(row), name, line_no)


def read_txt(path: Path) -> Iterator[RawRecord | Reject]:
    """One document per .txt file; in a folder, the source is the first sub-folder."""
    if path.is_file():
        files = [path]
        root = path.parent
    else:
        root = path
        files = sorted(p for p in path.rglob("*") if p.is_file() and p.suffix.lower() == ".txt")
    for p in files:
        rel = p.relative_to(root)
        fields = {"id": rel.with_suffix("").as_posix(), "title": p.stem}
        if len(rel.parts) > 1:
            fields["source"] = rel.parts[0]
        try:
            fields["text"] = p.read_bytes().decode("utf-8")
        except UnicodeDecodeError as e:
            yield Reject(str(p), 1, f"not valid UTF-8 (byte {e.start} of the file)", "")
            continue
        yield RawRecord(fields, str(p), 1)


def read_parquet(path: Path) -> Iterator[RawRecord | Reject]:
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise InputError(
            f"{path}: reading Parquet needs pyarrow; install it with  pip install 'corpus-tracer[parquet]'"
        ) from None
    try:
        pf = pq.ParquetFile(path)
    except Exception as e:  # pyarrow raises its own error types for damaged files
        raise InputError(f"{path}: not a readable Parquet file: {e}") from None
    row_no = 0
    for batch in pf.iter_batches(batch_size=4096):
        for row in batch.to_pylist():
            row_no += 1
            yield RawRecord(row, str(path), row_no)


_READERS = {"jsonl": read_jsonl, "csv": read_csv, "txt": read_txt, "parquet": read_parquet}


def read_records(path: str | os.PathLike, fmt: str | None = None) -> Iterator[RawRecord | Reject]:
    """Yield the records of one input, whatever its format."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file or folder")
    if fmt is None:
        fmt = detect_format(path)
    if fmt not in _READERS:
        raise InputError(f"unknown input format {fmt!r}; use one of {', '.join(FORMATS)}")
    return _READERS[fmt](path)
