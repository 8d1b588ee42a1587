"""Ingest corpus files into a workspace, streaming, atomically and idempotently.

Four steps, one module each: read (:mod:`tracer.corpus.readers`), validate
(:mod:`tracer.corpus.validate`), tokenize (:mod:`tracer.corpus.encode`) and
store (:mod:`tracer.corpus.store`); this module runs them under the workspace
lock. A new store generation is built beside the current one and made current
by one atomic rename of the ``CURRENT`` pointer; an interrupted ingest leaves
the workspace as it was. An input whose content hash was ingested before (with
the same field mapping) is skipped, so running the same command twice changes
nothing; a new file is appended; ``replace=True`` rebuilds the corpus from the
given inputs alone.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
import os
from pathlib import Path
from typing import Iterable

import numpy as np
from tqdm.auto import tqdm

from tracer.errors import InputError, WorkspaceError
from tracer.versions import package_versions
from tracer.corpus.lock import workspace_lock
from tracer.corpus.prepare import PrepareSettings, Prepared
from tracer.corpus.prepare_pool import PreparePool
from tracer.corpus.readers import ReadLimits, Reject, detect_format, read_items, shown_path, txt_entries
from tracer.corpus.store import StoreWriter, remove_abandoned
from tracer.corpus.tokenize import ENGINE, TokenizerSettings
from tracer.corpus.validate import FieldMap, FieldUse, reason_kind
from tracer.corpus.workspace import Workspace, mapping_text

__all__ = ["FieldMap", "IngestSummary", "InputSummary", "corpus_hash", "hash_input", "ingest"]

FORMAT_VERSION = 1


@dataclasses.dataclass(frozen=True)
class InputSummary:
    path: str
    sha256: str
    status: str  # "added" or "already ingested"
    records: int
    documents: int
    tokens: int
    rejects: int
    fields_found: str = ""
    warnings: tuple[str, ...] = ()


@dataclasses.dataclass(frozen=True)
class IngestSummary:
    workspace: str
    inputs: list[InputSummary]
    documents_total: int
    tokens_total: int
    vocabulary_total: int
    rejects_file: str | None
    reject_reasons: dict[str, int]
    replaced: bool = False

    @property
    def documents_added(self) -> int:
        return sum(i.documents for i in self.inputs)

    @property
    def rejects(self) -> int:
        return sum(i.rejects for i in self.inputs)

    @property
    def warnings(self) -> list[str]:
        """Fields absent in most records of an input, with what was used instead (one line each)."""
        out = []
        for i in self.inputs:
            if i.warnings:
                name = Path(i.path).name
                out += [f"{name}: {w}" for w in i.warnings] + [f"{name}: fields found (records): {i.fields_found}"]
        return out


def hash_input(path: Path) -> str:
    """sha256 of a file, or of the .txt files a folder's reader reads (relative names and contents, sorted).

    Entries the reader skips (links outside the folder, broken links, special files)
    are not read here either, so a link to a device or to a file that cannot be read
    is one reject, not an error.
    """
    h = hashlib.sha256()
    # a folder: the files its reader reads, in the order of their paths (as before links were followed)
    files = ([(path, None)] if path.is_file() else
             sorted((rel, rel) for rel, problem in txt_entries(path) if problem is None))
    for p, rel in files:
        if rel is not None:
            h.update(rel.as_posix().encode("utf-8", "surrogateescape") + b"\0")
            p = path / rel
        try:
            with open(p, "rb") as f:
                for block in iter(lambda: f.read(1 << 20), b""):
                    h.update(block)
        except OSError as e:  # the reader rejects it; the hash notes it
            h.update(f"\0unreadable: {e.strerror}\0".encode())
    return h.hexdigest()


def corpus_hash(tokenizer: dict, inputs: list[dict]) -> str:
    """The corpus's identity: tokenizer settings, and per input its bytes, field mapping and stored documents.

    The documents' hash (``content_sha256``) covers each stored document's id,
    source, time, title and text, so two workspaces made from one file with
    different mappings hash differently.
    """
    parts = [[i["sha256"], i.get("fields"), i.get("default_source"), i.get("content_sha256")] for i in inputs]
    return hashlib.sha256(json.dumps([tokenizer, parts], sort_keys=True).encode()).hexdigest()


@dataclasses.dataclass
class _Run:
    """What one ingest carries from input to input."""

    writer: StoreWriter
    strict: bool
    limits: ReadLimits = ReadLimits()
    pool: PreparePool = dataclasses.field(default_factory=lambda: PreparePool(1))
    reasons: dict[str, int] = dataclasses.field(default_factory=dict)
    first_reject: Reject | None = None

    def reject(self, rej: Reject) -> None:
        if self.strict:
            raise InputError(f"{rej.file}, line {rej.line}: {rej.reason} "
                             "(--strict stops at the first rejected record)")
        self.writer.reject(rej)
        kind = reason_kind(rej.reason)
        self.reasons[kind] = self.reasons.get(kind, 0) + 1
        self.first_reject = self.first_reject or rej


def ingest(workspace: str | os.PathLike, inputs: Iterable[str | os.PathLike], *,
           fields: FieldMap = FieldMap(), tokenizer: TokenizerSettings | None = None,
           input_format: str | None = None, default_source: str | None = None,
           strict: bool = False, progress: bool = False, replace: bool = False,
           wait: bool = True, command: str = "", limits: ReadLimits = ReadLimits(),
           jobs: int | None = None) -> IngestSummary:
    """Read corpus files into the workspace (created if needed), holding its write lock.

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
    replace : bool
        Build the corpus from these inputs alone, dropping what the workspace held
        (needed to re-read an input with another field mapping or tokenizer).
    wait : bool
        If another process writes to the workspace, wait for it (saying so on
        standard error); with False fail at once with :class:`tracer.errors.WorkspaceBusy`.
    command : str
        What to call this writer in the lock file.
    limits : ReadLimits
        Bounds on one record (size, line length, nesting, gzip ratio); beyond them a reject.
    jobs : int, optional
        Worker processes that parse, validate and tokenize the records (default: the cores
        available; 1: all in this process). The stored corpus is the same for any number
        (:mod:`tracer.corpus.prepare_pool`).

    Returns
    -------
    IngestSummary
    """
    ws_path = Path(workspace)
    inputs = [Path(p) for p in inputs]
    if jobs is None:
        jobs = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    if jobs < 1:
        raise InputError(f"jobs must be at least 1; got {jobs}")
    if not inputs:
        raise InputError("no input files given")
    for p in inputs:
        if not p.exists():
            raise InputError(f"{shown_path(p)}: no such file or folder")
        if not (p.is_file() or p.is_dir()):
            # a pipe or device has no content to hash before reading, and may never end
            raise InputError(f"{shown_path(p)}: not a regular file or folder (a pipe or a device?); "
                             "save its content to a file and ingest that")
        if input_format is None:
            detect_format(p)
    with workspace_lock(ws_path, command=command or f"ingest {' '.join(map(str, inputs))}", wait=wait):
        return _ingest_locked(ws_path, inputs, fields, tokenizer, input_format, default_source, strict,
                              progress, replace, limits, jobs)


def _settings(ws_path: Path, current: Workspace | None, tokenizer: TokenizerSettings | None,
              replace: bool) -> TokenizerSettings:
    if current is None:
        return tokenizer or TokenizerSettings()
    settings = current.tokenizer_settings
    if tokenizer is not None and not settings.matches(tokenizer):
        if replace:
            return tokenizer
        raise WorkspaceError(
            f"workspace {ws_path} was made with tokenizer settings {settings.to_dict()}; "
            f"these inputs ask for {tokenizer.to_dict()}. Use a new workspace for other settings, "
            f"or --replace to rebuild this one from the given inputs"
        )
    return settings


def _check_mapping(ws_path: Path, known: list[dict], inputs: list[Path], hashes: list[str],
                   fields: FieldMap, default_source: str | None) -> None:
    """An input ingested before may only come again with the mapping it was read with."""
    by_hash = {i["sha256"]: i for i in known}
    asked = {"path": "", "fields": fields.to_dict(), "default_source": default_source}
    for p, h in zip(inputs, hashes):
        prev = by_hash.get(h)
        if prev is not None and (prev.get("fields") != asked["fields"]
                                 or prev.get("default_source") != default_source):
            raise WorkspaceError(
                f"{shown_path(p)} is already in workspace {shown_path(ws_path)}, read with the fields "
                f"{mapping_text(prev).split(': ', 1)[1]}; this time the fields asked for are "
                f"{mapping_text(asked).split(': ', 1)[1]}. To read it again with the new fields, add --replace, "
                f"which rebuilds the corpus from the inputs given now (and drops the others)")


def _ingest_locked(ws_path: Path, inputs: list[Path], fields: FieldMap, tokenizer: TokenizerSettings | None,
                   input_format: str | None, default_source: str | None, strict: bool, progress: bool,
                   replace: bool, limits: ReadLimits, jobs: int = 1) -> IngestSummary:
    current_name = remove_abandoned(ws_path)
    current = Workspace(ws_path) if current_name else None
    settings = _settings(ws_path, current, tokenizer, replace)
    old = None if replace else current
    manifest_inputs = list(old.manifest["inputs"]) if old is not None else []
    input_hashes = [hash_input(p) for p in inputs]
    _check_mapping(ws_path, manifest_inputs, inputs, input_hashes, fields, default_source)
    known = {i["sha256"] for i in manifest_inputs}
    if old is not None and all(h in known for h in input_hashes):
        # nothing new: leave the store untouched
        return IngestSummary(shown_path(ws_path), [InputSummary(shown_path(p), h, "already ingested", 0, 0, 0, 0)
                                            for p, h in zip(inputs, input_hashes)],
                             old.n_documents, old.n_tokens, len(old.vocab), None, {})
    writer = StoreWriter(ws_path, old, settings, previous=current_name)
    committed = False
    try:
        run = _Run(writer, strict, limits, PreparePool(jobs))
        summaries = []
        with run.pool, tqdm(desc="ingest", unit=" docs", disable=not progress, leave=False) as bar:
            for path, sha in zip(inputs, input_hashes):
                if sha in known:
                    summaries.append(InputSummary(shown_path(path), sha, "already ingested", 0, 0, 0, 0))
                    continue
                known.add(sha)
                summary, entry = _read_input(run, path, sha, input_format, fields, default_source, bar)
                summaries.append(summary)
                manifest_inputs.append(entry)
        if writer.n_docs == 0:
            first = run.first_reject
            raise InputError("empty corpus: no usable records in " + ", ".join(shown_path(p) for p in inputs)
                             + (f" ({sum(run.reasons.values())} rejected; first: {first.reason})" if first else ""))
        writer.finish(_manifest(settings, manifest_inputs, writer))
        writer.commit()
        committed = True
    finally:
        if not committed:
            writer.abort()
    rejects_file = writer.store / "rejects.jsonl"
    return IngestSummary(shown_path(ws_path), summaries, writer.n_docs, writer.n_tokens, len(writer.words),
                         shown_path(rejects_file) if run.reasons else None, run.reasons, replaced=replace)


def _read_input(run: _Run, path: Path, sha: str, input_format: str | None, fields: FieldMap,
                default_source: str | None, bar) -> tuple[InputSummary, dict]:
    """Read, validate, tokenize and store the records of one input; its summary and manifest entry."""
    name = shown_path(path)
    use = FieldUse(fields, default_source, name)
    content = hashlib.sha256()
    n_rec = n_doc = n_tok = n_rej = 0
    settings = PrepareSettings(run.writer.settings, fields, default_source, run.limits, name)
    for chunk in run.pool.prepared(read_items(path, input_format, run.limits), settings):
        use.merge(chunk.records, chunk.found)
        stored = _checked_rows(run, chunk)
        n_rec += len(chunk.outcomes)
        n_rej += len(chunk.outcomes) - len(stored)
        if not stored:
            continue
        rows, lengths, local = chunk.rows, chunk.lengths, chunk.local
        if len(stored) < len(rows):
            keep = np.zeros(len(rows), dtype=bool)
            keep[stored] = True
            rows, lengths, local = [rows[k] for k in stored], lengths[keep], local[np.repeat(keep, lengths)]
            lines, ends = memoryview(chunk.content), chunk.content_ends
            for k in stored:
                content.update(lines[ends[k - 1] if k else 0:ends[k]])
        else:
            content.update(chunk.content)
        run.writer.add_rows(rows, lengths, chunk.words, local, whole=len(rows) == len(chunk.rows))
        n_doc += len(rows)
        n_tok += int(lengths.sum())
        bar.update(len(rows))
    warnings = tuple(use.warnings())
    entry = {"path": name, "sha256": sha, "format": input_format or detect_format(path),
             "records": n_rec, "documents": n_doc, "tokens": n_tok, "rejects": n_rej,
             "fields": fields.to_dict(), "default_source": default_source, "fields_found": dict(use.found),
             "field_warnings": list(warnings), "content_sha256": content.hexdigest(),
             "ingested_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")}
    return InputSummary(name, sha, "added", n_rec, n_doc, n_tok, n_rej, use.fields_found(), warnings), entry


def _checked_rows(run: _Run, chunk: Prepared) -> list[int]:
    """The rows of a chunk to store; every other item is rejected here, in order, as one process
    storing record by record would reject it (``--strict`` stops at the first)."""
    taken = run.writer.duplicates([r[0] for r in chunk.rows])
    stored, k = [], 0
    for out in chunk.outcomes:
        if out is None:
            if taken[k] is None:
                if k in chunk.bad_tokens:
                    raise InputError(f"the tokenizer pattern produced a token with a tab or newline "
                                     f"({chunk.bad_tokens[k]!r}); use a pattern that cannot")
                stored.append(k)
            else:
                out = Reject(*Prepared.row_place(chunk.rows[k]), taken[k], "")
            k += 1
        if out is not None:
            run.reject(out)
    return stored


def _manifest(settings: TokenizerSettings, inputs: list[dict], writer: StoreWriter) -> dict:
    return {
        "format_version": FORMAT_VERSION,
        "tokenizer": settings.to_dict(),
        "tokenizer_engine": ENGINE,
        "inputs": inputs,
        "n_documents": writer.n_docs, "n_tokens": writer.n_tokens, "n_types": len(writer.words),
        "corpus_hash": corpus_hash(settings.to_dict(), inputs),
        "versions": package_versions(),
    }
