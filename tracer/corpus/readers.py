"""Readers for corpus files: JSONL (plain or gzip), CSV, folders of .txt files, Parquet.

Each reader yields, record by record, either a :class:`RawRecord` (the record's
fields as a dict, with the file and line it came from) or a :class:`Reject`
(with the reason it cannot be read). Nothing is held in memory beyond one
record, and one record never beyond the :class:`ReadLimits`, so a corpus of
any size streams through and a hostile file costs at most one reject.

Whatever goes wrong inside one record (bad UTF-8, a lone surrogate escape,
nesting beyond the limit, a record or line over the size limit, an unreadable
value) is a reject with file, line and reason. Whatever stops a file part-way
(a damaged gzip or Parquet stream, a decompression ratio over the limit) is one
more reject at the line where reading stopped, after the records read before
it. Line ends may be ``\\n``, ``\\r\\n`` or a lone ``\\r``; a UTF-8 byte-order
mark at the start of a file is dropped. In a folder of .txt files, a symbolic
link is followed when its target lies inside the input folder; any other link
(outside, broken, or a loop), an unreadable entry and a file that is not a
regular file is a reject, so every skipped file is counted. Files whose names
do not end in .txt are not part of the input and are passed over.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import os
from pathlib import Path
from typing import Iterator

from tracer.corpus.streams import ReadLimits, StopFile, chunks, csv_line_ends_in_quotes, lines
from tracer.errors import InputError

__all__ = ["FORMATS", "RawRecord", "ReadLimits", "Reject", "detect_format", "json_record", "jsonl_lines",
           "read_items", "read_records", "shown_path", "txt_entries"]

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


def shown_path(path) -> str:
    """A path as printable UTF-8 text: bytes that are not UTF-8 appear as ``\\xNN``."""
    return os.fsencode(path).decode("utf-8", "backslashreplace")


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
        f"{shown_path(path)}: cannot tell the format from the name; use .jsonl, .jsonl.gz, .csv, .parquet, "
        "a .txt file or a folder of .txt files, or pass --input-format"
    )


def _excerpt(text: str, n: int = 80) -> str:
    text = text[: n + 1].replace("\n", " ")
    text = text.encode("utf-8", "surrogatepass").decode("utf-8", "backslashreplace")
    return text if len(text) <= n else text[: n - 3] + "..."


def _has_surrogates(s: str) -> bool:
    try:
        s.encode("utf-8")
    except UnicodeEncodeError:
        return True
    return False


def _value_problem(obj, limits: ReadLimits) -> str | None:
    """Why a parsed record cannot be stored: nesting too deep, a lone surrogate, too large."""
    stack = [(obj, 1, None)]
    total = 0
    while stack:
        value, depth, field = stack.pop()
        if isinstance(value, str):
            total += len(value)
            if _has_surrogates(value):
                where = f"field {field!r}" if field is not None else "a field name"
                return (f"lone surrogate escape (in {_excerpt(where)}: half of a UTF-16 pair, "
                        "not a character)")
        elif isinstance(value, (dict, list)):
            if depth > limits.max_depth:
                return f"nested too deep (over {limits.max_depth} levels, limit max_depth)"
            items = value.items() if isinstance(value, dict) else ((None, v) for v in value)
            for key, v in items:
                if key is not None:
                    stack.append((str(key), depth, None))
                stack.append((v, depth + 1, field if field is not None or key is None else str(key)))
    if total > limits.max_record_bytes:
        return f"record over the size limit ({total} characters, limit max_record_bytes = {limits.max_record_bytes})"
    return None


def json_record(raw: bytes, name: str, line_no: int, limits: ReadLimits) -> RawRecord | Reject:
    """One line of a JSONL file as a record, or why it is rejected."""
    try:
        line = raw.decode("utf-8")
    except UnicodeDecodeError as e:
        return Reject(name, line_no, f"not valid UTF-8 (byte {e.start} of the line)",
                      _excerpt(raw[:200].decode("utf-8", "replace")))
    try:
        obj = json.loads(line)
    except json.JSONDecodeError as e:
        return Reject(name, line_no, f"malformed JSON: {e.msg} at column {e.colno}", _excerpt(line))
    except RecursionError:
        return Reject(name, line_no, f"nested too deep (over {limits.max_depth} levels, limit max_depth)",
                      _excerpt(line))
    except ValueError as e:  # e.g. an integer of more digits than Python converts
        return Reject(name, line_no, f"unreadable JSON value ({e})", _excerpt(line))
    if not isinstance(obj, dict):
        return Reject(name, line_no, f"a JSON object was expected, found {type(obj).__name__}", _excerpt(line))
    problem = _value_problem(obj, limits)
    if problem:
        return Reject(name, line_no, problem, _excerpt(line))
    return RawRecord(obj, name, line_no)


def _too_long(limits: ReadLimits) -> str:
    return f"line over the length limit (limit max_line_bytes = {limits.max_line_bytes})"


def read_jsonl(path: Path, limits: ReadLimits = ReadLimits()) -> Iterator[RawRecord | Reject]:
    name = shown_path(path)
    for item in jsonl_lines(path, limits):
        yield item if isinstance(item, Reject) else json_record(item[1], name, item[0], limits)


def jsonl_lines(path: Path, limits: ReadLimits = ReadLimits()) -> Iterator[tuple[int, bytes] | Reject]:
    """The first half of :func:`read_jsonl`: ``(line number, bytes)`` of each non-blank line, or a
    reject (a line over the limit, a file that stops); :func:`json_record` makes the record."""
    name = shown_path(path)
    max_line = min(limits.max_line_bytes, limits.max_record_bytes)
    line_no = 0
    try:
        for line_no, raw, _ in lines(chunks(path, limits), max_line):
            if raw is None:
                yield Reject(name, line_no, _too_long(dataclasses.replace(limits, max_line_bytes=max_line)), "")
            elif raw.strip():
                yield line_no, raw
    except StopFile as e:
        yield Reject(name, line_no + 1, str(e), "")


def _csv_text_lines(numbered, over: list[tuple[int, str]], limits: ReadLimits):
    """CSV text lines for :mod:`csv`, each record kept under the size limit.

    A line over the line limit, and every line of a record once the record is over the
    size limit, becomes a line holding one '"' when it changes the quoting and nothing
    otherwise (so :mod:`csv` keeps its quoting state and the rows after it stay whole),
    and its line is noted in ``over`` with the reason. The record's end is where a line
    ends outside any quoted field, followed with csv's own quoting rules
    (:class:`~tracer.corpus.streams.CsvQuoteState`: a literal '"' inside an unquoted field
    changes nothing): the csv module's field limit is then never reached, and a long
    quoted field cannot make it resume inside the quotes.
    """
    size, in_quotes, noted = 0, False, False
    for line_no, raw, ends in numbered:
        if raw is not None:
            size += len(raw) + 1  # the line end is part of a quoted field
            after = csv_line_ends_in_quotes(raw, in_quotes)
        else:
            after = ends[1] if in_quotes else ends[0]
        if raw is None or size > limits.max_record_bytes:
            if not noted:
                over.append((line_no, _too_long(limits) if raw is None else _too_large(limits)))
                noted = True
            yield ('"' if after != in_quotes else "") + "\n"
        else:
            # surrogateescape keeps bad bytes visible so that only the record holding them is rejected
            yield raw.decode("utf-8", "surrogateescape") + "\n"
        in_quotes = after
        if not in_quotes:
            size, noted = 0, False


def _too_large(limits: ReadLimits) -> str:
    return f"record over the size limit (limit max_record_bytes = {limits.max_record_bytes})"


def read_csv(path: Path, limits: ReadLimits = ReadLimits()) -> Iterator[RawRecord | Reject]:
    name = shown_path(path)
    over: list[tuple[int, str]] = []
    csv.field_size_limit(limits.max_record_bytes)
    reader = csv.reader(_csv_text_lines(lines(chunks(path, limits), limits.max_line_bytes, csv_quotes=True),
                                         over, limits))
    try:
        try:
            header = next(reader, None)
        except csv.Error as e:
            raise InputError(f"{name}, line 1: malformed CSV header: {e}") from None
        if header is None:
            return
        if over or any(_has_surrogates(h) for h in header):
            raise InputError(f"{name}, line 1: the header is not valid UTF-8 or is over the line or size limit")
        start = reader.line_num + 1
        while True:
            try:
                row = next(reader)
            except StopIteration:
                break
            except csv.Error as e:
                yield Reject(name, start, f"malformed CSV ({e})", "")
                start = reader.line_num + 1
                continue
            line_no, end, start = start, reader.line_num, reader.line_num + 1
            if over and over[0][0] <= end:
                yield Reject(name, over[0][0], over[0][1], "")
                del over[:]
                continue
            if not row:
                continue  # a blank line
            yield _csv_row(row, header, name, line_no, limits)
    except StopFile as e:
        yield Reject(name, reader.line_num + 1, str(e), "")


def _csv_row(row: list[str], header: list[str], name: str, line_no: int, limits: ReadLimits):
    if len(row) > len(header):
        return Reject(name, line_no, "more fields than the header names", _excerpt(",".join(row[len(header):])))
    if len(row) < len(header):
        return Reject(name, line_no, "fewer fields than the header names", "")
    if any(_has_surrogates(v) for v in row):
        return Reject(name, line_no, "not valid UTF-8", "")
    if sum(len(v) for v in row) > limits.max_record_bytes:
        return Reject(name, line_no, _too_large(limits), "")
    return RawRecord(dict(zip(header, row)), name, line_no)


def read_txt(path: Path, limits: ReadLimits = ReadLimits()) -> Iterator[RawRecord | Reject]:
    """One document per .txt file; in a folder, the source is the first sub-folder."""
    if path.is_file():
        yield _txt_record(path, Path(path.name), limits)
        return
    for rel, problem in txt_entries(path):
        if problem:
            yield Reject(shown_path(path / rel), 1, problem, "")
        else:
            yield _txt_record(path / rel, rel, limits)


def _inside(target: str, root: Path) -> bool:
    return os.path.commonpath([target, str(root)]) == str(root)


def txt_entries(folder: Path) -> Iterator[tuple[Path, str | None]]:
    """(path relative to the folder, why it is skipped or None) of every .txt file, sorted by path.

    Links are followed when their target is inside the folder (a linked file or
    folder is read under the link's name too); a link to a folder that holds the
    link is a loop, counted and not followed. Entries with None are the regular
    files the reader reads (a name that is not UTF-8 is rejected when read).
    """
    root = Path(os.path.realpath(folder))
    stack: list[tuple[Path, frozenset]] = [(Path(), frozenset([str(root)]))]
    found: list[tuple[Path, str | None]] = []
    while stack:
        rel, ancestors = stack.pop()
        try:
            entries = sorted(os.scandir(root / rel), key=lambda e: e.name)
        except OSError as e:
            found.append((rel, f"unreadable folder ({e.strerror}; its files are skipped)"))
            continue
        for entry in entries:
            sub = rel / entry.name
            is_txt = entry.name.lower().endswith(".txt")
            real = os.path.realpath(root / sub)
            if entry.is_symlink():
                if not os.path.exists(real):
                    if is_txt:
                        found.append((sub, "broken symbolic link, skipped"))
                    continue
                if not _inside(real, root):
                    if is_txt or os.path.isdir(real):
                        found.append((sub, "symbolic link to outside the input folder, skipped"))
                    continue
            try:
                is_dir = entry.is_dir()
            except OSError:
                is_dir = False
            if is_dir:
                if real in ancestors:
                    found.append((sub, "symbolic link loop (to a folder that holds it), skipped"))
                else:
                    stack.append((sub, ancestors | {real}))
            elif is_txt:
                found.append((sub, None if entry.is_file() else "not a regular file, skipped"))
    return iter(sorted(found, key=lambda x: os.fsencode(x[0])))


def _txt_record(p: Path, rel: Path, limits: ReadLimits) -> RawRecord | Reject:
    name = shown_path(p)
    if _has_surrogates(str(rel)):
        return Reject(name, 1, "file name not valid UTF-8, skipped (rename the file)", "")
    try:
        size = p.stat().st_size
        if size > limits.max_record_bytes:
            return Reject(name, 1, f"file over the size limit ({size} bytes, limit max_record_bytes = "
                                   f"{limits.max_record_bytes})", "")
        data = p.read_bytes()
    except OSError as e:
        return Reject(name, 1, f"unreadable file ({e.strerror})", "")
    fields = {"id": rel.with_suffix("").as_posix(), "title": rel.stem}
    if len(rel.parts) > 1:
        fields["source"] = rel.parts[0]
    try:
        fields["text"] = data.decode("utf-8-sig")
    except UnicodeDecodeError as e:
        return Reject(name, 1, f"not valid UTF-8 (byte {e.start} of the file)", "")
    return RawRecord(fields, name, 1)


def read_parquet(path: Path, limits: ReadLimits = ReadLimits()) -> Iterator[RawRecord | Reject]:
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise InputError(
            f"{path}: reading Parquet needs pyarrow; install it with  pip install 'corpus-tracer[parquet]'"
        ) from None
    name = shown_path(path)
    try:
        pf = pq.ParquetFile(path)
    except Exception as e:  # pyarrow raises its own error types for damaged files
        yield Reject(name, 0, f"not a readable Parquet file ({_excerpt(str(e), 200)})", "")
        return
    row_no = 0
    batches = pf.iter_batches(batch_size=4096)
    while True:
        try:
            batch = next(batches)
        except StopIteration:
            return
        except Exception as e:  # a damaged page or column chunk
            yield Reject(name, row_no + 1, f"damaged Parquet data ({_excerpt(str(e), 200)}); "
                                           "the rest of the file is skipped", "")
            return
        try:
            rows = batch.to_pylist()
        except Exception:  # a value Python cannot hold (a timestamp past year 9999): find its rows
            rows = None
        for k in range(batch.num_rows):
            row_no += 1
            try:
                row = rows[k] if rows is not None else batch.slice(k, 1).to_pylist()[0]
            except Exception as e:
                yield Reject(name, row_no, f"unreadable value ({_excerpt(str(e), 200)})", "")
                continue
            problem = _value_problem(row, limits)
            yield Reject(name, row_no, problem, "") if problem else RawRecord(row, name, row_no)


_READERS = {"jsonl": read_jsonl, "csv": read_csv, "txt": read_txt, "parquet": read_parquet}


def read_records(path: str | os.PathLike, fmt: str | None = None,
                 limits: ReadLimits = ReadLimits()) -> Iterator[RawRecord | Reject]:
    """Yield the records of one input, whatever its format."""
    path, fmt = _checked(path, fmt)
    return _READERS[fmt](path, limits)


def read_items(path: str | os.PathLike, fmt: str | None = None,
               limits: ReadLimits = ReadLimits()) -> Iterator[RawRecord | Reject | tuple[int, bytes]]:
    """:func:`read_records`, except that a JSONL input gives its lines unparsed (:func:`jsonl_lines`),
    so that the parsing can happen elsewhere (ingest's worker processes): records and rejects in the
    same order once each line goes through :func:`json_record`."""
    path, fmt = _checked(path, fmt)
    return jsonl_lines(path, limits) if fmt == "jsonl" else _READERS[fmt](path, limits)


def _checked(path: str | os.PathLike, fmt: str | None) -> tuple[Path, str]:
    path = Path(path)
    if not path.exists():
        raise InputError(f"{shown_path(path)}: no such file or folder")
    if fmt is None:
        fmt = detect_format(path)
    if fmt not in _READERS:
        raise InputError(f"unknown input format {fmt!r}; use one of {', '.join(FORMATS)}")
    return path, fmt
