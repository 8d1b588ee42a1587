"""Ingest corpus files into a workspace, streaming, atomically and idempotently.

A new store generation is built beside the current one and made current by
one atomic rename of the ``CURRENT`` pointer; an interrupted ingest leaves the
workspace as it was. An input whose content hash was ingested before is
skipped, so running the same command twice changes nothing; a new file is
appended.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
import os
import shutil
import sqlite3
import sys
from pathlib import Path
from typing import Iterable

import numpy as np
from tqdm.auto import tqdm

from tracer.errors import InputError, WorkspaceError
from tracer.files import write_atomic
from tracer.versions import package_versions
from tracer.corpus.readers import RawRecord, ReadLimits, Reject, detect_format, read_records
from tracer.corpus.timeparse import TimeParseError, parse_time
from tracer.corpus.tokenize import ENGINE, Tokenizer, TokenizerSettings
from tracer.corpus.workspace import (CURRENT_FILE, DB_FILE, MANIFEST_FILE, OFFSETS_FILE, POSTINGS_POS_FILE,
                        POSTINGS_PTR_FILE, REJECTS_FILE, TOKENS_FILE, VOCAB_FILE, Workspace)

FORMAT_VERSION = 1
_FLUSH_TOKENS = 1 << 20

_SCHEMA = """
CREATE TABLE IF NOT EXISTS documents (
    doc_index   INTEGER PRIMARY KEY,
    doc_id      TEXT NOT NULL UNIQUE,
    source      TEXT NOT NULL,
    time        TEXT,
    year        INTEGER,
    time_value  REAL,
    title       TEXT,
    text        TEXT NOT NULL,
    n_tokens    INTEGER NOT NULL,
    token_start INTEGER NOT NULL,
    input_file  TEXT NOT NULL,
    input_line  INTEGER NOT NULL,
    fields      TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS documents_source ON documents(source);
CREATE INDEX IF NOT EXISTS documents_year ON documents(year);
"""


@dataclasses.dataclass(frozen=True)
class FieldMap:
    """Which field of a record holds what.

    ``time=None`` means: use ``time`` if the record has it, else ``date``, and
    accept records with neither. Naming a time field makes it required.
    """

    text: str = "text"
    id: str = "id"
    source: str = "source"
    time: str | None = None
    title: str = "title"


@dataclasses.dataclass(frozen=True)
class InputSummary:
    path: str
    sha256: str
    status: str  # "added" or "already ingested"
    records: int
    documents: int
    tokens: int
    rejects: int


@dataclasses.dataclass(frozen=True)
class IngestSummary:
    workspace: str
    inputs: list[InputSummary]
    documents_total: int
    tokens_total: int
    vocabulary_total: int
    rejects_file: str | None
    reject_reasons: dict[str, int]

    @property
    def documents_added(self) -> int:
        return sum(i.documents for i in self.inputs)

    @property
    def rejects(self) -> int:
        return sum(i.rejects for i in self.inputs)


def hash_input(path: Path) -> str:
    """sha256 of a file, or of a folder's .txt files (relative names and contents, sorted)."""
    h = hashlib.sha256()
    files = ([path] if path.is_file() else
             sorted(p for p in path.rglob("*") if p.is_file() and p.suffix.lower() == ".txt"))
    for p in files:
        if path.is_dir():
            h.update(p.relative_to(path).as_posix().encode("utf-8", "surrogateescape") + b"\0")
        with open(p, "rb") as f:
            for block in iter(lambda: f.read(1 << 20), b""):
                h.update(block)
    return h.hexdigest()


class _Validator:
    """Turn a raw record into a document row, or say why it cannot be one."""

    def __init__(self, fields: FieldMap, default_source: str | None):
        self.f = fields
        self.default_source = default_source

    def __call__(self, rec: RawRecord, tokens: list[str] | None = None):
        f, d = self.f, rec.fields
        text = d.get(f.text)
        if text is None:
            return f"no {f.text!r} field (set the text field with --text-field)"
        if not isinstance(text, str):
            return f"field {f.text!r} is not a string"
        if not text.strip():
            return "empty text"
        doc_id = d.get(f.id)
        if doc_id is None or doc_id == "":
            doc_id = f"{Path(rec.file).stem}:{rec.line}"
        elif isinstance(doc_id, (dict, list, float)):
            return f"field {f.id!r} must be a string or an integer, found {doc_id!r}"
        source = d.get(f.source)
        if source is None or source == "":
            source = self.default_source or Path(rec.file).stem
        time_field = f.time
        if time_field is None:
            time_field = "time" if "time" in d else "date" if "date" in d else None
            required = False
        else:
            required = True
        parsed = None
        raw_time = d.get(time_field) if time_field else None
        if raw_time is None or raw_time == "":
            if required:
                return f"missing time (field {time_field!r})"
        else:
            try:
                parsed = parse_time(raw_time)
            except TimeParseError as e:
                return f"field {time_field!r}: {e}"
        title = d.get(f.title)
        extra = {k: v for k, v in d.items() if k != f.text}
        return {
            "doc_id": str(doc_id), "source": str(source),
            "time": parsed.iso if parsed else None,
            "year": parsed.year if parsed else None,
            "time_value": parsed.value if parsed else None,
            "title": None if title is None else str(title),
            "text": text, "input_file": rec.file, "input_line": rec.line,
            "fields": json.dumps(extra, ensure_ascii=False, default=str),
        }


def _recover(ws_path: Path) -> str | None:
    """Remove store folders left by an interrupted ingest; return the current store name."""
    current_file = ws_path / CURRENT_FILE
    current = current_file.read_text(encoding="utf-8").strip() if current_file.is_file() else None
    for p in ws_path.glob("store-*"):
        if p.is_dir() and p.name != current:
            shutil.rmtree(p)
    return current


def ingest(workspace: str | os.PathLike, inputs: Iterable[str | os.PathLike], *,
           fields: FieldMap = FieldMap(), tokenizer: TokenizerSettings | None = None,
           input_format: str | None = None, default_source: str | None = None,
           strict: bool = False, progress: bool = False, limits: ReadLimits = ReadLimits()) -> IngestSummary:
    """Read corpus files into the workspace (created if needed).

    Parameters
    ----------
    workspace : path
        The workspace folder.
    inputs : paths
        Files or folders to read (JSONL, JSONL.gz, CSV, a .txt file or a folder of
        them, Parquet).
    fields : FieldMap
        Which record fields hold the text, id, source, time and title.
    tokenizer : TokenizerSettings, optional
        Settings for a new workspace; for an existing one they must match the
        recorded settings (or be None).
    default_source : str, optional
        Source of records that name none (default: the input file's name).
    strict : bool
        Fail on the first rejected record instead of skipping it.
    progress : bool
        Show a progress bar.
    limits : ReadLimits
        Bounds on one record (size, line length, nesting, gzip ratio); beyond them a reject.

    Returns
    -------
    IngestSummary
    """
    ws_path = Path(workspace)
    inputs = [Path(p) for p in inputs]
    if not inputs:
        raise InputError("no input files given")
    for p in inputs:
        if not p.exists():
            raise InputError(f"{p}: no such file or folder")
        if input_format is None:
            detect_format(p)
    ws_path.mkdir(parents=True, exist_ok=True)
    current = _recover(ws_path)

    old = Workspace(ws_path) if current else None
    if old is not None:
        settings = old.tokenizer_settings
        if tokenizer is not None and not settings.matches(tokenizer):
            raise WorkspaceError(
                f"workspace {ws_path} was made with tokenizer settings {settings.to_dict()}; "
                f"these inputs ask for {tokenizer.to_dict()}. Use a new workspace for other settings"
            )
        words = list(old.vocab.words)
        manifest_inputs = list(old.manifest["inputs"])
        n_docs = old.n_documents
        n_tokens = old.n_tokens
        offsets_old = old.doc_offsets
    else:
        settings = tokenizer or TokenizerSettings()
        words, manifest_inputs, n_docs, n_tokens = [], [], 0, 0
        offsets_old = np.zeros(1, dtype=np.int64)
    known_hashes = {i["sha256"] for i in manifest_inputs}
    input_hashes = [hash_input(p) for p in inputs]
    if old is not None and all(h in known_hashes for h in input_hashes):
        # nothing new: leave the store untouched
        return IngestSummary(str(ws_path), [InputSummary(str(p), h, "already ingested", 0, 0, 0, 0)
                                            for p, h in zip(inputs, input_hashes)],
                             old.n_documents, old.n_tokens, len(old.vocab), None, {})
    word_ids = {w: i for i, w in enumerate(words)}
    tok = Tokenizer(settings)
    validate = _Validator(fields, default_source)

    gen = 1 + max([int(p.name.split("-")[1]) for p in ws_path.glob("store-*") if p.is_dir()] or [0])
    store = ws_path / f"store-{gen:04d}"
    store.mkdir()
    try:
        if old is not None:
            # the sqlite backup API gives a consistent copy even of an open database
            with sqlite3.connect(old.store / DB_FILE) as src, sqlite3.connect(store / DB_FILE) as dst:
                src.backup(dst)
            shutil.copyfile(old.store / TOKENS_FILE, store / TOKENS_FILE)
        else:
            (store / TOKENS_FILE).write_bytes(b"")
        con = sqlite3.connect(store / DB_FILE)
        con.executescript(_SCHEMA)
        new_offsets: list[int] = []
        # rejects go to a file as they come, so a corpus full of bad records does not fill memory
        reject_log = open(store / "rejects.new.jsonl", "w", encoding="utf-8")
        reasons: dict[str, int] = {}
        first_reject: Reject | None = None
        summaries: list[InputSummary] = []
        bar = tqdm(desc="ingest", unit=" docs", disable=not progress, leave=False)
        with open(store / TOKENS_FILE, "ab") as tok_file:
            buffer: list[np.ndarray] = []
            buffered = 0
            for path, sha in zip(inputs, input_hashes):
                if sha in known_hashes:
                    summaries.append(InputSummary(str(path), sha, "already ingested", 0, 0, 0, 0))
                    continue
                known_hashes.add(sha)
                n_rec = n_doc = n_tok = n_rej = 0
                for rec in read_records(path, input_format, limits):
                    n_rec += 1
                    row = rec if isinstance(rec, Reject) else validate(rec)
                    if isinstance(row, dict):
                        strings = tok.tokenize(row["text"])
                        if not strings:
                            row = "the text has no tokens"
                    if isinstance(row, str):
                        row = Reject(rec.file, rec.line, row, "")
                    if isinstance(row, dict):
                        row.update(doc_index=n_docs, n_tokens=len(strings), token_start=n_tokens)
                        try:
                            con.execute(
                                "INSERT INTO documents (doc_index, doc_id, source, time, year, time_value, "
                                "title, text, n_tokens, token_start, input_file, input_line, fields) VALUES "
                                "(:doc_index, :doc_id, :source, :time, :year, :time_value, :title, :text, "
                                ":n_tokens, :token_start, :input_file, :input_line, :fields)", row)
                        except sqlite3.IntegrityError:
                            row = Reject(rec.file, rec.line, f"duplicate id {row['doc_id']!r}", "")
                    if isinstance(row, Reject):
                        if strict:
                            raise InputError(f"{row.file}, line {row.line}: {row.reason} "
                                             "(--strict stops at the first rejected record)")
                        reject_log.write(json.dumps(row.to_dict(), ensure_ascii=False) + "\n")
                        kind = _reason_kind(row.reason)
                        reasons[kind] = reasons.get(kind, 0) + 1
                        first_reject = first_reject or row
                        n_rej += 1
                        continue
                    ids = np.empty(len(strings), dtype=np.uint32)
                    for k, s in enumerate(strings):
                        i = word_ids.get(s)
                        if i is None:
                            if "\t" in s or "\n" in s:
                                raise InputError(f"the tokenizer pattern produced a token with a tab or "
                                                 f"newline ({s!r}); use a pattern that cannot")
                            i = word_ids[s] = len(words)
                            words.append(s)
                        ids[k] = i
                    buffer.append(ids)
                    buffered += len(ids)
                    new_offsets.append(n_tokens)
                    n_tokens += len(ids)
                    n_docs += 1
                    n_doc += 1
                    n_tok += len(ids)
                    bar.update()
                    if buffered >= _FLUSH_TOKENS:
                        tok_file.write(np.concatenate(buffer).astype("<u4").tobytes())
                        buffer, buffered = [], 0
                summaries.append(InputSummary(str(path), sha, "added", n_rec, n_doc, n_tok, n_rej))
                manifest_inputs.append({"path": str(path), "sha256": sha, "format": input_format or
                                        detect_format(path), "records": n_rec, "documents": n_doc,
                                        "tokens": n_tok, "rejects": n_rej,
                                        "fields": dataclasses.asdict(fields),
                                        "ingested_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")})
            if buffer:
                tok_file.write(np.concatenate(buffer).astype("<u4").tobytes())
        bar.close()
        reject_log.close()
        con.commit()
        con.close()
        if n_docs == 0:
            n_rejected = sum(reasons.values())
            raise InputError("empty corpus: no usable records in " + ", ".join(str(p) for p in inputs)
                             + (f" ({n_rejected} rejected; first: {first_reject.reason})" if first_reject else ""))
        offsets = np.concatenate([offsets_old[:-1], np.asarray(new_offsets, dtype=np.int64),
                                  np.asarray([n_tokens], dtype=np.int64)]).astype("<i8")
        offsets.tofile(store / OFFSETS_FILE)
        tokens = (np.memmap(store / TOKENS_FILE, dtype="<u4", mode="r") if n_tokens
                  else np.zeros(0, dtype=np.uint32))
        counts = np.bincount(tokens, minlength=len(words)).astype(np.int64)
        _write_vocab(store / VOCAB_FILE, words, counts)
        _write_postings(store, tokens, counts)
        del tokens
        added_hashes = [i["sha256"] for i in manifest_inputs]
        manifest = {
            "format_version": FORMAT_VERSION,
            "tokenizer": settings.to_dict(),
            "tokenizer_engine": ENGINE,
            "inputs": manifest_inputs,
            "n_documents": n_docs, "n_tokens": n_tokens, "n_types": len(words),
            "corpus_hash": hashlib.sha256(json.dumps([settings.to_dict(), added_hashes]).encode()).hexdigest(),
            "versions": package_versions(),
            "written_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"),
        }
        write_atomic(store / MANIFEST_FILE, json.dumps(manifest, indent=1))
        # the commit point: one atomic rename makes the new store current
        write_atomic(ws_path / CURRENT_FILE, store.name + "\n")
    except BaseException:
        shutil.rmtree(store, ignore_errors=True)
        raise
    _recover(ws_path)
    rejects_file = None
    new_rejects = store / "rejects.new.jsonl"
    if reasons:
        rejects_file = ws_path / REJECTS_FILE
        with open(rejects_file, "a", encoding="utf-8") as out, open(new_rejects, encoding="utf-8") as f:
            shutil.copyfileobj(f, out)
    new_rejects.unlink()
    return IngestSummary(str(ws_path), summaries, n_docs, n_tokens, len(words),
                         str(rejects_file) if rejects_file else None, reasons)


def _reason_kind(reason: str) -> str:
    """A reject's reason without the details that differ from record to record."""
    for prefix in ("duplicate id", "malformed JSON", "not valid UTF-8", "missing time"):
        if reason.startswith(prefix):
            return prefix
    if reason.startswith("field "):
        return reason.split(":")[0] + " unreadable"
    return reason.split(" (")[0]


def _write_vocab(path: Path, words: list[str], counts: np.ndarray) -> None:
    order = np.lexsort((np.arange(len(words)), -counts))
    lines = ["id\tword\tcount\n"] + [f"{i}\t{words[i]}\t{counts[i]}\n" for i in order]
    write_atomic(path, "".join(lines))


def _write_postings(store: Path, tokens: np.ndarray, counts: np.ndarray) -> None:
    ptr = np.zeros(len(counts) + 1, dtype="<i8")
    np.cumsum(counts, out=ptr[1:])
    ptr.tofile(store / POSTINGS_PTR_FILE)
    # a stable sort by word keeps each word's positions ascending
    np.argsort(tokens, kind="stable").astype("<i8").tofile(store / POSTINGS_POS_FILE)
