"""The workspace: one folder per corpus, read through :class:`Workspace`.

Layout (the store is written whole into a new generation folder and made
current by one atomic rename of the ``CURRENT`` pointer, so an interrupted
ingest leaves the previous corpus in place)::

    WORKSPACE/
      CURRENT                 name of the current store folder, e.g. "store-0002"
      store-0002/
        corpus.sqlite         documents: index, id, source, time, title, text, tokens, token start
        tokens.u32            every token as a full-vocabulary id (little-endian uint32)
        doc_offsets.i64       token start of each document, then the total (n_docs + 1 values)
        vocab.tsv             id, word, count; rows sorted by count, most frequent first
        postings_ptr.i64      word id -> start in postings_pos (n_words + 1 values)
        postings_pos.i64      token positions grouped by word, ascending within a word
        manifest.json         tokenizer settings, inputs and their hashes, versions, corpus hash
        rejects.jsonl         every record that ingest skipped so far, with file, line and reason
      LOCK                    the write lock (see tracer.corpus.lock)
      models/                 trained embeddings (see tracer.provenance.models)

``CURRENT`` must hold the name of a store folder directly inside the workspace
(``store-`` and digits) and nothing else; anything else is reported as damage,
never followed and never taken as "no corpus".
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
import sqlite3
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from tracer.errors import WordNotInVocabulary, WorkspaceError, WorkspaceNotFound
from tracer.corpus.tokenize import Tokenizer, TokenizerSettings

TOKENS_FILE = "tokens.u32"
OFFSETS_FILE = "doc_offsets.i64"
VOCAB_FILE = "vocab.tsv"
POSTINGS_PTR_FILE = "postings_ptr.i64"
POSTINGS_POS_FILE = "postings_pos.i64"
MANIFEST_FILE = "manifest.json"
DB_FILE = "corpus.sqlite"
CURRENT_FILE = "CURRENT"
REJECTS_FILE = "rejects.jsonl"
LOCK_FILE = "LOCK"
STORE_NAME = re.compile(r"store-[0-9]{4,}")
# what the workspace itself keeps: an output (-o) must never land on these
OWN_ENTRIES = (CURRENT_FILE, LOCK_FILE, REJECTS_FILE, "models", "cache", "runs")

DOCUMENT_COLUMNS = ("doc_index", "doc_id", "source", "time", "year", "time_value", "title",
                    "n_tokens", "token_start")


@dataclasses.dataclass(frozen=True)
class Vocabulary:
    """The full vocabulary of a workspace.

    Attributes
    ----------
    words : list of str, length n_words
        Word of each id (ids are given in order of first appearance, so they stay
        stable when documents are appended).
    counts : numpy.ndarray of int64, shape (n_words,)
        Corpus frequency of each id.
    """

    words: list[str]
    counts: np.ndarray

    @cached_property
    def index(self) -> dict[str, int]:
        return {w: i for i, w in enumerate(self.words)}

    def __len__(self) -> int:
        return len(self.words)

    def id_of(self, word: str) -> int:
        try:
            return self.index[word]
        except KeyError:
            raise WordNotInVocabulary(f"the word {word!r} does not occur in the corpus") from None


def store_folders(ws_path: Path) -> list[Path]:
    """The store generation folders of a workspace, oldest first."""
    return sorted((p for p in Path(ws_path).glob("store-*") if STORE_NAME.fullmatch(p.name) and p.is_dir()),
                  key=lambda p: int(p.name.split("-")[1]))


def _store_list(ws_path: Path) -> str:
    found = [f"{p.name} ({'complete' if (p / MANIFEST_FILE).is_file() else 'incomplete'})"
             for p in store_folders(ws_path)]
    return ", ".join(found) if found else "none"


def read_current(ws_path: str | os.PathLike) -> str | None:
    """The store folder ``CURRENT`` names, checked; None if there is no ``CURRENT``.

    Raises
    ------
    WorkspaceError
        If ``CURRENT`` is empty, unreadable, names anything but a store folder
        directly inside the workspace, or names one that does not exist.
    """
    ws_path = Path(ws_path)
    current = ws_path / CURRENT_FILE
    if not os.path.lexists(current):
        return None
    fix = (f"write the name of the store folder that holds the corpus into {current} (store folders "
           f"here: {_store_list(ws_path)}), then check with  tracer verify -w {ws_path}")
    try:
        raw = current.read_bytes()
    except OSError as e:
        raise WorkspaceError(f"workspace {ws_path} is damaged: cannot read {current} ({e.strerror}); {fix}") from None
    name = raw.decode("utf-8", errors="replace").strip()
    if not STORE_NAME.fullmatch(name):
        shown = repr(name[:80]) if name else "nothing"
        raise WorkspaceError(f"workspace {ws_path} is damaged: {current} holds {shown}, not the name of a "
                             f"store folder; {fix}")
    store = ws_path / name
    if store.is_symlink() or not store.is_dir():
        raise WorkspaceError(f"workspace {ws_path} is damaged: {current} names {name}, which is not a folder "
                             f"inside the workspace; {fix}")
    return name


def protected_paths(ws_path: str | os.PathLike) -> list[Path]:
    """The workspace's own files and folders (store generations included), for output checks."""
    ws_path = Path(ws_path)
    return [ws_path / n for n in OWN_ENTRIES] + list(ws_path.glob("store-*"))


class Workspace:
    """Read access to an ingested corpus.

    Open with ``Workspace(path)``; raises :class:`WorkspaceNotFound` if no corpus
    was ingested there. Writing is done by :func:`tracer.corpus.ingest.ingest`.
    ``cache`` is a :class:`tracer.provenance.cache.ResultCache` or None; open a
    workspace with its cache through :func:`tracer.provenance.cache.open_workspace`.
    """

    def __init__(self, path: str | os.PathLike, *, cache=None):
        self.path = Path(path)
        self.cache = cache
        name = read_current(self.path)
        if name is None:
            raise WorkspaceNotFound(
                f"no corpus in workspace {self.path}; run  tracer ingest FILE -w {self.path}  first"
            )
        self.store = self.path / name
        try:
            self.manifest = json.loads((self.store / MANIFEST_FILE).read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError) as e:
            raise WorkspaceError(f"workspace {self.path} is damaged: cannot read its manifest ({e})") from None

    # ---- settings -------------------------------------------------------------------------
    @property
    def tokenizer_settings(self) -> TokenizerSettings:
        return TokenizerSettings.from_dict(self.manifest["tokenizer"])

    @cached_property
    def tokenizer(self) -> Tokenizer:
        return Tokenizer(self.tokenizer_settings)

    def normalize_words(self, words) -> list[str]:
        """Words typed by a user in the form the corpus tokens take (the manifest's rule)."""
        return [self.tokenizer.normalize_word(w) for w in words]

    @property
    def corpus_hash(self) -> str:
        return self.manifest["corpus_hash"]

    @property
    def rejects_file(self) -> Path:
        """Every record skipped by the ingests that made this store (JSON lines; may be absent)."""
        return self.store / REJECTS_FILE

    @property
    def field_mapping(self) -> str:
        """Which record field gave the text, id, source, time and title, per input (one line)."""
        return "; ".join(mapping_text(i) for i in self.manifest["inputs"])

    @property
    def models_dir(self) -> Path:
        return self.path / "models"

    def _file(self, name: str) -> Path:
        """A file of the store this object opened; a clear error if a later ingest replaced the store."""
        if not self.store.is_dir():
            raise WorkspaceError(f"workspace {self.path} changed after it was opened (an ingest replaced its "
                                 f"store); open it again")
        return self.store / name

    # ---- arrays ---------------------------------------------------------------------------
    @cached_property
    def tokens(self) -> np.ndarray:
        """All tokens as full-vocabulary ids, shape (n_tokens,), uint32, memory-mapped."""
        path = self._file(TOKENS_FILE)
        if path.stat().st_size == 0:
            return np.zeros(0, dtype=np.uint32)
        return np.memmap(path, dtype="<u4", mode="r")

    @cached_property
    def doc_offsets(self) -> np.ndarray:
        """Token start of each document and the total, shape (n_docs + 1,), int64."""
        return np.fromfile(self._file(OFFSETS_FILE), dtype="<i8")

    @property
    def n_documents(self) -> int:
        return len(self.doc_offsets) - 1

    @property
    def n_tokens(self) -> int:
        return int(self.doc_offsets[-1])

    @cached_property
    def vocab(self) -> Vocabulary:
        words: list[str] = []
        counts: list[int] = []
        ids: list[int] = []
        with open(self._file(VOCAB_FILE), encoding="utf-8") as f:
            next(f)  # header
            for line in f:
                i, w, c = line.rstrip("\n").split("\t")
                ids.append(int(i))
                words.append(w)
                counts.append(int(c))
        order = np.argsort(np.asarray(ids, dtype=np.int64), kind="stable")
        return Vocabulary([words[k] for k in order], np.asarray(counts, dtype=np.int64)[order])

    @cached_property
    def _postings(self) -> tuple[np.ndarray, np.ndarray]:
        ptr = np.fromfile(self._file(POSTINGS_PTR_FILE), dtype="<i8")
        pos_path = self._file(POSTINGS_POS_FILE)
        pos = (np.memmap(pos_path, dtype="<i8", mode="r") if pos_path.stat().st_size
               else np.zeros(0, dtype=np.int64))
        return ptr, pos

    def positions(self, word: str) -> np.ndarray:
        """Sorted token positions of ``word`` in the whole corpus, int64."""
        ptr, pos = self._postings
        i = self.vocab.id_of(word)
        return np.asarray(pos[ptr[i]:ptr[i + 1]])

    def doc_of_position(self, positions: np.ndarray) -> np.ndarray:
        """Document index holding each token position."""
        return np.searchsorted(self.doc_offsets, positions, side="right") - 1

    # ---- documents ------------------------------------------------------------------------
    def _connect(self) -> sqlite3.Connection:
        return sqlite3.connect(f"file:{self._file(DB_FILE)}?mode=ro", uri=True)

    @cached_property
    def documents(self) -> pd.DataFrame:
        """One row per document (no text), in document-index order.

        Columns: doc_index, doc_id, source, time (ISO text or None), year (int or
        NA), time_value (decimal year or NaN), title, n_tokens, token_start.
        """
        with self._connect() as con:
            df = pd.read_sql_query(
                f"SELECT {', '.join(DOCUMENT_COLUMNS)} FROM documents ORDER BY doc_index", con
            )
        df["year"] = df["year"].astype("Int64")
        df["time_value"] = df["time_value"].astype(float)
        return df

    def texts(self, doc_indices) -> dict[int, str]:
        """Stored text of the given documents, by document index."""
        idx = [int(i) for i in doc_indices]
        out: dict[int, str] = {}
        with self._connect() as con:
            for k in range(0, len(idx), 500):
                chunk = idx[k:k + 500]
                marks = ",".join("?" * len(chunk))
                for i, t in con.execute(f"SELECT doc_index, text FROM documents WHERE doc_index IN ({marks})", chunk):
                    out[i] = t
        return out

    def stored_records(self, doc_indices):
        """(fields as a dict, text, input file) of each given document, in document order."""
        idx = sorted(int(i) for i in doc_indices)
        with self._connect() as con:
            for k in range(0, len(idx), 500):
                chunk = idx[k:k + 500]
                marks = ",".join("?" * len(chunk))
                for fields, text, src in con.execute(
                        f"SELECT fields, text, input_file FROM documents WHERE doc_index IN ({marks}) "
                        "ORDER BY doc_index", chunk):
                    yield json.loads(fields), text, src

    def document_tokens(self, doc_index: int) -> np.ndarray:
        a, b = self.doc_offsets[doc_index], self.doc_offsets[doc_index + 1]
        return np.asarray(self.tokens[a:b])

    def summary(self) -> dict:
        """Counts a person wants first: documents, tokens, vocabulary, sources, time span."""
        docs = self.documents
        years = docs["year"].dropna()
        return {
            "workspace": str(self.path),
            "documents": self.n_documents,
            "tokens": self.n_tokens,
            "vocabulary": len(self.vocab),
            "words_at_min_count_5": int((self.vocab.counts >= 5).sum()),
            "sources": int(docs["source"].nunique()),
            "first_year": int(years.min()) if len(years) else None,
            "last_year": int(years.max()) if len(years) else None,
            "documents_without_time": int(docs["year"].isna().sum()),
            "inputs": len(self.manifest["inputs"]),
            "field_mapping": self.field_mapping,
            "rejects_file": str(self.rejects_file) if self.rejects_file.is_file() else None,
            "corpus_hash": self.corpus_hash,
        }

    def sources_table(self) -> pd.DataFrame:
        docs = self.documents
        g = docs.groupby("source", sort=True)
        out = pd.DataFrame({
            "documents": g.size(),
            "tokens": g["n_tokens"].sum(),
            "first_year": g["year"].min(),
            "last_year": g["year"].max(),
        }).reset_index()
        out["token_share"] = out["tokens"] / max(1, int(docs["n_tokens"].sum()))
        return out


def mapping_text(entry: dict) -> str:
    """One input's field mapping as ``name: text=body id=doc_id ...`` (time "auto": time, else date)."""
    f = entry.get("fields") or {}
    roles = " ".join(f"{k}={'auto' if f.get(k) is None else f[k]}" for k in ("text", "id", "source", "time", "title"))
    default = entry.get("default_source")
    return f"{Path(entry['path']).name}: {roles}" + (f" (default source {default})" if default else "")
