"""Counting a workspace's documents under weights, through the workspace's cache."""

from __future__ import annotations

import dataclasses

import numpy as np

from tracer.core.counting import Counts, CountSettings, ModelVocab, build_vocab, count_matrix
from tracer.errors import SliceError
from tracer.provenance.cache import cacheable


def _cache_key(ws, weights: np.ndarray, settings: CountSettings, vocab: ModelVocab | None):
    cache = getattr(ws, "cache", None)
    if cache is None or not cacheable(weights):
        return None, None
    return cache, cache.key(ws.corpus_hash, weights, "counts", settings.to_dict(),
                            None if vocab is None else vocab.ids.tolist())


def cached_counts(ws, weights: np.ndarray, settings: CountSettings, *, slice_name: str = "custom",
                  vocab: ModelVocab | None = None) -> Counts | None:
    """The counts :func:`count_slice` would return, when the workspace's cache holds them; else None
    (nothing is counted)."""
    cache, key = _cache_key(ws, weights, settings, vocab)
    hit = None if key is None else cache.get_counts(key)
    return None if hit is None else dataclasses.replace(hit, slice_name=slice_name)


def slice_vocab(ws, weights: np.ndarray, settings: CountSettings, slice_name: str) -> ModelVocab:
    """The vocabulary of the documents of nonzero weight; an empty one names the slice."""
    try:
        return build_vocab(ws.tokens, ws.doc_offsets, weights, ws.vocab.words, settings)
    except SliceError as e:
        raise SliceError(f"slice {slice_name}: {e}") from None


def count_slice(ws, weights: np.ndarray, settings: CountSettings, *, slice_name: str = "custom",
                vocab: ModelVocab | None = None, workers: int | None = None,
                progress: bool = False) -> Counts:
    """Count a workspace under document weights (a slice's, a resample's, a reweighting's).

    The vocabulary is built from the documents of nonzero weight unless given,
    so resamples of one slice can share the slice's vocabulary. Counts of slice weights
    (0 and 1) go through the workspace's cache, keyed by these weights; other weights never do.
    A workspace opened with a scheduler's address (``ws.scheduler``) is counted on that
    dask.distributed cluster by document partitions (:mod:`tracer.provenance.cluster`; equal
    to the local count bit for bit for whole-number weights).
    """
    cache, key = _cache_key(ws, weights, settings, vocab)
    if key is not None:
        hit = cache.get_counts(key)
        if hit is not None:
            return dataclasses.replace(hit, slice_name=slice_name)
    if vocab is None:
        vocab = slice_vocab(ws, weights, settings, slice_name)
    scheduler = getattr(ws, "scheduler", None)
    if scheduler:
        from tracer.provenance.cluster import count_on_cluster  # dask is imported only when asked for
        matrix, vocab = count_on_cluster(ws, weights, settings, scheduler=scheduler, vocab=vocab)
    else:
        matrix = count_matrix(ws.tokens, ws.doc_offsets, weights, vocab, len(ws.vocab.words), settings,
                              workers=workers, progress=progress)
    counts = Counts(matrix, vocab, settings, slice_name)
    if key is not None:
        cache.put_counts(key, counts, ws.corpus_hash)
    return counts
