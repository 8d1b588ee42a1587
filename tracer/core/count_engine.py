"""How :func:`tracer.core.counting.count_matrix` counts: shards, pair arrays, row blocks, symmetry.

The work is split into shards of whole documents; each shard gives a CSR
matrix of its upper triangle, the shards are summed and the sum is made
symmetric once. A shard is a pure function of its inputs, so another engine can
take the shards. The compiled steps are in :mod:`tracer.core._kernels`; here they
are cut into pieces for the threads and their arrays are allocated.
"""

from __future__ import annotations

import dataclasses
import typing

import numpy as np
import scipy.sparse as sp

from tracer.core import _kernels as _k
from tracer.core.threads import ThreadPool, big_empty

DEFAULT_SHARD_TOKENS = 25_000_000


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


def narrow_codes(n_words: int, settings) -> bool:
    """Whether pairs fit in uint16 codes: few enough words, and no distance to keep (``settings``:
    a :class:`tracer.core.counting.CountSettings`)."""
    return n_words <= _k.NARROW_MAX_WORDS and settings.weighting == "uniform"


def count_shard(tokens: np.ndarray, doc_offsets: np.ndarray, shard: Shard, doc_weights: np.ndarray,
                id_map: np.ndarray, n_words: int, settings, pool: ThreadPool) -> _Rows:
    """Upper triangle (with the diagonal) of the weighted counts of one shard of documents, counted
    under ``settings`` (a :class:`tracer.core.counting.CountSettings`).

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
