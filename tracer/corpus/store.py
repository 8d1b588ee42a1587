"""The store step of ingest: write a new store generation and make it current.

A generation is a folder ``store-NNNN`` built whole beside the current one: the
previous documents and tokens are copied in, the new ones appended, then the
offsets, vocabulary, postings, rejects and manifest are written and flushed to
disk, and one atomic rename of ``CURRENT`` (followed by a flush of the folder)
makes it the corpus. The writer holds the workspace lock throughout, so a
generation that ``CURRENT`` does not name, found while holding the lock, was
left by a writer that died; only such folders are removed, and never because
``CURRENT`` is missing or unreadable.

For tests, the environment variable ``TRACER_TEST_KILL_AT`` set to the name of
one of the points in :data:`KILL_POINTS` makes the process kill itself there
(signal 9), so crash safety can be checked at fixed moments.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import shutil
import signal
import socket
import sqlite3
from pathlib import Path

import numpy as np

from tracer.errors import WorkspaceError
from tracer.files import fsync_tree, write_atomic
from tracer.corpus.encode import TokenEncoder
from tracer.corpus.lock import holds_lock
from tracer.corpus.readers import Reject
from tracer.corpus.tokenize import TokenizerSettings
from tracer.corpus.workspace import (CURRENT_FILE, DB_FILE, MANIFEST_FILE, OFFSETS_FILE, POSTINGS_POS_FILE,
                                     POSTINGS_PTR_FILE, REJECTS_FILE, TOKENS_FILE, VOCAB_FILE, Workspace,
                                     read_current, store_folders)

WRITER_FILE = "writer.json"
KILL_POINTS = ("generation-made", "tokenizing", "documents-written", "manifest-written", "switched", "cleaned")

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

_INSERT = ("INSERT INTO documents (doc_index, doc_id, source, time, year, time_value, title, text, n_tokens, "
           "token_start, input_file, input_line, fields) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)")
# ids asked for in one query: below SQLite's oldest limit of bound parameters (999)
_IDS_PER_QUERY = 900


def checkpoint(point: str) -> None:
    """Kill this process here if the test hook asks for this point (see the module docstring)."""
    if os.environ.get("TRACER_TEST_KILL_AT") == point:
        os.kill(os.getpid(), signal.SIGKILL)


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _writer_alive(folder: Path) -> bool:
    """Whether the process that made a generation runs still (on this host, and is not us)."""
    try:
        w = json.loads((folder / WRITER_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    if w.get("host") != socket.gethostname() or w.get("pid") == os.getpid():
        return False
    return isinstance(w.get("pid"), int) and _pid_alive(w["pid"])


def remove_abandoned(ws_path: Path) -> str | None:
    """Remove generations left by dead writers; return the current store's name (None if no corpus yet).

    Must be called with the workspace lock held. A folder is removed only if
    the process that made it is not running and either ``CURRENT`` is valid and
    names another folder, or the folder still has its writer's mark
    (``writer.json``, removed at the switch), so it never was current. Without
    ``CURRENT``, a folder that was current once is an error, not garbage.
    """
    if not holds_lock(ws_path):
        raise RuntimeError("remove_abandoned needs the workspace lock")
    current = read_current(ws_path)  # raises on an invalid CURRENT: nothing is removed then
    if current is None:
        complete = [p.name for p in store_folders(ws_path)
                    if (p / MANIFEST_FILE).is_file() and not (p / WRITER_FILE).exists()]
        if complete:
            raise WorkspaceError(
                f"workspace {ws_path} has store folders ({', '.join(complete)}) but no {CURRENT_FILE} file; "
                f"write the name of the one that holds the corpus into {ws_path / CURRENT_FILE} (usually the "
                f"newest), check with  tracer verify -w {ws_path}, or use another workspace")
    for p in store_folders(ws_path):
        if p.name != current and not _writer_alive(p):
            shutil.rmtree(p)
    (ws_path / (CURRENT_FILE + ".tmp")).unlink(missing_ok=True)
    return current


class StoreWriter:
    """A new store generation being written; :meth:`commit` makes it current, :meth:`abort` removes it.

    Parameters
    ----------
    ws_path : Path
        The workspace (its lock must be held).
    old : Workspace or None
        The current corpus to append to, or None for a new (or replaced) corpus.
    settings : TokenizerSettings
    previous : str, optional
        Name of the current store, removed once this one is current.
    """

    def __init__(self, ws_path: Path, old: Workspace | None, settings: TokenizerSettings,
                 previous: str | None = None):
        self.ws_path = ws_path
        self.previous = ws_path / previous if previous else None
        gen = 1 + max([int(p.name.split("-")[1]) for p in store_folders(ws_path)] or [0])
        self.store = ws_path / f"store-{gen:04d}"
        self.store.mkdir()
        write_atomic(self.store / WRITER_FILE, json.dumps({"pid": os.getpid(), "host": socket.gethostname()}))
        checkpoint("generation-made")
        self._copy_previous(old)
        self.con = sqlite3.connect(self.store / DB_FILE)
        self.con.executescript(_SCHEMA)
        self._tokens = open(self.store / TOKENS_FILE, "ab")
        # rejects go to a file as they come, so a corpus full of bad records does not fill memory
        self._rejects = open(self.store / REJECTS_FILE, "a", encoding="utf-8")
        words = list(old.vocab.words) if old is not None else []
        self.settings = settings
        self.encoder = TokenEncoder(words, self._tokens)
        self.n_docs = old.n_documents if old is not None else 0
        self.n_tokens = old.n_tokens if old is not None else 0
        self._offsets_old = old.doc_offsets if old is not None else np.zeros(1, dtype=np.int64)
        self._new_offsets: list[np.ndarray] = []

    def _copy_previous(self, old: Workspace | None) -> None:
        if old is None:
            (self.store / TOKENS_FILE).write_bytes(b"")
            return
        # the sqlite backup API gives a consistent copy even of an open database
        with sqlite3.connect(old.store / DB_FILE) as src, sqlite3.connect(self.store / DB_FILE) as dst:
            src.backup(dst)
        shutil.copyfile(old.store / TOKENS_FILE, self.store / TOKENS_FILE)
        # the rejects of earlier ingests travel with the corpus; before they did, they sat beside the stores
        earlier = old.store / REJECTS_FILE
        if not earlier.is_file():
            earlier = self.ws_path / REJECTS_FILE
        if earlier.is_file():
            shutil.copyfile(earlier, self.store / REJECTS_FILE)

    def duplicates(self, doc_ids: list[str]) -> list[str | None]:
        """For each id in order: why its document cannot be stored (the id is taken: by the corpus
        so far or by an earlier one of these), or None."""
        taken = set()
        for k in range(0, len(doc_ids), _IDS_PER_QUERY):
            part = doc_ids[k:k + _IDS_PER_QUERY]
            taken.update(r[0] for r in self.con.execute(
                f"SELECT doc_id FROM documents WHERE doc_id IN ({','.join('?' * len(part))})", part))
        out = []
        for d in doc_ids:
            out.append(f"duplicate id {d!r}" if d in taken else None)
            taken.add(d)
        return out

    def add_rows(self, rows: list[tuple], lengths: np.ndarray, words: list[str], local: np.ndarray, *,
                 whole: bool = False) -> None:
        """Store documents (no id taken: see :meth:`duplicates`) and their tokens.

        Parameters
        ----------
        rows : list of tuple, length n_docs
            Their rows (columns :data:`tracer.corpus.prepare.ROW_FIELDS`).
        lengths : numpy.ndarray of int64, shape (n_docs,)
            Tokens of each.
        words : list of str
            Distinct words the tokens index.
        local : numpy.ndarray of uint32, shape (lengths.sum(),)
            Their tokens in order, as indices into ``words``.
        whole : bool
            These are all the rows ``words`` was made from (:meth:`TokenEncoder.append`'s ``in_order``).
        """
        starts = (self.n_tokens + np.cumsum(lengths) - lengths).astype(np.int64)
        self.con.executemany(_INSERT, ((i, *r[:7], n, t, *r[7:]) for i, r, n, t in zip(
            range(self.n_docs, self.n_docs + len(rows)), rows, lengths.tolist(), starts.tolist())))
        self._new_offsets.append(starts)
        self.n_tokens += self.encoder.append(words, local, in_order=whole)
        self.n_docs += len(rows)

    def reject(self, rej: Reject) -> None:
        self._rejects.write(json.dumps(rej.to_dict(), ensure_ascii=False) + "\n")

    @property
    def words(self) -> list[str]:
        return self.encoder.words

    def _close_files(self) -> None:
        for f in (self._tokens, self._rejects):
            if not f.closed:
                f.close()

    def finish(self, manifest: dict) -> None:
        """Write offsets, vocabulary, postings and the manifest, and flush the generation to disk."""
        self.encoder.flush()
        self._close_files()
        self.con.commit()
        self.con.close()
        checkpoint("documents-written")
        offsets = np.concatenate([self._offsets_old[:-1], *self._new_offsets,
                                  np.asarray([self.n_tokens], dtype=np.int64)]).astype("<i8")
        offsets.tofile(self.store / OFFSETS_FILE)
        tokens = (np.memmap(self.store / TOKENS_FILE, dtype="<u4", mode="r") if self.n_tokens
                  else np.zeros(0, dtype=np.uint32))
        counts = np.bincount(tokens, minlength=len(self.words)).astype(np.int64)
        write_vocab(self.store / VOCAB_FILE, self.words, counts)
        write_postings(self.store, tokens, counts)
        del tokens
        if (self.store / REJECTS_FILE).stat().st_size == 0:
            (self.store / REJECTS_FILE).unlink()
        manifest = dict(manifest, written_at=dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"))
        write_atomic(self.store / MANIFEST_FILE, json.dumps(manifest, indent=1))
        fsync_tree(self.store)
        checkpoint("manifest-written")

    def commit(self) -> None:
        """Make this generation current (the commit point), then remove the one it replaces."""
        write_atomic(self.ws_path / CURRENT_FILE, self.store.name + "\n")
        checkpoint("switched")
        # without its writer's mark, a folder is one that was current once (see remove_abandoned)
        (self.store / WRITER_FILE).unlink()
        if self.previous is not None:
            shutil.rmtree(self.previous, ignore_errors=True)
        checkpoint("cleaned")

    def abort(self) -> None:
        """Remove the unfinished generation (the current corpus is untouched)."""
        self._close_files()
        try:
            self.con.close()
        except sqlite3.Error:
            pass
        shutil.rmtree(self.store, ignore_errors=True)


def write_vocab(path: Path, words: list[str], counts: np.ndarray) -> None:
    order = np.lexsort((np.arange(len(words)), -counts))
    lines = ["id\tword\tcount\n"] + [f"{i}\t{words[i]}\t{counts[i]}\n" for i in order]
    write_atomic(path, "".join(lines))


def write_postings(store: Path, tokens: np.ndarray, counts: np.ndarray) -> None:
    ptr = np.zeros(len(counts) + 1, dtype="<i8")
    np.cumsum(counts, out=ptr[1:])
    ptr.tofile(store / POSTINGS_PTR_FILE)
    postings_positions(tokens).tofile(store / POSTINGS_POS_FILE)


def postings_positions(tokens: np.ndarray, block: int = 1 << 22) -> np.ndarray:
    """Every position of the corpus, ordered by its word id and, within a word, ascending.

    Parameters
    ----------
    tokens : numpy.ndarray of uint32, shape (n_tokens,)
    block : int
        Positions added to the keys this many at a time (no second array of the corpus's length).

    Returns
    -------
    numpy.ndarray of little-endian int64, shape (n_tokens,)
        What a stable argsort of ``tokens`` gives. Below 2**32 tokens, each position is packed
        with its word into one 64-bit key (word in the high half), so the keys are distinct and an
        unstable sort of them (several times faster than a stable argsort) gives the same order.
    """
    n = len(tokens)
    if n >= 1 << 32:
        return np.argsort(tokens, kind="stable").astype("<i8")
    keys = tokens.astype(np.uint64)
    keys <<= np.uint64(32)
    for start in range(0, n, block):
        keys[start:start + block] |= np.arange(start, min(start + block, n), dtype=np.uint64)
    keys.sort()
    keys &= np.uint64(0xFFFFFFFF)
    return keys.view(np.int64).astype("<i8", copy=False)
