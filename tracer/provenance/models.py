"""Train embeddings per slice and keep them in the workspace."""

from __future__ import annotations

import datetime as dt
import hashlib
import re
from pathlib import Path

import numpy as np
import pandas as pd

from tracer.core.counting import CountSettings, build_vocab
from tracer.provenance.counts import count_slice
from tracer.versions import package_versions
from tracer.corpus.lock import workspace_lock
from tracer.corpus.slices import Slice
from tracer.provenance.cache import cacheable, counts_digest
from tracer.errors import ModelNotFound, SettingError, SliceError
from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors
from tracer.core.embedding import Embedding
from tracer.core.word2vec import Word2VecSettings, word2vec_vectors
from tracer.provenance.vectors_io import load_embedding_folder, save_embedding

MODELS = ("ppmi-svd", "word2vec")


def slice_folder_name(slice_name: str) -> str:
    """A folder name for a slice: readable part plus a hash, never the raw corpus text."""
    readable = re.sub(r"[^A-Za-z0-9._=-]+", "_", slice_name)[:40].strip("._") or "slice"
    return f"{readable}-{hashlib.sha1(slice_name.encode('utf-8')).hexdigest()[:10]}"


def model_folder(ws, model: str, slice_name: str) -> Path:
    return ws.models_dir / model / slice_folder_name(slice_name)


def train_embedding(ws, sl: Slice, model: str, counts: CountSettings,
                    settings: PpmiSvdSettings | Word2VecSettings | None = None, *,
                    weights: np.ndarray | None = None, save: bool = True,
                    progress: bool = False) -> Embedding:
    """Train one model on one slice (or on custom document weights) and store it.

    Parameters
    ----------
    ws : Workspace
    sl : Slice
        The slice; ``weights`` may override its weights (its vocabulary is still the slice's).
    model : {"ppmi-svd", "word2vec"}
    counts : CountSettings
        Window, weighting, min-count and vocabulary cap; word2vec uses the same window and vocabulary.
    settings : PpmiSvdSettings or Word2VecSettings
    """
    if model not in MODELS:
        raise SettingError(f"unknown model {model!r}; use one of {', '.join(MODELS)}")
    if settings is None:
        settings = PpmiSvdSettings() if model == "ppmi-svd" else Word2VecSettings()
    words = ws.vocab.words
    try:
        vocab = build_vocab(ws.tokens, ws.doc_offsets, sl.weights, words, counts)
    except SliceError as e:
        raise SliceError(f"slice {sl.name}: {e}") from None
    w = sl.weights if weights is None else np.asarray(weights, dtype=np.float64)
    extras: dict = {}
    if model == "ppmi-svd":
        if not isinstance(settings, PpmiSvdSettings):
            raise SettingError("ppmi-svd takes PpmiSvdSettings")
        c = count_slice(ws, w, counts, slice_name=sl.name, vocab=vocab, progress=progress)
        made = embedding_from_counts(ws, sl, c, settings, weights=w)
        vectors, extras = made.vectors, made.extras
    else:
        if not isinstance(settings, Word2VecSettings):
            raise SettingError("word2vec takes Word2VecSettings")
        vectors = word2vec_vectors(ws.tokens, ws.doc_offsets, w, vocab, words, counts.window, settings)
    card = {
        "model": model, "slice": sl.name, "settings": settings.to_dict(), "counts": counts.to_dict(),
        "corpus_hash": ws.corpus_hash, "n_words": len(vocab), "dim": int(vectors.shape[1]),
        "slice_documents": sl.n_documents, "slice_tokens": sl.n_tokens,
        "custom_weights": weights is not None,
        "trained_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"),
        "versions": package_versions(),
    }
    emb = Embedding(list(vocab.words), vectors, card, extras)
    if save:
        # the folder is rewritten file by file: two writers of one slice at once could leave one's
        # vectors under the other's card, so the store is written under the workspace's write lock
        with workspace_lock(ws.path, command=f"store the {model} model of slice {sl.name}"):
            save_embedding(emb, model_folder(ws, model, sl.name))
    return emb


def load_embedding(ws, model: str, slice_name: str) -> Embedding:
    """A stored model; :class:`ModelNotFound` says what is there and how to train it."""
    folder = model_folder(ws, model, slice_name)
    if not (folder / "card.json").is_file():
        have = list_models(ws)
        listed = ", ".join(f"{m} {s}" for m, s in zip(have["model"], have["slice"])) if len(have) else "none"
        raise ModelNotFound(f"no {model} model for slice {slice_name} in {ws.path} (trained: {listed}); "
                            f"run  tracer train -w {ws.path} --model {model} --slice {slice_name}")
    emb = load_embedding_folder(folder)
    if emb.card.get("corpus_hash") != ws.corpus_hash:
        raise ModelNotFound(f"the {model} model for slice {slice_name} was trained before the corpus changed; "
                            f"train it again with  tracer train -w {ws.path} --model {model} --slice {slice_name}")
    return emb


def list_models(ws) -> pd.DataFrame:
    """Stored models: model, slice, words, dim, trained_at, current (trained on this corpus)."""
    import json
    rows = []
    for card_path in sorted(ws.models_dir.glob("*/*/card.json")):
        card = json.loads(card_path.read_text(encoding="utf-8"))
        rows.append({"model": card["model"], "slice": card["slice"], "words": card["n_words"],
                     "dim": card["dim"], "trained_at": card["trained_at"],
                     "current": card.get("corpus_hash") == ws.corpus_hash})
    return pd.DataFrame(rows, columns=["model", "slice", "words", "dim", "trained_at", "current"])


def embedding_from_counts(ws, sl: Slice, c, settings: PpmiSvdSettings, *,
                          weights: np.ndarray | None = None) -> Embedding:
    """A PPMI-SVD embedding of counts already made (not stored).

    ``weights`` are the document weights ``c`` was counted with (default: the slice's). The
    cache key holds them and a digest of the counts themselves, so a model is never found
    under the key of other counts.
    """
    if settings.dim >= len(c.vocab):
        raise SettingError(f"slice {sl.name} has {len(c.vocab)} words at min count {c.settings.min_count}; "
                           f"--dim {settings.dim} must be below that (lower --dim or --min-count)")
    cache = getattr(ws, "cache", None)
    key = None
    counted = sl.weights if weights is None else weights
    if cache is not None and cacheable(counted):
        key = cache.key(ws.corpus_hash, counted, "ppmi-svd", c.settings.to_dict(), settings.to_dict(),
                        c.vocab.ids.tolist(), counts_digest(c))
        hit = cache.get_embedding(key)
        if hit is not None:
            return Embedding(hit.words, hit.vectors, {**hit.card, "slice": sl.name}, hit.extras)
    vectors, extras = ppmi_svd_vectors(c.matrix, settings)
    card = {"model": "ppmi-svd", "slice": sl.name, "settings": settings.to_dict(), "counts": c.settings.to_dict(),
            "corpus_hash": ws.corpus_hash, "n_words": len(c.vocab), "dim": int(vectors.shape[1])}
    emb = Embedding(list(c.vocab.words), vectors, card, extras)
    if key is not None:
        cache.put_embedding(key, emb, ws.corpus_hash)
    return emb
