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

The work is split into shards of whole documents; each shard gives a CSR
matrix of its upper triangle, the shards are summed and the sum is made
symmetric once. A shard is a pure function of its inputs, so another engine can
take the shards.
"""

from __future__ import annotations

import dataclasses
import mmap
import os
import threading
import typing
from concurrent.futures import ThreadPoolExecutor
from functools import cached_property

import numpy as np
import scipy.sparse as sp
from tqdm.auto import tqdm

from tracer.core import _kernels as _k
from tracer.core.threads import ThreadPool, big_empty, default_workers
from tracer.errors import SettingError, SliceError

WEIGHTINGS = ("uniform", "harmonic", "linear")
DEFAULT_SHARD_TOKENS = 25_000_000


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


_MAX_WEIGHT_GROUPS = 32


@dataclasses.dataclass(frozen=True)
class Shard:
    """Documents counted together; ``weight`` is set when they all share one weight."""

    docs: np.ndarray
    weight: float | None


def make_shards(doc_offsets: np.ndarray, doc_weights: np.ndarray,
                shard_tokens: int = DEFAULT_SHARD_TOKENS) -> list[Shard]:
    """Split the documents with nonzero weight into shards of about ``shard_tokens`` tokens.

    When the weights take few distinct values (slices, bootstrap counts,
    per-source reweighting) each shard holds documents of one weight, and the
    weight multiplies the shard's sum once instead of every pair.
    """
    doc_weights = np.asarray(doc_weights, dtype=np.float64)
    docs = np.flatnonzero(doc_weights > 0)
    if len(docs) == 0:
        return []
    values, group = np.unique(doc_weights[docs], return_inverse=True)
    if len(values) <= _MAX_WEIGHT_GROUPS:
        groups = [(docs[group == g], float(values[g])) for g in range(len(values))]
    else:
        groups = [(docs, None)]
    shards = []
    for members, weight in groups:
        shards.extend(Shard(part, weight) for part in split_by_tokens(doc_offsets, members, shard_tokens))
    return shards


def split_by_tokens(doc_offsets: np.ndarray, docs: np.ndarray, size: int) -> list[np.ndarray]:
    """Consecutive runs of ``docs`` holding about ``size`` tokens each (whole documents)."""
    lengths = doc_offsets[docs + 1] - doc_offsets[docs]
    part_of = (np.cumsum(lengths) - 1) // max(1, size)
    return np.split(docs, np.flatnonzero(np.diff(part_of)) + 1)


def _row_blocks(row_ptr: np.ndarray, n_blocks: int) -> list[tuple[int, int]]:
    """Split rows into contiguous blocks holding about equal numbers of entries."""
    n = len(row_ptr) - 1
    targets = np.linspace(0, row_ptr[-1], n_blocks + 1)[1:-1]
    cuts = np.unique(np.concatenate([[0], np.searchsorted(row_ptr, targets), [n]]))
    return [(int(a), int(b)) for a, b in zip(cuts[:-1], cuts[1:]) if b > a] or [(0, n)]


class _Rows(typing.NamedTuple):
    """A sparse matrix as row ranges into shared arrays: row r is ``[row_start[r], row_end[r])``.

    Like CSR, but a row block may leave unused space after it, so threads can
    fill blocks in place without a final copy.
    """

    row_start: np.ndarray
    row_end: np.ndarray
    indices: np.ndarray
    data: np.ndarray

    def to_csr(self, n_words: int) -> sp.csr_array:
        """Compact into a CSR matrix, in place (the arrays are consumed)."""
        if len(self.row_start) and self.row_start[0] == 0 and np.array_equal(self.row_start[1:], self.row_end[:-1]):
            indptr = np.append(self.row_start, self.row_end[-1])  # already contiguous
            return to_csr((indptr, self.indices[:indptr[-1]], self.data[:indptr[-1]]), n_words)
        indptr = np.zeros(n_words + 1, np.int64)
        m = _k.compact_rows(self.row_start, self.row_end, self.indices, self.data, indptr)
        return to_csr((indptr, self.indices[:m], self.data[:m]), n_words)


def _scratch(n_words: int):
    """A zeroed accumulator and a column list for one thread's reductions."""
    return np.zeros(n_words, np.float64), np.empty(n_words, np.int32)


def narrow_codes(n_words: int, settings: CountSettings) -> bool:
    """Whether pairs fit in uint16 codes: few enough words, and no distance to keep."""
    return n_words <= _k.NARROW_MAX_WORDS and settings.weighting == "uniform"


def count_shard(tokens: np.ndarray, doc_offsets: np.ndarray, shard: Shard, doc_weights: np.ndarray,
                id_map: np.ndarray, n_words: int, settings: CountSettings, pool: ThreadPool) -> _Rows:
    """Upper triangle (with the diagonal) of the weighted counts of one shard of documents.

    Returns
    -------
    _Rows, shape (n_words, n_words), columns within a row unsorted
        ``C = U + U.T`` once all shards are summed. Its rows are contiguous (a CSR matrix).
    """
    tokens = np.asarray(tokens)
    doc_w = np.asarray(doc_weights, dtype=np.float64)
    window = settings.window
    per_pair = shard.weight is None
    narrow = narrow_codes(n_words, settings)
    n_shard_tokens = int((doc_offsets[shard.docs + 1] - doc_offsets[shard.docs]).sum())
    dist_w = settings.distance_weights()
    uniform = settings.weighting == "uniform"
    parts = []
    for docs in split_by_tokens(doc_offsets, shard.docs, -(-n_shard_tokens // pool.workers)):
        starts, ends = doc_offsets[docs], doc_offsets[docs + 1]
        # each thread maps one document at a time into its own buffer
        parts.append((starts, ends, doc_w[docs], np.empty(int((ends - starts).max(initial=0)), np.int32)))

    def lengths(starts, ends, _w, buf):
        length = np.zeros(n_words, np.int64)
        _k.row_lengths(tokens, starts, ends, id_map, window, buf, length)
        return length

    part_lengths = pool.map(lengths, parts)
    row_ptr = np.zeros(n_words + 1, np.int64)
    np.cumsum(np.sum(part_lengths, axis=0), out=row_ptr[1:])
    n_pairs = int(row_ptr[-1])
    # the pair array is written at random places: huge pages spare it TLB misses
    code16 = np.empty(n_pairs if narrow else 0, np.uint16)
    code32 = np.empty(0 if narrow else n_pairs, np.uint32)
    pair_w = np.empty(n_pairs if per_pair else 0, np.float64)
    # each part writes its pairs of row r after those of the parts before it
    pool.map(_k.scatter_pairs, [(tokens, starts, ends, id_map, window, buf, w, start, narrow, code16, code32,
                                 per_pair, pair_w)
                                for (starts, ends, w, buf), start in zip(parts, _block_offsets(row_ptr[:-1],
                                                                                              part_lengths))])
    code = code16 if narrow else code32
    blocks = _row_blocks(row_ptr, 2 * pool.workers)
    n_cells = np.zeros(n_words, np.int64)

    def count_block(r0, r1):
        _k.distinct_columns(row_ptr, code, r0, r1, np.full(n_words, -1, np.int32), n_cells)

    pool.map(count_block, blocks)
    out_ptr = np.zeros(n_words + 1, np.int64)
    np.cumsum(n_cells, out=out_ptr[1:])
    out = _Rows(out_ptr[:-1], out_ptr[1:], big_empty(out_ptr[-1], np.int32), big_empty(out_ptr[-1], np.float64))
    scale = 1.0 if per_pair else shard.weight

    def reduce_block(r0, r1):
        _k.reduce_rows(row_ptr, code, pair_w, dist_w, scale, r0, r1, per_pair, uniform, *_scratch(n_words),
                       out_ptr, out.indices, out.data)

    pool.map(reduce_block, blocks)
    return out


def sum_upper(parts: list[_Rows], n_words: int, pool: ThreadPool) -> _Rows:
    """Sum matrices of one shape into one (columns unsorted)."""
    if len(parts) == 1:
        return parts[0]
    sizes = np.cumsum([0] + [len(p.indices) for p in parts])
    starts = np.stack([p.row_start + off for p, off in zip(parts, sizes[:-1])])
    ends = np.stack([p.row_end + off for p, off in zip(parts, sizes[:-1])])
    indices = np.concatenate([p.indices for p in parts])
    data = np.concatenate([p.data for p in parts])
    combined = np.zeros(n_words + 1, np.int64)
    np.cumsum((ends - starts).sum(axis=0), out=combined[1:])
    out = _Rows(np.zeros(n_words, np.int64), np.zeros(n_words, np.int64),
                big_empty(combined[-1], np.int32), big_empty(combined[-1], np.float64))

    def sum_block(r0, r1):
        _k.sum_rows(starts, ends, indices, data, r0, r1, combined[r0], *_scratch(n_words), *out)

    pool.map(sum_block, _row_blocks(combined, 2 * pool.workers))
    return out


def symmetrize_arrays(upper: _Rows, n_words: int, pool: ThreadPool) -> tuple:
    """From the upper triangle U (rows in any order) to CSR arrays of U + U^T, rows sorted.

    Row x of the result is its lower part (columns < x, the mirror of U's
    column x) then its upper part (the diagonal, doubled, then columns > x).
    Both parts are written by counting-sort scatters, so they come out sorted
    without sorting anything.
    """
    upper_len = upper.row_end - upper.row_start
    upper_ptr = np.zeros(n_words + 1, np.int64)
    np.cumsum(upper_len, out=upper_ptr[1:])
    blocks = _row_blocks(upper_ptr, pool.workers)
    col_counts = [np.zeros(n_words, np.int64) for _ in blocks]
    pool.map(_k.column_counts, [(upper.row_start, upper.row_end, upper.indices, r0, r1, cnt)
                                for (r0, r1), cnt in zip(blocks, col_counts)])
    lower_len = np.sum(col_counts, axis=0)
    full_ptr = np.zeros(n_words + 1, np.int64)
    np.cumsum(lower_len + upper_len, out=full_ptr[1:])
    out_idx = big_empty(full_ptr[-1], np.int32)
    out_val = big_empty(full_ptr[-1], np.float64)
    diag = np.zeros(n_words, np.float64)
    pool.map(_k.symmetrize_lower, [(upper.row_start, upper.row_end, upper.indices, upper.data, r0, r1, start,
                                    out_idx, out_val, diag)
                                   for (r0, r1), start in zip(blocks, _block_offsets(full_ptr[:-1], col_counts))])
    has_diag = diag > 0
    upper_start = full_ptr[:-1] + lower_len
    out_idx[upper_start[has_diag]] = np.flatnonzero(has_diag)
    out_val[upper_start[has_diag]] = 2.0 * diag[has_diag]
    lower_ptr = np.zeros(n_words + 1, np.int64)
    np.cumsum(lower_len, out=lower_ptr[1:])
    lblocks = _row_blocks(lower_ptr, pool.workers)
    counts = [np.zeros(n_words, np.int64) for _ in lblocks]
    pool.map(_k.lower_column_counts, [(full_ptr, lower_len, out_idx, r0, r1, cnt)
                                      for (r0, r1), cnt in zip(lblocks, counts)])
    pool.map(_k.symmetrize_upper, [(full_ptr, lower_len, r0, r1, start, out_idx, out_val) for (r0, r1), start
                                   in zip(lblocks, _block_offsets(upper_start + has_diag, counts))])
    return full_ptr, out_idx, out_val


def _block_offsets(base: np.ndarray, counts: list[np.ndarray]) -> list[np.ndarray]:
    """Where each block's entries of each row start: after ``base`` and the earlier blocks' entries."""
    starts, pos = [], base.copy()
    for cnt in counts:
        starts.append(pos.copy())
        pos += cnt
    return starts


def to_csr(arrays: tuple, n_words: int) -> sp.csr_array:
    """Wrap CSR arrays in a scipy matrix without copying the indices."""
    indptr, indices, data = arrays
    if indptr[-1] < np.iinfo(np.int32).max:
        indptr = indptr.astype(np.int32)
    else:
        indices = indices.astype(np.int64)
    return sp.csr_array((data, indices, indptr), shape=(n_words, n_words), copy=False)


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
