"""Train embeddings per slice and keep them in the workspace."""

from __future__ import annotations

import datetime as dt
import functools
import hashlib
import itertools
import re
from pathlib import Path
from typing import Callable, Iterable

import numpy as np
import pandas as pd

from tracer.core import memory
from tracer.core.counting import Counts, CountSettings, ModelVocab
from tracer.provenance.cluster import task_workspace, tasks_for
from tracer.provenance.counts import count_slice, slice_vocab
from tracer.versions import package_versions
from tracer.corpus.lock import workspace_lock
from tracer.corpus.slices import Slice
from tracer.provenance.cache import cacheable, counts_digest
from tracer.errors import ModelNotFound, SettingError
from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors, word_vectors
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


def _model_settings(model: str, settings):
    """``settings``, the model's defaults when None; refused when they are not the model's."""
    if model not in MODELS:
        raise SettingError(f"unknown model {model!r}; use one of {', '.join(MODELS)}")
    if settings is None:
        return PpmiSvdSettings() if model == "ppmi-svd" else Word2VecSettings()
    if model == "ppmi-svd" and not isinstance(settings, PpmiSvdSettings):
        raise SettingError("ppmi-svd takes PpmiSvdSettings")
    if model == "word2vec" and not isinstance(settings, Word2VecSettings):
        raise SettingError("word2vec takes Word2VecSettings")
    return settings


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

    :func:`train_slices` trains several slices as independent tasks, to the same vectors.
    """
    settings = _model_settings(model, settings)
    vocab = slice_vocab(ws, sl.weights, counts, sl.name)
    w = sl.weights if weights is None else np.asarray(weights, dtype=np.float64)
    if model == "ppmi-svd":
        c = count_slice(ws, w, counts, slice_name=sl.name, vocab=vocab, progress=progress)
        made = embedding_from_counts(ws, sl, c, settings, weights=w)
        vectors, extras = made.vectors, made.extras
    else:
        vectors = word2vec_vectors(ws.tokens, ws.doc_offsets, w, vocab, ws.vocab.words, counts.window, settings)
        extras = {}
    return trained_embedding(ws, sl, model, counts, settings, vocab.words, vectors, extras,
                             custom_weights=weights is not None, save=save)


def trained_embedding(ws, sl: Slice, model: str, counts: CountSettings, settings, words, vectors: np.ndarray,
                      extras: dict, *, custom_weights: bool = False, save: bool = True) -> Embedding:
    """A trained model of ``sl`` with its card (what made it, when, with which versions), stored in
    the slice's model folder (:func:`model_folder`) when ``save``; ``vectors`` has shape
    (len(words), dim). What :func:`train_embedding` and :func:`train_slices` return."""
    card = {
        "model": model, "slice": sl.name, "settings": settings.to_dict(), "counts": counts.to_dict(),
        "corpus_hash": ws.corpus_hash, "n_words": len(words), "dim": int(vectors.shape[1]),
        "slice_documents": sl.n_documents, "slice_tokens": sl.n_tokens,
        "custom_weights": custom_weights,
        "trained_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"),
        "versions": package_versions(),
    }
    emb = Embedding(list(words), vectors, card, extras)
    if save:
        # the folder is rewritten file by file: two writers of one slice at once could leave one's
        # vectors under the other's card, so the store is written under the workspace's write lock
        with workspace_lock(ws.path, command=f"store the {model} model of slice {sl.name}"):
            save_embedding(emb, model_folder(ws, model, sl.name))
    return emb


def train_slices(ws, slices: list[Slice], model: str, counts: CountSettings,
                 settings: PpmiSvdSettings | Word2VecSettings | None = None, *, save: bool = True,
                 progress: bool = False, say: Callable[[str], None] = lambda s: None,
                 bar: Callable[[list], Iterable] = iter) -> list[Embedding]:
    """:func:`train_embedding` of each slice, the trainings as independent tasks
    (:func:`tracer.provenance.cluster.tasks_for`: the workspace's cluster, else the local replicate
    pool), the same vectors bit for bit; the models in the order of ``slices``, stored when ``save``.

    PPMI-SVD: each slice is counted here (on the cluster when the workspace has a scheduler) as its
    SVD is handed over (:func:`start_embeddings_from_counts`); word2vec: each training is one task
    (:func:`start_word2vec`). ``say`` gets a line as each slice is handed over, counted and when
    the models are stored; ``bar`` wraps the slices as they are handed over (a progress bar). Every
    slice's dimension is checked before anything is counted; nothing is stored until all are trained.

    Parameters
    ----------
    ws : Workspace
        With ``ws.scheduler`` set, the counts and the tasks go to that dask cluster.
    slices : list of Slice
    model : {"ppmi-svd", "word2vec"}
    counts : CountSettings
    settings : PpmiSvdSettings or Word2VecSettings

    Returns
    -------
    list of Embedding
        One per slice, vectors of shape (words of the slice, dim), with the card
        :func:`trained_embedding` gives.
    """
    settings = _model_settings(model, settings)
    vocabs = [slice_vocab(ws, sl.weights, counts, sl.name) for sl in slices]

    def handed(items):
        for sl, item in zip(slices, bar(items)):
            say(f"training {model} on slice {sl.name} ({sl.n_documents} documents, {sl.n_tokens} tokens)")
            yield sl, item

    if model == "ppmi-svd":
        for sl, v in zip(slices, vocabs):
            _check_dim(sl, v, counts, settings)

        def made():
            for sl, v in handed(vocabs):
                c = count_slice(ws, sl.weights, counts, slice_name=sl.name, vocab=v, progress=progress)
                say(f"counted slice {sl.name}: {len(v)} words, {c.matrix.nnz} nonzero cells")
                yield sl, c
        embs = start_embeddings_from_counts(ws, made(), settings, len(slices))()
        trained = [(e.words, e.vectors, e.extras) for e in embs]
    else:
        jobs = [(sl.weights, v, settings) for sl, v in zip(slices, vocabs)]
        vectors = start_word2vec(ws, jobs, counts, lambda items: (item for _, item in handed(items)))()
        trained = [(v.words, vec, {}) for v, vec in zip(vocabs, vectors)]
    if save:
        say(f"storing {len(slices)} {model} model{'s' * (len(slices) != 1)} in {ws.models_dir / model}")
    return [trained_embedding(ws, sl, model, counts, settings, *t, save=save) for sl, t in zip(slices, trained)]


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
    key, hit = _cached_embedding(ws, sl, c, settings, weights)
    if hit is not None:
        return hit
    vectors, extras = ppmi_svd_vectors(c.matrix, settings)
    return _made_embedding(ws, sl, c.vocab, c.settings, settings, key, vectors, extras)


def _check_dim(sl: Slice, vocab: ModelVocab, counts: CountSettings, settings: PpmiSvdSettings) -> None:
    if settings.dim >= len(vocab):
        raise SettingError(f"slice {sl.name} has {len(vocab)} words at min count {counts.min_count}; "
                           f"--dim {settings.dim} must be below that (lower --dim or --min-count)")


def _cached_embedding(ws, sl: Slice, c, settings: PpmiSvdSettings, weights) -> tuple[str | None, Embedding | None]:
    """The cache key of the PPMI-SVD of ``c`` (None when not cached) and the cached embedding, if any;
    checks the dimension first."""
    _check_dim(sl, c.vocab, c.settings, settings)
    cache = getattr(ws, "cache", None)
    counted = sl.weights if weights is None else weights
    if cache is None or not cacheable(counted):
        return None, None
    key = cache.key(ws.corpus_hash, counted, "ppmi-svd", c.settings.to_dict(), settings.to_dict(),
                    c.vocab.ids.tolist(), counts_digest(c))
    hit = cache.get_embedding(key)
    if hit is None:
        return key, None
    return key, Embedding(hit.words, hit.vectors, {**hit.card, "slice": sl.name}, hit.extras)


def _made_embedding(ws, sl: Slice, vocab: ModelVocab, count_settings: CountSettings, settings: PpmiSvdSettings,
                    key, vectors, extras) -> Embedding:
    card = {"model": "ppmi-svd", "slice": sl.name, "settings": settings.to_dict(), "counts": count_settings.to_dict(),
            "corpus_hash": ws.corpus_hash, "n_words": len(vocab), "dim": int(vectors.shape[1])}
    emb = Embedding(list(vocab.words), vectors, card, extras)
    if key is not None:
        ws.cache.put_embedding(key, emb, ws.corpus_hash)
    return emb


def start_embeddings_from_counts(ws, made: Iterable[tuple[Slice, Counts]], settings: PpmiSvdSettings,
                                 n: int) -> Callable[[], list]:
    """:func:`embedding_from_counts` of each of the ``n`` (slice, counts) pairs of ``made``, its weights
    the slice's; the SVDs the cache does not hold run as independent tasks
    (:func:`tracer.provenance.cluster.tasks_for`: the workspace's cluster or the local replicate pool,
    the same vectors bit for bit). Returns the function that waits for them and gives the embeddings
    in the order of ``made``.

    ``made`` is consumed as the tasks are handed over (in this process with one local worker: one
    pair at a time, so a generator of counts holds one matrix, not all), and no counts are kept
    beside their vocabulary. The workers are bounded by the memory of the first pair's PPMI and SVD.
    """
    if n == 0:
        return list
    made = iter(made)
    first = next(made)
    m = first[1].matrix
    pairs = itertools.chain([first], made)
    per_task = 12 * m.nnz + memory.ppmi_svd_peak(m.shape[0], m.nnz, settings.dim)
    found = []  # (slice, vocab, count settings, cache key, cached embedding or None), in order

    def todo():
        for sl, c in pairs:
            key, hit = _cached_embedding(ws, sl, c, settings, None)
            found.append((sl, c.vocab, c.settings, key, hit))
            if hit is None:
                yield c.matrix

    pending = tasks_for(ws, per_task, n).submit(functools.partial(ppmi_svd_vectors, settings=settings), todo())

    def embeddings() -> list:
        done = iter(pending())  # every pair is in ``found`` once the tasks are all in
        return [hit if hit is not None else _made_embedding(ws, sl, vocab, cs, settings, key, *next(done))
                for sl, vocab, cs, key, hit in found]
    return embeddings


def start_replicate_vectors(ws, matrices: Iterable, settings: PpmiSvdSettings, n: int, full) -> Callable[[], list]:
    """Start the word vectors of each of ``n`` count matrices (bootstrap replicates) on the replicate
    pool's worker processes (:mod:`tracer.core.replicate_pool`; the same vectors bit for bit on
    one), or on the cluster of a workspace opened with a scheduler (``ws.scheduler``,
    :func:`tracer.provenance.cluster.tasks_for`); returns the function that waits for them and
    gives them in order.

    Each replicate gets the exact truncated SVD (ARPACK) of its PPMI, as the full data does
    (:func:`tracer.core.ppmi_svd.word_vectors`), so the replicates differ from the estimate only by
    the resampling. A subspace iteration warm-started from the full data's context vectors was used
    before; it was not faster than ARPACK at 493 or 2,475 words, and at 2,475 words its 8
    iterations moved d by up to 0.32 and the gap by up to 0.025 from the exact SVD of the same
    replicate (tests/benchmarks/bench_bootstrap.py measures both side by side).

    ``full`` is the count matrix of the data resampled: a replicate has no more nonzeros, so the
    number of local workers is bounded by the memory its PPMI and SVD take (and the copy a worker gets).
    """
    per_task = 12 * full.nnz + memory.ppmi_svd_peak(full.shape[0], full.nnz, settings.dim)
    return tasks_for(ws, per_task, n).submit(functools.partial(word_vectors, settings=settings), matrices)


def _word2vec_task(path: str, corpus_hash: str, job: tuple) -> np.ndarray:
    """One word2vec training in a task: the workspace opened by its path (the same folder on every
    machine), refused when it holds another corpus than the caller's."""
    weights, vocab, window, settings = job
    ws = task_workspace(path)
    if ws.corpus_hash != corpus_hash:
        raise SettingError(f"the workspace {path} changed while its models were being trained; run again")
    return word2vec_vectors(ws.tokens, ws.doc_offsets, weights, vocab, ws.vocab.words, window, settings)


def start_word2vec(ws, jobs: list[tuple[np.ndarray, ModelVocab, Word2VecSettings]], counts: CountSettings,
                   bar: Callable[[list], Iterable] = iter) -> Callable[[], list]:
    """The word2vec vectors of each (document weights, vocabulary, settings) job, as
    :func:`train_embedding` trains them, run as independent tasks (:func:`tasks_for`); returns the
    function that waits for them and gives the vectors, shape (len(vocab), dim) each, in order.
    ``bar`` wraps the jobs as they are handed over (a progress bar).

    A task's peak is taken as four float32 tables of n_words x dim (gensim's input and output
    vectors, their locks and the copy returned) and the weights; the text itself is read from the
    memory-mapped tokens.
    """
    if not jobs:
        return list
    per_task = max(16 * len(v) * s.dim + 8 * len(w) for w, v, s in jobs)
    task = functools.partial(_word2vec_task, str(Path(ws.path).resolve()), ws.corpus_hash)
    return tasks_for(ws, per_task, len(jobs)).submit(task, bar([(w, v, counts.window, s) for w, v, s in jobs]))
