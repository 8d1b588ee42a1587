"""Windowed co-occurrence counting with document weights.

The one primitive everything else stands on::

    C(weights) = sum over documents d of  weight[d] * C_d

where ``C_d`` is the windowed co-occurrence matrix of document ``d``. Slices,
ablations, bootstrap replicates and reweighted periods differ only in the
weights, so this module never needs to know why it counts.

Counting rule (the defaults are written in the README):

- tokens of words outside the model vocabulary (below ``min_count`` in the
  documents counted, or beyond ``max_vocab``) are removed *before* windowing,
  as word2vec does, so the window closes over the gap;
- every pair of positions ``i < j`` with ``j - i <= window`` inside one
  document adds ``weight[d] * distance_weight(j - i)`` to both ``C[a, b]`` and
  ``C[b, a]`` (so a pair of the same word adds twice to ``C[a, a]``);
- windows never cross a document boundary.

How :func:`count_matrix` does the work (shards, pair arrays, row blocks) is in
:mod:`tracer.core.count_engine`.
"""

from __future__ import annotations

import dataclasses
from functools import cached_property

import numpy as np
import scipy.sparse as sp
from tqdm.auto import tqdm

from tracer.core import _kernels as _k
from tracer.core.count_memory import check_count_memory
from tracer.core.count_engine import (DEFAULT_SHARD_TOKENS, count_shard, make_shards, sum_upper, symmetrize_arrays,
                                      to_csr)
from tracer.core.threads import ThreadPool, default_workers
from tracer.errors import SettingError, SliceError

WEIGHTINGS = ("uniform", "harmonic", "linear")


@dataclasses.dataclass(frozen=True)
class CountSettings:
    """How pairs are counted.

    Parameters
    ----------
    window : int
        Tokens each side (default 5).
    weighting : {"uniform", "harmonic", "linear"}
        Weight of a pair at distance k: 1, 1/k, or (window - k + 1) / window, the
        expected weight under word2vec's shrinking window.
    min_count : int
        Words with fewer occurrences in the documents counted are removed before
        windowing (default 5).
    max_vocab : int or None
        Keep at most this many words, the most frequent (ties by first appearance).
    """

    window: int = 5
    weighting: str = "uniform"
    min_count: int = 5
    max_vocab: int | None = None

    def __post_init__(self):
        if not isinstance(self.window, int) or self.window < 1:
            raise SettingError(f"window must be a whole number >= 1; got {self.window!r}")
        if self.weighting not in WEIGHTINGS:
            raise SettingError(f"weighting must be one of {', '.join(WEIGHTINGS)}; got {self.weighting!r}")
        if not isinstance(self.min_count, int) or self.min_count < 1:
            raise SettingError(f"min_count must be a whole number >= 1; got {self.min_count!r}")
        if self.max_vocab is not None and (not isinstance(self.max_vocab, int) or self.max_vocab < 1):
            raise SettingError(f"max_vocab must be a whole number >= 1 or unset; got {self.max_vocab!r}")

    def distance_weights(self) -> np.ndarray:
        """Weight of a pair at distance 1..window, shape (window,)."""
        k = np.arange(1, self.window + 1, dtype=np.float64)
        if self.weighting == "uniform":
            return np.ones_like(k)
        if self.weighting == "harmonic":
            return 1.0 / k
        return (self.window - k + 1) / self.window

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


# ---- window semantics --------------------------------------------------------------------------
# The pairs a window makes are walked in three places, each shaped by what it produces: the
# counter kernels (each pair once, i < j, as a code in a shared array), the per-document probe
# rows of tracer.analysis.document_counts (each probe occurrence's neighbours on both sides, as
# sparse triplets) and tracer.core._kernels.linear_scores (weighted sums, with an edge correction
# instead of a per-token neighbour weight). One numba loop yielding neighbours to all three would
# need a callback in the innermost loop or a different order of summation (other last digits),
# so the loops stay separate; the weights they use are defined here only, and a test checks the
# three walks against each other (tests/analysis/test_document_counts.py).

def cumulative_weights(distance_weights: np.ndarray) -> np.ndarray:
    """``cum[k]`` = the summed weight of distances 1..k, shape (window + 1,), ``cum[0] = 0``.

    A token with k kept tokens on one side within its document has neighbours of weight
    ``cum[min(k, window)]`` on that side.
    """
    return np.concatenate([[0.0], np.cumsum(distance_weights)])


def neighbour_weight(before, after, cum: np.ndarray):
    """Summed distance weight of a token's window neighbours, given how many kept tokens of its
    document lie ``before`` and ``after`` it (arrays broadcast): what each occurrence adds to its
    word's row sum, per unit of document weight."""
    window = len(cum) - 1
    return cum[np.minimum(window, before)] + cum[np.minimum(window, after)]


@dataclasses.dataclass(frozen=True)
class KeptTokens:
    """The tokens a count windows, in order: the in-vocabulary tokens of some documents.

    Attributes (one value per kept token, except ``lengths``)
    ----------
    ids : numpy.ndarray of int64, shape (n_kept,)
        Model ids.
    pos : numpy.ndarray of int64, shape (n_kept,)
        Positions in the workspace's token array.
    owner : numpy.ndarray of int64, shape (n_kept,)
        Index into the documents asked for (not the workspace's document index).
    place : numpy.ndarray of int64, shape (n_kept,)
        Place among its document's kept tokens (0 for the first).
    first : numpy.ndarray of int64, shape (n_docs_asked,)
        Index of each document's first kept token in this stream.
    lengths : numpy.ndarray of int64, shape (n_docs_asked,)
        Kept tokens of each document asked for.
    """

    ids: np.ndarray
    pos: np.ndarray
    owner: np.ndarray
    place: np.ndarray
    first: np.ndarray
    lengths: np.ndarray


def kept_tokens(tokens: np.ndarray, doc_offsets: np.ndarray, docs: np.ndarray, id_map: np.ndarray) -> KeptTokens:
    """The kept tokens of the documents ``docs`` (indices, ascending), words outside ``id_map``
    (-1 there) removed before windowing as the counter removes them.

    Parameters
    ----------
    tokens : numpy.ndarray of uint32, shape (n_tokens,)
    doc_offsets : numpy.ndarray of int64, shape (n_docs + 1,)
    docs : numpy.ndarray of int, shape (n_docs_asked,)
    id_map : numpy.ndarray of int, shape (n_full,)
        Workspace id -> model id (:meth:`ModelVocab.id_map`).
    """
    docs = np.asarray(docs, dtype=np.int64)
    lengths = doc_offsets[docs + 1] - doc_offsets[docs]
    starts = doc_offsets[docs]
    pos = np.repeat(starts - np.cumsum(np.r_[0, lengths[:-1]]), lengths) + np.arange(lengths.sum())
    ids = id_map[tokens[pos]]
    keep = ids >= 0
    owner = np.repeat(np.arange(len(docs)), lengths)[keep]
    kept_len = np.bincount(owner, minlength=len(docs))
    first = np.r_[0, np.cumsum(kept_len)[:-1]].astype(np.int64)
    place = np.arange(len(owner)) - first[owner]
    return KeptTokens(ids[keep].astype(np.int64), pos[keep], owner, place, first, kept_len)


@dataclasses.dataclass(frozen=True)
class ModelVocab:
    """The words a count or a model works in, most frequent first.

    Attributes
    ----------
    words : list of str, length n
    ids : numpy.ndarray of int64, shape (n,)
        Each word's id in the workspace vocabulary.
    counts : numpy.ndarray of int64, shape (n,)
        Occurrences in the documents that made this vocabulary.
    """

    words: list[str]
    ids: np.ndarray
    counts: np.ndarray

    def __len__(self) -> int:
        return len(self.words)

    @cached_property
    def index(self) -> dict[str, int]:
        return {w: i for i, w in enumerate(self.words)}

    def id_map(self, n_full: int) -> np.ndarray:
        """Map from workspace id to row in this vocabulary (-1 outside), shape (n_full,), int32."""
        m = np.full(n_full, -1, dtype=np.int32)
        m[self.ids] = np.arange(len(self.ids), dtype=np.int32)
        return m


def token_mask(doc_offsets: np.ndarray, selected: np.ndarray) -> np.ndarray:
    """Boolean mask over tokens: True inside the selected documents."""
    lengths = np.diff(doc_offsets)
    return np.repeat(selected, lengths)


def build_vocab(tokens: np.ndarray, doc_offsets: np.ndarray, doc_weights: np.ndarray,
                words: list[str], settings: CountSettings) -> ModelVocab:
    """Vocabulary of the documents with nonzero weight, under ``min_count`` and ``max_vocab``.

    Counts are plain occurrence counts in those documents (weights only select),
    so a bootstrap replicate or a reweighting does not change the vocabulary.
    """
    selected = np.asarray(doc_weights) > 0
    if selected.all():
        counts = np.bincount(tokens, minlength=len(words))
    else:
        counts = np.bincount(tokens[token_mask(doc_offsets, selected)], minlength=len(words))
    keep = np.flatnonzero(counts >= settings.min_count)
    order = keep[np.lexsort((keep, -counts[keep]))]
    if settings.max_vocab is not None:
        order = order[: settings.max_vocab]
    if len(order) == 0:
        raise SliceError(
            f"no word occurs at least {settings.min_count} times in the documents counted; lower --min-count"
        )
    return ModelVocab([words[i] for i in order], order.astype(np.int64), counts[order].astype(np.int64))


def count_matrix(tokens: np.ndarray, doc_offsets: np.ndarray, doc_weights: np.ndarray,
                 vocab: ModelVocab, n_full: int, settings: CountSettings, *,
                 workers: int | None = None, shard_tokens: int = DEFAULT_SHARD_TOKENS,
                 symmetric: bool = True, progress: bool = False) -> sp.csr_array:
    """Weighted co-occurrence counts over the model vocabulary.

    Parameters
    ----------
    tokens : numpy.ndarray of uint32, shape (n_tokens,)
        Full-vocabulary token ids of all documents, concatenated.
    doc_offsets : numpy.ndarray of int64, shape (n_docs + 1,)
        Token start of each document, then the total.
    doc_weights : numpy.ndarray of float, shape (n_docs,)
        Weight of each document; documents of weight 0 are skipped.
    vocab : ModelVocab
        Rows and columns of the result.
    n_full : int
        Size of the full vocabulary (ids in ``tokens`` are below it).
    settings : CountSettings
    workers : int, optional
        Threads (default: the cores available).
    shard_tokens : int
        Tokens per shard; shards are counted one after another and summed.
    symmetric : bool
        Return ``C`` (default, canonical) or only its upper triangle ``U`` with
        ``C = U + U.T`` (columns within a row unsorted; no duplicates).
    progress : bool
        Show a progress bar over shards.

    Returns
    -------
    scipy.sparse.csr_array of float64, shape (len(vocab), len(vocab))
    """
    doc_weights = np.asarray(doc_weights, dtype=np.float64)
    if doc_weights.shape != (len(doc_offsets) - 1,):
        raise SettingError(f"doc_weights must have one value per document ({len(doc_offsets) - 1}); "
                           f"got shape {doc_weights.shape}")
    if np.any(doc_weights < 0) or not np.all(np.isfinite(doc_weights)):
        raise SettingError("document weights must be finite and non-negative")
    if settings.window > _k.MAX_WINDOW:
        raise SettingError(f"window must be at most {_k.MAX_WINDOW}; got {settings.window}")
    n = len(vocab)
    if n >= _k.MAX_WORDS:
        raise SettingError(f"the vocabulary has {n} words, more than the counter takes ({_k.MAX_WORDS - 1}); "
                           "raise --min-count or set --max-vocab")
    id_map = vocab.id_map(n_full)
    shards = make_shards(doc_offsets, doc_weights, shard_tokens)
    if not shards:
        return sp.csr_array((n, n), dtype=np.float64)
    tokens = np.asarray(tokens)
    if len(tokens) and int(tokens.max()) >= n_full:  # the kernels index id_map without bounds checks
        raise SettingError(f"token ids reach {int(tokens.max())}, beyond the vocabulary size given ({n_full})")
    pool = ThreadPool(workers or default_workers())
    check_count_memory(tokens, doc_offsets, doc_weights, id_map, n, settings, shard_tokens, pool)
    parts = []
    with tqdm(total=len(shards), desc="count", unit=" shards", disable=not progress, leave=False) as bar:
        for shard in shards:
            parts.append(count_shard(tokens, doc_offsets, shard, doc_weights, id_map, n, settings, pool))
            bar.update()
    upper = sum_upper(parts, n, pool)
    return to_csr(symmetrize_arrays(upper, n, pool), n) if symmetric else upper.to_csr(n)


@dataclasses.dataclass(frozen=True)
class Counts:
    """The co-occurrence counts of one slice (or any document weights).

    Attributes
    ----------
    matrix : scipy.sparse.csr_array of float64, shape (n, n)
        Symmetric weighted window counts.
    vocab : ModelVocab
        Its rows and columns.
    settings : CountSettings
    slice_name : str
    """

    matrix: sp.csr_array
    vocab: ModelVocab
    settings: CountSettings
    slice_name: str

    @cached_property
    def row_sums(self) -> np.ndarray:
        return np.asarray(self.matrix.sum(axis=1)).ravel()
