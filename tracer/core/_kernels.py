"""Compiled kernels (numba, nogil: threads run them in parallel): the co-occurrence counter, the
linear influence score of :mod:`tracer.analysis.influence`, and at the end the sparse products of
:mod:`tracer.core.sparse_products`.

The window semantics (which pairs a window makes, their distance weights) are those of
:mod:`tracer.core.counting`; the kernels take the weights from
``CountSettings.distance_weights`` and ``counting.cumulative_weights`` and never define
their own. Why the window loops are not one shared helper is said there.

The counter works in four steps, each split so that threads share the work:

1. ``row_lengths``: per part of the documents, the number of pairs per row (a
   pair's row is its smaller id); each document's tokens are mapped to model
   ids, out-of-vocabulary ones removed, in a small buffer just before use;
2. ``scatter_pairs``: every part writes its pairs into one shared array, row by
   row, each part into its own reserved range of each row (no two threads
   write the same place);
3. ``distinct_columns``: a block of rows at a time, the number of cells each
   row will have, so the output is allocated exactly once, at its final size;
4. ``reduce_rows``: a block of rows at a time, the pairs of a row are summed
   with a dense accumulator into CSR arrays (columns unsorted).

Memory is the cost that matters most: on the virtual machines this runs on,
touching fresh memory costs more than the counting itself, so the pair array is
kept as small as the settings allow. A pair is stored as one uint16 (the larger
id) when the vocabulary has at most 65,536 words and the weighting is uniform
(so the distance need not be kept); otherwise as one uint32: the larger id, with
the distance - 1 in the top ``DIST_BITS`` bits. ``symmetrize_lower`` and ``symmetrize_upper`` turn the summed
upper triangle U into U + U^T with sorted rows: two mirror passes, each a
counting-sort scatter, in row blocks.
"""

import numba
import numpy as np

DIST_BITS = 5
COL_BITS = 32 - DIST_BITS
COL_MASK = (1 << COL_BITS) - 1
MAX_WINDOW = 1 << DIST_BITS
MAX_WORDS = 1 << COL_BITS
NARROW_MAX_WORDS = 1 << 16

# pragma: no cover - the bodies below are compiled; tests reach them through tracer.core.counting


@numba.njit(nogil=True, cache=True)
def _map_doc(tokens, a, b, id_map, buf):
    """Model ids of tokens a..b-1 into ``buf``, out-of-vocabulary ones removed; returns how many."""
    n = 0
    for i in range(a, b):
        x = id_map[tokens[i]]
        buf[n] = x
        n += x >= 0
    return n


@numba.njit(nogil=True, cache=True)
def row_lengths(tokens, starts, ends, id_map, window, buf, length):
    """Add the pairs per row (the smaller id of the pair) of documents [starts, ends) to ``length``.

    Each document is mapped into the small reused buffer ``buf`` (as long as the
    longest document) just before it is windowed, so no corpus-sized array of
    model ids is ever made.
    """
    for d in range(starts.shape[0]):
        n = _map_doc(tokens, starts[d], ends[d], id_map, buf)
        for i in range(n):
            x = buf[i]
            e = min(i + window, n - 1)
            for j in range(i + 1, e + 1):
                length[min(x, buf[j])] += 1


@numba.njit(nogil=True, cache=True)
def scatter_pairs(tokens, starts, ends, id_map, window, buf, doc_w, pos, narrow, code16, code32,
                  per_pair, pair_w):
    """Write each pair's code at ``pos[row]``, advancing it (and its weight if ``per_pair``).

    Narrow codes (uint16, ``code16``) are the larger id alone; wide codes (uint32,
    ``code32``) carry the distance - 1 in the top ``DIST_BITS`` bits as well.
    """
    for d in range(starts.shape[0]):
        n = _map_doc(tokens, starts[d], ends[d], id_map, buf)
        w = doc_w[d]
        for i in range(n):
            x = buf[i]
            e = min(i + window, n - 1)
            for j in range(i + 1, e + 1):
                y = buf[j]
                lo = min(x, y)
                p = pos[lo]
                if narrow:
                    code16[p] = np.uint16(max(x, y))
                else:
                    code32[p] = np.uint32(max(x, y)) | np.uint32((j - i - 1) << COL_BITS)
                if per_pair:
                    pair_w[p] = w
                pos[lo] = p + 1


@numba.njit(nogil=True, cache=True)
def distinct_columns(row_ptr, code, r0, r1, mark, n_cells):
    """``n_cells[r]`` = the number of different columns among the pairs of row r, rows r0..r1-1.

    ``mark`` (length n_words, all -1 on first use) remembers the last row that saw a column.
    """
    for r in range(r0, r1):
        t = 0
        for k in range(row_ptr[r], row_ptr[r + 1]):
            c = code[k] & COL_MASK
            if mark[c] != r:
                mark[c] = r
                t += 1
        n_cells[r] = t


@numba.njit(nogil=True, cache=True)
def reduce_rows(row_ptr, code, pair_w, dist_w, scale, r0, r1, per_pair, uniform,
                acc, touched, out_ptr, out_idx, out_val):
    """Sum the pairs of rows r0..r1-1 into CSR arrays: row r goes to ``out_ptr[r]`` onwards.

    ``out_ptr`` comes from ``distinct_columns``, so every row has exactly its
    room and blocks of rows can be reduced by different threads.
    Columns come in order of first appearance, not sorted: sorting here cost more
    than the whole reduction, and the symmetrize passes put rows in order with
    two linear scatters. Every pair's value is positive (zero-weight documents
    are never counted), so a zero in the accumulator ``acc`` (all zeros on entry
    and on exit) means "not seen in this row yet".
    """
    for r in range(r0, r1):
        m = out_ptr[r]
        t = 0
        for k in range(row_ptr[r], row_ptr[r + 1]):
            c = code[k] & COL_MASK
            if uniform:
                v = 1.0
            else:
                v = dist_w[code[k] >> COL_BITS]
            if per_pair:
                v *= pair_w[k]
            if acc[c] == 0.0:
                touched[t] = c
                t += 1
            acc[c] += v
        for q in range(t):
            c = touched[q]
            out_idx[m] = c
            out_val[m] = acc[c] * scale
            acc[c] = 0.0
            m += 1


@numba.njit(nogil=True, cache=True)
def sum_rows(starts, ends, indices, data, r0, r1, out_start, acc, touched, row_start, row_end, out_idx, out_val):
    """Sum k matrices given as row ranges (``starts``, ``ends``: shape (k, n)) over shared arrays,
    for rows r0..r1-1, writing from ``out_start``. Values are positive; columns left unsorted."""
    k_mats = starts.shape[0]
    m = out_start
    for r in range(r0, r1):
        row_start[r] = m
        t = 0
        for s in range(k_mats):
            for k in range(starts[s, r], ends[s, r]):
                c = indices[k]
                if acc[c] == 0.0:
                    touched[t] = c
                    t += 1
                acc[c] += data[k]
        for q in range(t):
            c = touched[q]
            out_idx[m] = c
            out_val[m] = acc[c]
            acc[c] = 0.0
            m += 1
        row_end[r] = m


@numba.njit(nogil=True, cache=True)
def column_counts(row_start, row_end, indices, r0, r1, count):
    """Add the off-diagonal entries per column in rows r0..r1-1 of an upper triangle to ``count``."""
    for r in range(r0, r1):
        for k in range(row_start[r], row_end[r]):
            c = indices[k]
            if c != r:
                count[c] += 1


@numba.njit(nogil=True, cache=True)
def symmetrize_lower(row_start, row_end, indices, data, r0, r1, lower_pos, out_idx, out_val, diag):
    """First pass of U + U^T: the mirror image of U's rows r0..r1-1 into the lower parts.

    Entry (r, c) of U, c > r, goes to row c, column r, at ``lower_pos[c]`` (this
    block's own range of row c). Rows r arrive in ascending order, so every lower
    part comes out sorted. Diagonal values are collected in ``diag``.
    """
    for r in range(r0, r1):
        for k in range(row_start[r], row_end[r]):
            c = indices[k]
            if c != r:
                q = lower_pos[c]
                out_idx[q] = r
                out_val[q] = data[k]
                lower_pos[c] = q + 1
            else:
                diag[r] = data[k]


@numba.njit(nogil=True, cache=True)
def lower_column_counts(full_ptr, lower_len, out_idx, r0, r1, count):
    """Add the entries per column in the lower parts of rows r0..r1-1 to ``count``."""
    for c in range(r0, r1):
        for q in range(full_ptr[c], full_ptr[c] + lower_len[c]):
            count[out_idx[q]] += 1


@numba.njit(nogil=True, cache=True)
def symmetrize_upper(full_ptr, lower_len, r0, r1, upper_pos, out_idx, out_val):
    """Second pass: the upper parts, as the mirror image of the (sorted) lower parts.

    Lower entry (c, x), x < c, of rows c in r0..r1-1 goes to row x, column c, at
    ``upper_pos[x]``; rows c arrive in ascending order, so upper parts come out sorted.
    """
    for c in range(r0, r1):
        for q in range(full_ptr[c], full_ptr[c] + lower_len[c]):
            x = out_idx[q]
            p = upper_pos[x]
            out_idx[p] = c
            out_val[p] = out_val[q]
            upper_pos[x] = p + 1


@numba.njit(nogil=True, cache=True)
def compact_rows(row_start, row_end, indices, data, indptr):
    """Close the gaps between rows in place (rows move only towards the front); fill ``indptr``."""
    m = 0
    indptr[0] = 0
    for r in range(row_start.shape[0]):
        for k in range(row_start[r], row_end[r]):
            indices[m] = indices[k]
            data[m] = data[k]
            m += 1
        indptr[r + 1] = m
    return m


# ---- the linear influence score of tracer.analysis.influence --------------------------------

@numba.njit(nogil=True, cache=True)
def linear_scores(tokens, starts, ends, id_map, doc_w, dist_w, cum_w, probe_row, K, u, buf, probe_pos, out):
    """``out[d] = w_d * (sum_t nb(t) u[id_t] - sum_{t a probe word} sum_k dist_w[|k|-1] K[row(t), id_{t+k}])``.

    One pass over the tokens: for each document, its in-vocabulary tokens are
    mapped into ``buf`` while ``u`` is summed over them and the places of probe
    words are noted in ``probe_pos``; then the few tokens near either end, whose
    windowed neighbour weight ``nb(t)`` (their share of the row sums) is below a
    full window's, are corrected, and each probe-word occurrence adds its
    neighbours within the window on both sides (its share of the probe rows of
    the counts). That is ``<u, r^d> - <K, C^d>`` without ever building ``r^d``
    or ``C^d``. ``cum_w`` is ``tracer.core.counting.cumulative_weights(dist_w)``;
    ``nb(t)`` is ``tracer.core.counting.neighbour_weight``, applied here as a full
    window's weight less an edge correction (fewer operations per token, and the
    order of summation the results were fixed with).
    """
    window = dist_w.shape[0]
    full = cum_w[window]
    for d in range(starts.shape[0]):
        w = doc_w[d]
        if w == 0.0:
            out[d] = 0.0
            continue
        n = 0
        n_probe = 0
        s_u = 0.0
        for t in range(starts[d], ends[d]):
            x = id_map[tokens[t]]
            if x >= 0:
                buf[n] = x
                s_u += u[x]
                if probe_row[x] >= 0:
                    probe_pos[n_probe] = n
                    n_probe += 1
                n += 1
        s_rows = 2.0 * full * s_u
        for i in range(min(n, window)):                      # short of a full window on the left
            s_rows -= (full - cum_w[i]) * u[buf[i]]
        for i in range(max(0, n - window), n):               # and on the right
            s_rows -= (full - cum_w[n - 1 - i]) * u[buf[i]]
        s_probe = 0.0
        for q in range(n_probe):
            i = probe_pos[q]
            row = K[probe_row[buf[i]]]
            for dd in range(1, min(window, i) + 1):
                s_probe += dist_w[dd - 1] * row[buf[i - dd]]
            for dd in range(1, min(window, n - 1 - i) + 1):
                s_probe += dist_w[dd - 1] * row[buf[i + dd]]
        out[d] = w * (s_rows - s_probe)


# ---- the sparse products of tracer.core.sparse_products ------------------------------------
# ``indptr`` and ``indices`` come unsigned (uint64, and uint32 or uint64): with signed indices
# numba checks every access for a negative index, which made the products twice as slow as scipy's.

@numba.njit(nogil=True, cache=True)
def csr_matvec_rows(indptr, indices, data, x, r0, r1, out):
    """``out[i] = sum_k data[k] * x[indices[k]]`` over row i's entries, rows r0..r1-1.

    Each row is summed from 0.0 in its stored order, as scipy's ``csr_matvec`` does, so
    the result is the same bit for bit (no reordering, no fused multiply-add).
    """
    one = np.uint64(1)
    for i in range(r0, r1):
        s = 0.0
        k, end = indptr[i], indptr[i + 1]
        while k < end:
            s += data[k] * x[indices[k]]
            k += one
        out[i] = s


@numba.njit(nogil=True, cache=True)
def csr_matmat_rows(indptr, indices, data, x, r0, r1, out):
    """``out[i, :] = sum_k data[k] * x[indices[k], :]``, rows r0..r1-1 (``out`` zeroed there).

    Each output element adds row i's entries in their stored order, as scipy's
    ``csr_matvecs`` does (an axpy per entry), so the result is the same bit for bit.
    """
    one = np.uint64(1)
    n_vec = x.shape[1]
    for i in range(r0, r1):
        for c in range(n_vec):
            out[i, c] = 0.0
        k, end = indptr[i], indptr[i + 1]
        while k < end:
            a = data[k]
            j = indices[k]
            for c in range(n_vec):
                out[i, c] += a * x[j, c]
            k += one


@numba.njit(nogil=True, cache=True)
def csr_gram_matvec(indptr, indices, data, x, r0, r1, out):
    """``out = A[r0:r1]^T (A[r0:r1] x)`` in one pass over those rows: ``t = a_i . x``, then
    ``out += t a_i``.

    For the whole matrix (``r0 = 0``, ``r1`` the rows) these are the same operations in the same
    order as scipy's ``A^T (A x)`` (``csr_matvec`` for ``A x``, then ``csc_matvec`` on ``A^T``,
    which adds row i's entries times ``(A x)_i`` for i ascending), so the result is the same bit
    for bit; each row is read once, while it is in cache, instead of twice.
    """
    one = np.uint64(1)
    for c in range(out.shape[0]):
        out[c] = 0.0
    for i in range(r0, r1):
        s = 0.0
        k, end = indptr[i], indptr[i + 1]
        while k < end:
            s += data[k] * x[indices[k]]
            k += one
        k = indptr[i]
        while k < end:
            out[indices[k]] += data[k] * s
            k += one
