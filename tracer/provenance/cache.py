"""A cache of counts and models inside the workspace, keyed by what made them.

Key: the corpus hash, the document weights, the counting settings, the vocabulary
given (if any), the model settings and the versions of tracer, numpy and scipy (an
entry made by another version, whose counting or SVD may differ, is never reused).
Only slices (weights of 0 and 1) are cached: bootstrap replicates and reweighted
periods are made once and thrown away. Entries are written atomically (a temporary
folder renamed into place) and never pickled.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from pathlib import Path

import numpy as np
import scipy
import scipy.sparse as sp

from tracer import __version__
from tracer.core.counting import Counts, CountSettings, ModelVocab
from tracer.corpus.workspace import Workspace
from tracer.provenance.vectors_io import load_embedding_folder, save_embedding


def open_workspace(path: str | os.PathLike, *, cache: bool | str = False) -> Workspace:
    """Open a workspace with its cache: ``True`` reuses counts and models of slices made
    before and keeps new ones (``tracer run``); ``"read"`` reuses them and keeps nothing
    new (the other commands); ``False`` neither."""
    if cache not in (False, True, "read"):
        raise ValueError(f"cache must be False, True or 'read'; got {cache!r}")
    path = Path(path)
    return Workspace(path, cache=ResultCache(path / "cache", write=cache != "read") if cache else None)


def cacheable(weights: np.ndarray) -> bool:
    w = np.asarray(weights)
    return bool(np.all((w == 0) | (w == 1)))


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
        h = hashlib.sha256(corpus_hash.encode())
        h.update(f"tracer {__version__} numpy {np.__version__} scipy {scipy.__version__}".encode())
        h.update(np.packbits(np.asarray(weights) > 0).tobytes())
        for p in parts:
            h.update(json.dumps(p, sort_keys=True, default=str).encode())
        return h.hexdigest()[:24]

    def _commit(self, tmp: Path, final: Path) -> None:
        if final.exists():
            shutil.rmtree(tmp, ignore_errors=True)
            return
        os.replace(tmp, final)

    # ---- counts --------------------------------------------------------------------------------
    def get_counts(self, key: str):
        f = self.folder / f"counts-{key}"
        if not (f / "done").is_file():
            self.misses += 1
            return None
        self.hits += 1
        a = np.load(f / "arrays.npz", allow_pickle=False)
        meta = json.loads((f / "meta.json").read_text(encoding="utf-8"))
        n = len(a["ids"])
        matrix = sp.csr_array((a["data"], a["indices"], a["indptr"]), shape=(n, n))
        words = (f / "words.txt").read_text(encoding="utf-8").split("\n")[:-1]
        return Counts(matrix, ModelVocab(words, a["ids"], a["counts"]), CountSettings(**meta["settings"]), meta["slice"])

    def put_counts(self, key: str, counts) -> None:
        if not self.write:
            return
        final = self.folder / f"counts-{key}"
        tmp = self.folder / f".tmp-counts-{key}-{os.getpid()}"
        tmp.mkdir(parents=True, exist_ok=True)
        m = counts.matrix
        np.savez(tmp / "arrays.npz", data=m.data, indices=m.indices, indptr=m.indptr, ids=counts.vocab.ids,
                 counts=counts.vocab.counts)
        (tmp / "words.txt").write_text("".join(w + "\n" for w in counts.vocab.words), encoding="utf-8")
        (tmp / "meta.json").write_text(json.dumps({"settings": counts.settings.to_dict(), "slice": counts.slice_name}),
                                       encoding="utf-8")
        (tmp / "done").write_text("", encoding="utf-8")
        self._commit(tmp, final)

    # ---- embeddings ----------------------------------------------------------------------------
    def get_embedding(self, key: str):
        f = self.folder / f"model-{key}"
        if not (f / "card.json").is_file():
            self.misses += 1
            return None
        self.hits += 1
        return load_embedding_folder(f)

    def put_embedding(self, key: str, emb) -> None:
        if not self.write:
            return
        final = self.folder / f"model-{key}"
        tmp = self.folder / f".tmp-model-{key}-{os.getpid()}"
        save_embedding(emb, tmp)
        self._commit(tmp, final)
