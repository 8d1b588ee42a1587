"""Each document's share of a slice's counts: its part of the row sums and of the probe words' rows.

Removing document d from a slice removes its weighted counts ``C^d`` and so its share
``r^d`` of the row sums. The attribution (:mod:`tracer.analysis.influence`) needs ``r^d``
for every document and ``C^d`` for the rows of the few probe words; both come from the
token stream the counter saw (:func:`kept_stream`), with the window semantics and
distance weights of :mod:`tracer.core.counting`.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from tracer.core.counting import Counts, cumulative_weights, kept_tokens, neighbour_weight


@dataclasses.dataclass(frozen=True)
class Stream:
    """The tokens a count sees, in order: in-vocabulary tokens of documents with nonzero weight.

    Attributes (one value per kept token)
    ----------
    ids : int64 model ids;  doc : document index;  pos : original token position;
    start, end : the kept-token range of the token's document.
    """

    ids: np.ndarray
    doc: np.ndarray
    pos: np.ndarray
    start: np.ndarray
    end: np.ndarray


def kept_stream(ws, weights: np.ndarray, counts: Counts) -> Stream:
    """The kept tokens of the workspace ``ws`` under ``weights`` (shape (n_docs,)) and the model
    vocabulary of ``counts``, as the counter windows them (out-of-vocabulary tokens removed first)."""
    docs = np.flatnonzero(np.asarray(weights) > 0)
    kept = kept_tokens(ws.tokens, ws.doc_offsets, docs, counts.vocab.id_map(len(ws.vocab)))
    start = kept.first[kept.owner]
    return Stream(kept.ids, docs[kept.owner], kept.pos, start, start + kept.lengths[kept.owner])


def document_row_sums(stream: Stream, weights: np.ndarray, dist_w: np.ndarray, n_docs: int,
                      n_words: int) -> sp.csr_array:
    """r^d: each document's weighted contribution to every row sum, shape (n_docs, n_words).

    Every occurrence adds its document's weight times its neighbour weight
    (:func:`tracer.core.counting.neighbour_weight`) to its word's row sum.
    """
    i = np.arange(len(stream.ids))
    nb = neighbour_weight(i - stream.start, stream.end - 1 - i, cumulative_weights(dist_w))
    vals = nb * weights[stream.doc]
    return sp.csr_array((vals, (stream.doc, stream.ids)), shape=(n_docs, n_words))


def document_probe_rows(stream: Stream, weights: np.ndarray, dist_w: np.ndarray, probe_ids: np.ndarray,
                        n_docs: int, n_words: int) -> sp.csr_array:
    """C^d of the probe words' rows for every document, shape (n_probe * n_docs, n_words):
    row ``k * n_docs + d`` is document d's part of probe word k's row.

    One pass over the probe words' occurrences: each occurrence adds the weight of
    every neighbour within the window (a neighbour of the same word adds to the
    diagonal twice over, once from each side, as in the symmetric counts).
    """
    window = len(dist_w)
    probe_row = np.full(n_words, -1, np.int64)
    probe_row[probe_ids] = np.arange(len(probe_ids))
    q = np.flatnonzero(probe_row[stream.ids] >= 0)
    block = probe_row[stream.ids[q]] * n_docs
    rows, cols, vals = [], [], []
    for delta in range(1, window + 1):
        for side in (q + delta, q - delta):
            ok = (side >= stream.start[q]) & (side < stream.end[q])
            src = q[ok]
            doc = stream.doc[src]
            rows.append(block[ok] + doc)
            cols.append(stream.ids[side[ok]])
            vals.append(dist_w[delta - 1] * weights[doc])
    return sp.csr_array((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                        shape=(len(probe_ids) * n_docs, n_words))


def rows_sum(m: sp.csr_array, rows: np.ndarray, groups: np.ndarray | None = None, n_groups: int = 1) -> np.ndarray:
    """Sums of the given rows of a CSR matrix, dense, vectorised over the row ranges: one vector
    (shape (n_cols,)), or with ``groups`` (one label per row, below ``n_groups``) one per group
    (shape (n_groups, n_cols))."""
    starts, ends = m.indptr[rows], m.indptr[rows + 1]
    lengths = ends - starts
    total = int(lengths.sum())
    n_cols = m.shape[1]
    offsets = np.cumsum(lengths) - lengths
    pos = np.repeat(starts - offsets, lengths) + np.arange(total)
    if groups is None:
        return np.bincount(m.indices[pos], weights=m.data[pos], minlength=n_cols)
    key = np.repeat(np.asarray(groups, np.int64) * n_cols, lengths) + m.indices[pos]
    return np.bincount(key, weights=m.data[pos], minlength=n_groups * n_cols).reshape(n_groups, n_cols)
