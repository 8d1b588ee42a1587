"""A cache of counts and models inside the workspace, keyed by what made them.

Key: the corpus hash, the document weights actually counted, the counting settings,
the vocabulary given (if any), the model settings and the versions of tracer, numpy and
scipy (an entry made by another version, whose counting or SVD may differ, is never
reused). Only slices (weights of exactly 0 and 1) are cached: :meth:`ResultCache.key`
refuses other weights, so a bootstrap replicate or a reweighted period can never be
stored or found under a slice's key. Entries are written into a temporary folder of their
writer's own and renamed into place whole (the first writer of a key wins, see
:meth:`ResultCache._commit`), and never pickled.

Every entry holds ``entry.json`` (corpus hash, versions, kind). :meth:`ResultCache.prune`
removes entries of other corpus hashes or versions first, then the least recently used,
until the cache fits a size limit (``tracer cache prune``; ``tracer run`` prunes to
``DEFAULT_MAX_BYTES`` after each run).
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import uuid
from pathlib import Path

import numpy as np
import scipy
import scipy.sparse as sp

from tracer._version import __version__
from tracer.core.counting import Counts, CountSettings, ModelVocab
from tracer.corpus.workspace import Workspace
from tracer.provenance.vectors_io import load_embedding_folder, save_embedding

DEFAULT_MAX_BYTES = 4 * 1024 ** 3
TMP_PREFIX = ".tmp-"


def open_workspace(path: str | os.PathLike, *, cache: bool | str = False, scheduler: str | None = None) -> Workspace:
    """Open a workspace with its cache: ``True`` reuses counts and models of slices made
    before and keeps new ones (``tracer run``); ``"read"`` reuses them and keeps nothing
    new (the other commands); ``False`` neither. With ``scheduler`` (a dask.distributed
    scheduler's address) the counts not in the cache are counted on that cluster
    (:func:`tracer.provenance.counts.count_slice`)."""
    if cache not in (False, True, "read"):
        raise ValueError(f"cache must be False, True or 'read'; got {cache!r}")
    path = Path(path)
    ws = Workspace(path, cache=ResultCache(path / "cache", write=cache != "read") if cache else None)
    ws.scheduler = scheduler
    return ws


def cacheable(weights: np.ndarray) -> bool:
    """True for slice weights (every weight exactly 0 or 1)."""
    w = np.asarray(weights)
    return bool(np.all((w == 0) | (w == 1)))


def versions_tag() -> str:
    """The versions an entry's numbers depend on."""
    return f"tracer {__version__} numpy {np.__version__} scipy {scipy.__version__}"


def counts_digest(counts: Counts) -> str:
    """SHA-256 of a count matrix and its vocabulary: what a model made from them depends on."""
    h = hashlib.sha256()
    m = counts.matrix
    for a in (m.data, m.indices, m.indptr, counts.vocab.ids):
        h.update(np.ascontiguousarray(a).tobytes())
    return h.hexdigest()


def _size(folder: Path) -> int:
    return sum(f.stat().st_size for f in folder.rglob("*") if f.is_file())


class ResultCache:
    """Counts and embeddings stored under ``folder``; ``hits`` and ``misses`` count lookups.
    With ``write=False`` entries made before are used and nothing is stored."""

    def __init__(self, folder: str | os.PathLike, *, write: bool = True):
        self.folder = Path(folder)
        self.write = write
        self.hits = 0
        self.misses = 0

    @staticmethod
    def key(corpus_hash: str, weights: np.ndarray, *parts) -> str:
        """The key of an entry made from ``weights`` (0/1 only: other weights raise ValueError)."""
        if not cacheable(weights):
            raise ValueError("only slice weights (0 and 1) are cached; these weights are not")
        w = np.asarray(weights)
        h = hashlib.sha256(corpus_hash.encode())
        h.update(versions_tag().encode())
        h.update(f"{len(w)} documents".encode())
        h.update(np.packbits(w == 1).tobytes())
        for p in parts:
            h.update(json.dumps(p, sort_keys=True, default=str).encode())
        return h.hexdigest()[:24]

    def _tmp(self, kind: str, key: str) -> Path:
        # unique per writer, threads of one process included (the pid is for prune: a living
        # writer's folder is left alone)
        return self.folder / f"{TMP_PREFIX}{kind}-{key}-{os.getpid()}-{uuid.uuid4().hex}"

    def _commit(self, tmp: Path, final: Path, kind: str, corpus_hash: str) -> None:
        """Rename the whole temporary entry into place; the first writer of a key wins.

        Two writers of one key (two processes, or a library user beside ``tracer run``) each
        write a folder of their own, so neither can mix files into the other's; renaming a folder
        onto an existing entry fails (ENOTEMPTY or EEXIST), and the loser drops its copy, which
        holds the same content, since the key names everything the content was made from.
        """
        (tmp / "entry.json").write_text(json.dumps({"kind": kind, "corpus_hash": corpus_hash,
                                                    "versions": versions_tag()}), encoding="utf-8")
        try:
            os.replace(tmp, final)
        except OSError as e:
            if e.errno not in (errno.ENOTEMPTY, errno.EEXIST) or not final.is_dir():
                raise
            shutil.rmtree(tmp, ignore_errors=True)

    @staticmethod
    def _touch(folder: Path) -> None:
        """Mark an entry used (least recently used entries are pruned first)."""
        try:
            os.utime(folder)
        except OSError:  # a read-only workspace: the order of pruning is only less exact
            pass

    # ---- counts --------------------------------------------------------------------------------
    def get_counts(self, key: str):
        f = self.folder / f"counts-{key}"
        if not (f / "done").is_file():
            self.misses += 1
            return None
        self.hits += 1
        self._touch(f)
        a = np.load(f / "arrays.npz", allow_pickle=False)
        meta = json.loads((f / "meta.json").read_text(encoding="utf-8"))
        n = len(a["ids"])
        matrix = sp.csr_array((a["data"], a["indices"], a["indptr"]), shape=(n, n))
        words = (f / "words.txt").read_text(encoding="utf-8").split("\n")[:-1]
        return Counts(matrix, ModelVocab(words, a["ids"], a["counts"]), CountSettings(**meta["settings"]), meta["slice"])

    def put_counts(self, key: str, counts, corpus_hash: str) -> None:
        if not self.write:
            return
        tmp = self._tmp("counts", key)
        tmp.mkdir(parents=True)
        m = counts.matrix
        np.savez(tmp / "arrays.npz", data=m.data, indices=m.indices, indptr=m.indptr, ids=counts.vocab.ids,
                 counts=counts.vocab.counts)
        (tmp / "words.txt").write_text("".join(w + "\n" for w in counts.vocab.words), encoding="utf-8")
        (tmp / "meta.json").write_text(json.dumps({"settings": counts.settings.to_dict(), "slice": counts.slice_name}),
                                       encoding="utf-8")
        (tmp / "done").write_text("", encoding="utf-8")
        self._commit(tmp, self.folder / f"counts-{key}", "counts", corpus_hash)

    # ---- embeddings ----------------------------------------------------------------------------
    def get_embedding(self, key: str):
        f = self.folder / f"model-{key}"
        if not (f / "card.json").is_file():
            self.misses += 1
            return None
        self.hits += 1
        self._touch(f)
        return load_embedding_folder(f)

    def put_embedding(self, key: str, emb, corpus_hash: str) -> None:
        if not self.write:
            return
        tmp = self._tmp("model", key)
        save_embedding(emb, tmp)
        self._commit(tmp, self.folder / f"model-{key}", "model", corpus_hash)

    # ---- pruning -------------------------------------------------------------------------------
    def prune(self, corpus_hash: str, max_bytes: int | None = DEFAULT_MAX_BYTES) -> tuple[int, int]:
        """Remove abandoned temporary folders and entries of other corpus hashes or versions, then
        the least recently used entries until the rest fit ``max_bytes`` (None: no size limit).

        Returns
        -------
        (entries removed, bytes freed)
        """
        if not self.folder.is_dir():
            return 0, 0
        removed = freed = 0
        keep = []
        for f in sorted(self.folder.iterdir()):
            if not f.is_dir():
                continue
            size = _size(f)
            if f.name.startswith(TMP_PREFIX):
                if not _writer_alive(f.name):
                    shutil.rmtree(f, ignore_errors=True)
                    freed += size
                continue
            if _entry_current(f, corpus_hash):
                keep.append((f.stat().st_mtime, size, f))
                continue
            shutil.rmtree(f, ignore_errors=True)
            removed, freed = removed + 1, freed + size
        total = sum(size for _, size, _ in keep)
        for _, size, f in sorted(keep, key=lambda t: t[0]):
            if max_bytes is None or total <= max_bytes:
                break
            shutil.rmtree(f, ignore_errors=True)
            removed, freed, total = removed + 1, freed + size, total - size
        return removed, freed


def _entry_current(folder: Path, corpus_hash: str) -> bool:
    try:
        entry = json.loads((folder / "entry.json").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):  # an entry of an older version, or damaged
        return False
    return isinstance(entry, dict) and entry.get("corpus_hash") == corpus_hash \
        and entry.get("versions") == versions_tag()


def _writer_alive(name: str) -> bool:
    """Whether the process that is writing a temporary folder (``.tmp-KIND-KEY-PID-NS``) still runs."""
    parts = name.split("-")
    if len(parts) < 5 or not parts[-2].isdigit():
        return False
    try:
        os.kill(int(parts[-2]), 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
