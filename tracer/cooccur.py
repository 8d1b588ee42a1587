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
import os
from concurrent.futures import ThreadPoolExecutor
from functools import cached_property

import numba
import numpy as np
import scipy.sparse as sp
from tqdm.auto import tqdm

from .errors import SettingError, SliceError

WEIGHTINGS = ("uniform", "harmonic", "linear")
DEFAULT_SHARD_TOKENS = 8_000_000


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


_DIST_BITS = 5
_COL_BITS = 32 - _DIST_BITS
_COL_MASK = (1 << _COL_BITS) - 1
MAX_WINDOW = 1 << _DIST_BITS
MAX_WORDS = 1 << _COL_BITS


@numba.njit(nogil=True, cache=True)
def _map_ids(tokens, starts, ends, id_map):  # pragma: no cover - compiled
    """Model ids of the shard's tokens with out-of-vocabulary tokens removed, and new doc starts."""
    n_docs = starts.shape[0]
    total = 0
    for d in range(n_docs):
        total += ends[d] - starts[d]
    ids = np.empty(total, np.int32)
    kept = np.empty(n_docs + 1, np.int64)
    kept[0] = 0
    n = 0
    for d in range(n_docs):
        for i in range(starts[d], ends[d]):
            x = id_map[tokens[i]]
            ids[n] = x
            n += x >= 0
        kept[d + 1] = n
    return ids[:n], kept


@numba.njit(nogil=True, cache=True)
def _bucket_pairs(ids, kept, doc_w, window, n_words, per_pair):  # pragma: no cover - compiled
    """Group every pair by its smaller id (the row).

    Each pair is stored as one uint32 code, the larger id with the distance - 1
    in the top bits; the document weight goes in a parallel array only when the
    shard's documents differ in weight (``per_pair``).
    """
    n_docs = kept.shape[0] - 1
    row_ptr = np.zeros(n_words + 1, np.int64)
    for d in range(n_docs):
        a, b = kept[d], kept[d + 1]
        for i in range(a, b):
            x = ids[i]
            e = min(i + window, b - 1)
            for j in range(i + 1, e + 1):
                row_ptr[min(x, ids[j]) + 1] += 1
    for r in range(n_words):
        row_ptr[r + 1] += row_ptr[r]
    n_pairs = row_ptr[n_words]
    pos = row_ptr[:n_words].copy()
    code = np.empty(n_pairs, np.uint32)
    pair_w = np.empty(n_pairs if per_pair else 0, np.float64)
    for d in range(n_docs):
        a, b = kept[d], kept[d + 1]
        w = doc_w[d]
        for i in range(a, b):
            x = ids[i]
            e = min(i + window, b - 1)
            for j in range(i + 1, e + 1):
                y = ids[j]
                lo = min(x, y)
                p = pos[lo]
                code[p] = np.uint32(max(x, y)) | np.uint32((j - i - 1) << _COL_BITS)
                if per_pair:
                    pair_w[p] = w
                pos[lo] = p + 1
    return row_ptr, code, pair_w


@numba.njit(nogil=True, cache=True)
def _reduce_rows(row_ptr, code, pair_w, dist_w, scale, n_words, per_pair):  # pragma: no cover
    """Sum each row's pairs into CSR arrays with ascending columns, times ``scale``."""
    acc = np.zeros(n_words, np.float64)
    mark = np.full(n_words, -1, np.int32)
    touched = np.empty(n_words, np.int32)
    indptr = np.zeros(n_words + 1, np.int64)
    out_idx = np.empty(code.shape[0], np.int32)
    out_val = np.empty(code.shape[0], np.float64)
    m = 0
    for r in range(n_words):
        t = 0
        for k in range(row_ptr[r], row_ptr[r + 1]):
            c = code[k] & _COL_MASK
            v = dist_w[code[k] >> _COL_BITS]
            if per_pair:
                v *= pair_w[k]
            if mark[c] != r:
                mark[c] = r
                acc[c] = v
                touched[t] = c
                t += 1
            else:
                acc[c] += v
        if t > 0:
            if t * 16 > n_words - r:  # a dense row: a scan beats a sort
                for c in range(r, n_words):
                    if mark[c] == r:
                        out_idx[m] = c
                        out_val[m] = acc[c] * scale
                        m += 1
            else:
                cols = np.sort(touched[:t])
                for q in range(t):
                    out_idx[m] = cols[q]
                    out_val[m] = acc[cols[q]] * scale
                    m += 1
        indptr[r + 1] = m
    return indptr, out_idx[:m].copy(), out_val[:m].copy()


@numba.njit(nogil=True, cache=True)
def _sum_rows(indptrs, indices, data, n_words):  # pragma: no cover - compiled
    """Sum k CSR matrices given as stacked indptrs (k, n+1) over shared index/data arrays."""
    k_mats = indptrs.shape[0]
    acc = np.zeros(n_words, np.float64)
    mark = np.full(n_words, -1, np.int32)
    touched = np.empty(n_words, np.int32)
    indptr = np.zeros(n_words + 1, np.int64)
    out_idx = np.empty(indices.shape[0], np.int32)
    out_val = np.empty(indices.shape[0], np.float64)
    m = 0
    for r in range(n_words):
        t = 0
        for s in range(k_mats):
            for k in range(indptrs[s, r], indptrs[s, r + 1]):
                c = indices[k]
                if mark[c] != r:
                    mark[c] = r
                    acc[c] = data[k]
                    touched[t] = c
                    t += 1
                else:
                    acc[c] += data[k]
        if t > 0:
            cols = np.sort(touched[:t])
            for q in range(t):
                out_idx[m] = cols[q]
                out_val[m] = acc[cols[q]]
                m += 1
        indptr[r + 1] = m
    return indptr, out_idx[:m].copy(), out_val[:m].copy()


@numba.njit(nogil=True, cache=True)
def _symmetrize(indptr, indices, data, n_words):  # pragma: no cover - compiled
    """U + U^T for an upper-triangular CSR U with sorted rows; the diagonal doubles."""
    length = np.zeros(n_words + 1, np.int64)
    for r in range(n_words):
        for k in range(indptr[r], indptr[r + 1]):
            c = indices[k]
            length[r + 1] += 1
            if c != r:
                length[c + 1] += 1
    for r in range(n_words):
        length[r + 1] += length[r]
    out_idx = np.empty(length[n_words], np.int32)
    out_val = np.empty(length[n_words], np.float64)
    fill = length[:n_words].copy()
    # the mirrored (lower) entries of row c arrive in ascending row order, and all
    # of them sit left of the diagonal, so each row is written already sorted
    for r in range(n_words):
        for k in range(indptr[r], indptr[r + 1]):
            c = indices[k]
            if c != r:
                p = fill[c]
                out_idx[p] = r
                out_val[p] = data[k]
                fill[c] = p + 1
        for k in range(indptr[r], indptr[r + 1]):
            c = indices[k]
            p = fill[r]
            out_idx[p] = c
            out_val[p] = data[k] * 2.0 if c == r else data[k]
            fill[r] = p + 1
    return length, out_idx, out_val


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
        lengths = doc_offsets[members + 1] - doc_offsets[members]
        shard_of = (np.cumsum(lengths) - 1) // max(1, shard_tokens)
        cuts = np.flatnonzero(np.diff(shard_of)) + 1
        shards.extend(Shard(part, weight) for part in np.split(members, cuts))
    return shards


def count_shard(tokens: np.ndarray, doc_offsets: np.ndarray, shard: Shard, doc_weights: np.ndarray,
                id_map: np.ndarray, n_words: int, settings: CountSettings) -> tuple:
    """Upper triangle (with the diagonal) of the weighted counts of one shard of documents.

    Returns
    -------
    (indptr, indices, data) : CSR arrays of shape (n_words, n_words), sorted rows
        ``C = U + U.T`` once all shards are summed.
    """
    docs = shard.docs
    ids, kept = _map_ids(np.asarray(tokens), doc_offsets[docs], doc_offsets[docs + 1], id_map)
    per_pair = shard.weight is None
    row_ptr, code, pair_w = _bucket_pairs(ids, kept, np.asarray(doc_weights, dtype=np.float64)[docs],
                                          settings.window, n_words, per_pair)
    return _reduce_rows(row_ptr, code, pair_w, settings.distance_weights(),
                        1.0 if per_pair else shard.weight, n_words, per_pair)


def sum_upper(parts: list[tuple], n_words: int) -> tuple:
    """Sum CSR arrays (indptr, indices, data) of one shape, rows sorted, into one."""
    if len(parts) == 1:
        return parts[0]
    sizes = np.cumsum([0] + [len(p[1]) for p in parts])
    indptrs = np.stack([p[0] + off for p, off in zip(parts, sizes[:-1])])
    return _sum_rows(indptrs, np.concatenate([p[1] for p in parts]), np.concatenate([p[2] for p in parts]),
                     n_words)


def to_csr(arrays: tuple, n_words: int) -> sp.csr_array:
    """Wrap CSR arrays in a scipy matrix without copying the indices."""
    indptr, indices, data = arrays
    if indptr[-1] < np.iinfo(np.int32).max:
        indptr = indptr.astype(np.int32)
    else:
        indices = indices.astype(np.int64)
    return sp.csr_array((data, indices, indptr), shape=(n_words, n_words), copy=False)


def symmetrize(upper: sp.csr_array) -> sp.csr_array:
    """From upper-triangle counts U (canonical CSR) to the symmetric matrix U + U^T."""
    n = upper.shape[0]
    return to_csr(_symmetrize(upper.indptr.astype(np.int64), upper.indices.astype(np.int32),
                              upper.data.astype(np.float64), n), n)


def default_workers() -> int:
    """Cores this process may use (at most 8)."""
    n = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return max(1, min(n, 8))


def count_matrix(tokens: np.ndarray, doc_offsets: np.ndarray, doc_weights: np.ndarray,
                 vocab: ModelVocab, n_full: int, settings: CountSettings, *,
                 workers: int | None = None, shard_tokens: int = DEFAULT_SHARD_TOKENS,
                 progress: bool = False) -> sp.csr_array:
    """Weighted symmetric co-occurrence counts over the model vocabulary.

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
        Threads counting shards at once (default: the cores available).
    shard_tokens : int
        Tokens per shard.
    progress : bool
        Show a progress bar over shards.

    Returns
    -------
    scipy.sparse.csr_array of float64, shape (len(vocab), len(vocab))
        Symmetric, canonical (sorted indices, no duplicates).
    """
    doc_weights = np.asarray(doc_weights, dtype=np.float64)
    if doc_weights.shape != (len(doc_offsets) - 1,):
        raise SettingError(f"doc_weights must have one value per document ({len(doc_offsets) - 1}); "
                           f"got shape {doc_weights.shape}")
    if np.any(doc_weights < 0) or not np.all(np.isfinite(doc_weights)):
        raise SettingError("document weights must be finite and non-negative")
    if settings.window > MAX_WINDOW:
        raise SettingError(f"window must be at most {MAX_WINDOW}; got {settings.window}")
    n = len(vocab)
    if n >= MAX_WORDS:
        raise SettingError(f"the vocabulary has {n} words, more than the counter takes ({MAX_WORDS - 1}); "
                           "raise --min-count or set --max-vocab")
    id_map = vocab.id_map(n_full)
    shards = make_shards(doc_offsets, doc_weights, shard_tokens)
    if not shards:
        return sp.csr_array((n, n), dtype=np.float64)
    # the compiled kernels take int32 ids; check the bound once here
    if n_full and int(np.asarray(tokens).max(initial=0)) >= n_full:
        raise SettingError("token ids exceed the vocabulary size given")
    workers = workers or default_workers()
    tokens = np.asarray(tokens)

    def run(shard):
        return count_shard(tokens, doc_offsets, shard, doc_weights, id_map, n, settings)

    with tqdm(total=len(shards), desc="count", unit=" shards", disable=not progress, leave=False) as bar:
        parts = []
        if workers == 1 or len(shards) == 1:
            for shard in shards:
                parts.append(run(shard))
                bar.update()
        else:
            with ThreadPoolExecutor(max_workers=workers) as pool:
                for m in pool.map(run, shards):
                    parts.append(m)
                    bar.update()
    return to_csr(_symmetrize(*sum_upper(parts, n), n), n)


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


def count_slice(ws, weights: np.ndarray, settings: CountSettings, *, slice_name: str = "custom",
                vocab: ModelVocab | None = None, workers: int | None = None,
                progress: bool = False) -> Counts:
    """Count a workspace under document weights (a slice's, a resample's, a reweighting's).

    The vocabulary is built from the documents of nonzero weight unless given,
    so resamples of one slice can share the slice's vocabulary.
    """
    words = ws.vocab.words
    if vocab is None:
        try:
            vocab = build_vocab(ws.tokens, ws.doc_offsets, weights, words, settings)
        except SliceError as e:
            raise SliceError(f"slice {slice_name}: {e}") from None
    matrix = count_matrix(ws.tokens, ws.doc_offsets, weights, vocab, len(words), settings,
                          workers=workers, progress=progress)
    return Counts(matrix, vocab, settings, slice_name)
