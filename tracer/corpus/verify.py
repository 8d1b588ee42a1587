"""Check a workspace's store: the pointer, the manifest, the arrays against the documents table, the postings.

:func:`verify_workspace` reads everything and changes nothing. Each check adds
one line to the report: a problem (the workspace cannot be trusted as it is)
or a note (harmless, such as a folder left by an interrupted ingest, which the
next ingest removes).
"""

from __future__ import annotations

import dataclasses
import json
import os
import sqlite3
from pathlib import Path

import numpy as np

from tracer.errors import WorkspaceError
from tracer.corpus.ingest import corpus_hash
from tracer.corpus.lock import is_locked, lock_holder
from tracer.corpus.workspace import (DB_FILE, MANIFEST_FILE, OFFSETS_FILE, POSTINGS_POS_FILE, POSTINGS_PTR_FILE,
                                     TOKENS_FILE, VOCAB_FILE, read_current, store_folders)


@dataclasses.dataclass
class VerifyReport:
    """What :func:`verify_workspace` found: ``checked`` (passed), ``problems`` and ``notes``, one line each."""

    workspace: str
    store: str | None = None
    checked: list[str] = dataclasses.field(default_factory=list)
    problems: list[str] = dataclasses.field(default_factory=list)
    notes: list[str] = dataclasses.field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    def check(self, passed: bool, what: str, wrong: str) -> bool:
        (self.checked if passed else self.problems).append(what if passed else wrong)
        return passed


def _array(path: Path, dtype: str, report: VerifyReport) -> np.ndarray | None:
    if not path.is_file():
        report.problems.append(f"{path.name} is missing")
        return None
    size = path.stat().st_size
    if size % np.dtype(dtype).itemsize:
        report.problems.append(f"{path.name} has {size} bytes, not a whole number of {dtype} values")
        return None
    return np.memmap(path, dtype=dtype, mode="r") if size else np.zeros(0, dtype=dtype)


def verify_workspace(workspace: str | os.PathLike) -> VerifyReport:
    """Check the workspace and return what is right and wrong with it (never raises for damage)."""
    ws_path = Path(workspace)
    report = VerifyReport(str(ws_path))
    if is_locked(ws_path):
        report.notes.append(f"in use by {lock_holder(ws_path) or 'another process'} while checked: the "
                            "store may change meanwhile")
    try:
        name = read_current(ws_path)
    except WorkspaceError as e:
        report.problems.append(str(e))
        return report
    if not report.check(name is not None, "CURRENT names a store folder",
                        f"no CURRENT file in {ws_path}: no corpus here, or its pointer was removed"):
        return report
    report.store = name
    for p in store_folders(ws_path):
        if p.name != name:
            report.notes.append(f"{p.name} is not the current store (left by an interrupted ingest; the next "
                                "ingest removes it)")
    store = ws_path / name
    try:
        manifest = json.loads((store / MANIFEST_FILE).read_text(encoding="utf-8"))
        n_docs, n_tokens, n_types = (int(manifest[k]) for k in ("n_documents", "n_tokens", "n_types"))
    except (OSError, ValueError, KeyError, TypeError) as e:
        report.problems.append(f"the manifest of {name} cannot be read ({type(e).__name__}: {e})")
        return report
    report.checked.append(f"manifest: {n_docs} documents, {n_tokens} tokens, {n_types} word types")
    if all("content_sha256" in i for i in manifest.get("inputs", [])):
        report.check(corpus_hash(manifest.get("tokenizer"), manifest["inputs"]) == manifest.get("corpus_hash"),
                     "corpus hash matches the manifest's inputs", "the corpus hash does not match the manifest's "
                     "inputs (the manifest was edited)")
    _check_documents(store, n_docs, n_tokens, report)
    _check_vocab_and_postings(store, n_tokens, n_types, report)
    return report


def _check_documents(store: Path, n_docs: int, n_tokens: int, report: VerifyReport) -> None:
    try:
        with sqlite3.connect(f"file:{store / DB_FILE}?mode=ro", uri=True) as con:
            rows = np.asarray(con.execute("SELECT doc_index, n_tokens, token_start FROM documents "
                                          "ORDER BY doc_index").fetchall(), dtype=np.int64).reshape(-1, 3)
    except sqlite3.Error as e:
        report.problems.append(f"the documents table cannot be read ({e})")
        return
    report.check(len(rows) == n_docs and np.array_equal(rows[:, 0], np.arange(len(rows))),
                 f"documents table: {len(rows)} rows numbered 0..{len(rows) - 1}",
                 f"the documents table has {len(rows)} rows (manifest: {n_docs}) or gaps in its numbering")
    offsets = _array(store / OFFSETS_FILE, "<i8", report)
    if offsets is not None and report.check(
            len(offsets) == len(rows) + 1, f"{OFFSETS_FILE}: {len(offsets)} values",
            f"{OFFSETS_FILE} has {len(offsets)} values for {len(rows)} documents (should be one more)"):
        report.check(offsets[0] == 0 and offsets[-1] == n_tokens and np.array_equal(np.diff(offsets), rows[:, 1])
                     and np.array_equal(offsets[:-1], rows[:, 2]),
                     "document offsets agree with the token counts and starts of the documents table",
                     "document offsets disagree with the documents table (token counts or starts)")
    tokens = _array(store / TOKENS_FILE, "<u4", report)
    if tokens is not None:
        report.check(len(tokens) == n_tokens, f"{TOKENS_FILE}: {len(tokens)} tokens",
                     f"{TOKENS_FILE} holds {len(tokens)} tokens, the manifest says {n_tokens}")


def _check_vocab_and_postings(store: Path, n_tokens: int, n_types: int, report: VerifyReport) -> None:
    tokens = _array(store / TOKENS_FILE, "<u4", report)
    try:
        with open(store / VOCAB_FILE, encoding="utf-8") as f:
            next(f)
            rows = [line.rstrip("\n").split("\t") for line in f]
        ids = np.asarray([int(r[0]) for r in rows], dtype=np.int64)
        counts = np.zeros(len(rows), dtype=np.int64)
        counts[ids] = [int(r[2]) for r in rows]
    except (OSError, StopIteration, ValueError, IndexError) as e:
        report.problems.append(f"{VOCAB_FILE} cannot be read ({type(e).__name__}: {e})")
        return
    if not report.check(len(rows) == n_types and np.array_equal(np.sort(ids), np.arange(n_types)),
                        f"{VOCAB_FILE}: {n_types} words with ids 0..{n_types - 1}",
                        f"{VOCAB_FILE} has {len(rows)} rows or ids that are not 0..{n_types - 1} once each"):
        return
    if tokens is None or len(tokens) != n_tokens:
        return
    if not report.check(not len(tokens) or int(tokens.max()) < n_types, "every token id is in the vocabulary",
                        f"{TOKENS_FILE} holds ids beyond the vocabulary of {n_types} words"):
        return
    report.check(np.array_equal(np.bincount(tokens, minlength=n_types), counts),
                 "vocabulary counts equal the token counts", f"the counts in {VOCAB_FILE} differ from the tokens")
    ptr = _array(store / POSTINGS_PTR_FILE, "<i8", report)
    pos = _array(store / POSTINGS_POS_FILE, "<i8", report)
    if ptr is None or pos is None:
        return
    expected_ptr = np.concatenate([[0], np.cumsum(counts)])
    if not report.check(np.array_equal(ptr, expected_ptr) and len(pos) == n_tokens,
                        "postings pointers match the vocabulary counts",
                        "the postings pointers or the number of postings do not match the vocabulary"):
        return
    word_of = np.repeat(np.arange(n_types), counts)
    in_range = not len(pos) or (pos.min() >= 0 and pos.max() < n_tokens)
    ordered = in_range and np.array_equal(tokens[pos], word_of) and bool(
        np.all((np.diff(pos) > 0) | (np.diff(word_of) != 0)))
    report.check(ordered, "postings list each word's positions, ascending",
                 "the postings do not list each word's own positions in ascending order")
