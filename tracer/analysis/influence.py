"""Attribution: how much each document (or source) contributes to a measured association.

Notation: counts C of a slice, row sums r, ``Z = sum_k r_k ** alpha``, PPMI matrix M,
PPMI-SVD embedding ``W = U_k S_k ** p = M V_k S_k ** (p - 1)``. Removing document d
removes its weighted counts ``C^d`` (and so ``r^d``, :mod:`tracer.analysis.document_counts`).
Only the rows of the probe words (the test's targets and attributes) of M and W enter the
association, so only those rows are kept, dense. The PMI and the association statistics
are those of :mod:`tracer.core.pmi` and :mod:`tracer.core.association`.

1. First order, exact (:meth:`Attribution.leave_one_out_pmi`): the PMI of a pair
   without document d, from ``C^d_wa``, ``r^d_w``, ``r^d_a`` and the exact ``Z``.
2. Linear influence for every document at once (:meth:`Attribution.linear`): with
   ``V_k`` held fixed the change of an association B is, to first order,
   ``dB(d) = -<K, C^d> + <u, r^d>`` with K nonzero only in the probe rows;
   :meth:`Attribution.estimate` takes each probe cell's PPMI step exactly (a document
   that holds all of a cell's count removes the cell).
3. Exact re-rank (:meth:`Attribution.exact`): the probe rows of M recomputed without
   the documents (thresholds included) and projected on the same subspace.
"""

from __future__ import annotations

import dataclasses
import functools
import typing

import numpy as np
import scipy.sparse as sp

from tracer.analysis.document_counts import (Stream, document_probe_rows, document_row_sums, kept_stream,
                                             rows_sum)
from tracer.core import _kernels as _k
from tracer.core import memory
from tracer.core.association import AssociationTest, association_scores, effect_size, mean_gap, score_gradient, unit_rows
from tracer.core.counting import Counts, cumulative_weights
from tracer.core.embedding import Embedding
from tracer.core.pmi import log_z, pmi, pmi_sensitivities, ppmi, z_without
from tracer.core.threads import ThreadPool, default_workers

__all__ = ["Attribution", "Effect", "Stream", "kept_stream", "document_probe_rows", "document_row_sums"]

# The linear pass reads every token once, so it is short; a second thread pays only when the pass
# is long enough to cover waking it. Below this many tokens read it runs on one thread. A round
# figure above where a second thread stopped gaining on a 2-core machine, not a measured break-even.
LINEAR_THREADS_FROM = 4_000_000


@dataclasses.dataclass(frozen=True)
class Effect:
    effect_size: float
    gap: float


class _Scores(typing.NamedTuple):
    """The association as a function of the probe vectors, with what its gradient needs."""

    unit: np.ndarray      # (n_probe, dim) unit probe vectors
    norms: np.ndarray     # (n_probe,) their lengths before scaling
    targets: np.ndarray   # rows of the x words, then of the y words
    scores: np.ndarray    # (len(targets),) s(w, A, B)


class Attribution:
    """Contributions of documents to one test's association in one PPMI-SVD model of one slice.

    Parameters
    ----------
    ws : Workspace
    weights : numpy.ndarray, shape (n_docs,)
        The slice's document weights.
    counts : Counts
        The slice's co-occurrence counts.
    emb : Embedding
        The PPMI-SVD model of those counts (with ``singular_values`` and ``context_vectors``).
    test : AssociationTest
    alpha, shift, eig_power : the model's PPMI and SVD settings.
    """

    def __init__(self, ws, weights, counts: Counts, emb: Embedding, test: AssociationTest, *,
                 alpha: float, shift: float, eig_power: float):
        self.ws, self.weights, self.counts, self.emb, self.test = ws, np.asarray(weights, float), counts, emb, test
        self.alpha, self.shift, self.eig_power = alpha, shift, eig_power
        idx = counts.vocab.index
        self.sets = {k: [w for w in (getattr(test, name) or ()) if w in idx]
                     for k, name in (("x", "targets_x"), ("y", "targets_y"), ("a", "attributes_a"),
                                     ("b", "attributes_b"))}
        self.probe_words = list(dict.fromkeys(self.sets["x"] + self.sets["y"] + self.sets["a"] + self.sets["b"]))
        self.probe_ids = np.array([idx[w] for w in self.probe_words], dtype=np.int64)
        self.probe_row_of = {w: k for k, w in enumerate(self.probe_words)}
        self._set_rows = {k: np.array([self.probe_row_of[w] for w in v], dtype=np.int64) for k, v in self.sets.items()}
        self.row_sums = counts.row_sums
        n_probe = len(self.probe_ids)
        memory.require(f"the dense probe rows ({n_probe} words x {len(self.row_sums):,} words)",
                       memory.dense_rows_peak(n_probe, len(self.row_sums)),
                       "raise --min-count or set --max-vocab (fewer words per row), or test fewer words")
        self.probe_counts = rows_sum(counts.matrix, self.probe_ids, np.arange(n_probe), n_probe)
        self.singular_values = emb.extras["singular_values"].astype(np.float64)
        self.right_vectors = emb.extras["context_vectors"].astype(np.float64)
        # W_i = M_i @ projection: a row of the embedding from its row of the PPMI matrix
        self.projection = self.right_vectors * (self.singular_values ** (self.eig_power - 1.0))
        self.probe_ppmi = self._probe_ppmi(self.probe_counts, self.row_sums)
        self.probe_vectors = self.probe_ppmi @ self.projection
        self._base_scores = self._scores(self.probe_vectors)     # kept for the gradient
        self.base = self._effect_of(self._base_scores)
        self._d_ppmi_cache: dict[str, np.ndarray] = {}
        self._linear_cache: dict[str, np.ndarray] = {}

    # ---- per-document counts, built when an exact step needs them ---------------------------
    @functools.cached_property
    def stream(self) -> Stream:
        return kept_stream(self.ws, self.weights, self.counts)

    @functools.cached_property
    def document_row_sums(self) -> sp.csr_array:
        """r^d for every document, shape (n_docs, n_words)."""
        return document_row_sums(self.stream, self.weights, self.counts.settings.distance_weights(),
                                 self.ws.n_documents, len(self.counts.vocab))

    @functools.cached_property
    def document_probe_counts(self) -> sp.csr_array:
        """C^d of the probe words' rows, shape (n_probe * n_docs, n_words); row ``k * n_docs + d`` is
        document d's part of probe word k's row (:func:`document_probe_rows`)."""
        return document_probe_rows(self.stream, self.weights, self.counts.settings.distance_weights(),
                                   self.probe_ids, self.ws.n_documents, len(self.counts.vocab))

    # ---- the association as a function of the probe vectors ----------------------------------
    def _scores(self, vectors: np.ndarray) -> _Scores:
        rows = self._set_rows
        targets = np.concatenate([rows["x"], rows["y"]])
        unit = unit_rows(vectors)
        return _Scores(unit, np.linalg.norm(vectors, axis=1), targets,
                       association_scores(unit, targets, rows["a"], rows["b"]))

    def effect(self, vectors: np.ndarray) -> Effect:
        """B of probe vectors ``vectors`` (shape (n_probe, dim))."""
        return self._effect_of(self._scores(vectors))

    def _effect_of(self, scores: _Scores) -> Effect:
        nx = len(self._set_rows["x"])
        sx, sy = scores.scores[:nx], scores.scores[nx:]
        if len(sy) == 0:
            return Effect(float("nan"), float(sx.mean()))
        return Effect(effect_size(sx, sy), mean_gap(sx, sy))

    def d_quantity_d_vectors(self, quantity: str) -> np.ndarray:
        """d B / d W for the probe rows, shape (n_probe, dim); B is "effect_size" or "gap"."""
        unit, norms, targets, s = self._base_scores
        rows = self._set_rows
        coef = score_gradient(s, len(rows["x"]), quantity)
        grad = np.zeros_like(self.probe_vectors)
        inv = 1.0 / np.where(norms > 0, norms, 1.0)
        for attr_rows, sign in ((rows["a"], 1.0), (rows["b"], -1.0)):
            unit_t, unit_a = unit[targets], unit[attr_rows]
            cos = unit_t @ unit_a.T                                  # (targets, attributes)
            weight = np.outer(coef * sign / len(attr_rows), np.ones(len(attr_rows)))
            # d cos(t, a) / d W_t = (u_a - cos u_t) / |W_t|, and symmetrically for W_a
            np.add.at(grad, targets, (weight @ unit_a - (weight * cos).sum(1)[:, None] * unit_t) * inv[targets, None])
            np.add.at(grad, attr_rows,
                      (weight.T @ unit_t - (weight * cos).sum(0)[:, None] * unit_a) * inv[attr_rows, None])
        return grad

    # ---- tier 2 -----------------------------------------------------------------------------
    def d_quantity_d_ppmi(self, quantity: str) -> np.ndarray:
        """dB / dM for the probe rows, shape (n_probe, n_words); computed once per quantity."""
        if quantity not in self._d_ppmi_cache:
            self._d_ppmi_cache[quantity] = self.d_quantity_d_vectors(quantity) @ self.projection.T
        return self._d_ppmi_cache[quantity]

    def linear(self, which: str = "gap") -> np.ndarray:
        """Estimated change of B when each document is removed, shape (n_docs,) (tier 2).

        ``dB(d) = -<K, C^d> + <u, r^d>`` (:func:`tracer.core.pmi.pmi_sensitivities`; only
        cells above the PPMI threshold move), summed in one pass over the tokens
        (``tracer.core._kernels.linear_scores``) without building ``C^d`` or ``r^d``. Computed once
        per quantity (trace asks for it and for :meth:`estimate`, which builds on it); read-only.
        """
        if which not in self._linear_cache:
            moving = np.where(self.probe_ppmi > 0, self.d_quantity_d_ppmi(which), 0.0)
            per_count, per_row_sum = pmi_sensitivities(moving, self.probe_counts, self.row_sums, self.probe_ids,
                                                       self.alpha, self.log_z)
            scores = self._linear_pass(per_count, per_row_sum)
            scores.flags.writeable = False
            self._linear_cache[which] = scores
        return self._linear_cache[which]

    def estimate(self, which: str = "gap") -> np.ndarray:
        """Estimated change of B when each document is removed on its own, shape (n_docs,).

        :meth:`linear` with the joint-count term of each probe cell taken exactly: removing
        c of a cell's count C moves its PPMI by ``max(log(1 - c / C), -M)`` (the cell's PMI,
        floored where it falls to the threshold), not by the first-order ``-c / C``; the row-sum
        term and the step from M to B stay first order. The difference matters for the cells a
        document holds all or most of (c = C = 1: a probe word beside a rare word once), whose PPMI
        falls by M, not by 1; on the demo these cells carry most of a single document's change.
        """
        g = np.where(self.probe_ppmi > 0, self.d_quantity_d_ppmi(which), 0.0)
        cells = self.document_probe_counts.tocoo()
        n_docs = self.ws.n_documents
        k, d, j = cells.row // n_docs, cells.row % n_docs, cells.col
        share = np.minimum(cells.data / self.probe_counts[k, j], 1.0)
        with np.errstate(divide="ignore"):
            exact_step = np.maximum(np.log1p(-share), -self.probe_ppmi[k, j])
        # linear() counts each cell as -g c / C; replace that by g times the exact step
        correction = np.bincount(d, weights=g[k, j] * (exact_step + share), minlength=n_docs)
        return self.linear(which) + correction

    def _linear_pass(self, per_count: np.ndarray, per_row_sum: np.ndarray) -> np.ndarray:
        """``-<per_count, C^d> + <per_row_sum, r^d>`` for every document, threads over document ranges."""
        probe_row = np.full(len(self.row_sums), -1, np.int64)
        probe_row[self.probe_ids] = np.arange(len(self.probe_ids))
        dist_w = self.counts.settings.distance_weights()
        cum_w = cumulative_weights(dist_w)
        offsets, tokens = self.ws.doc_offsets, np.asarray(self.ws.tokens)
        id_map = self.counts.vocab.id_map(len(self.ws.vocab))
        lengths = np.diff(offsets)
        longest = int(lengths.max(initial=0))
        out = np.empty(self.ws.n_documents)

        def score(a, b):  # documents a..b-1; the kernel skips those of weight 0 without reading them
            _k.linear_scores(tokens, offsets[a:b], offsets[a + 1:b + 1], id_map, self.weights[a:b], dist_w, cum_w,
                             probe_row, per_count, per_row_sum, np.empty(longest, np.int32),
                             np.empty(longest, np.int64), out[a:b])

        read = np.cumsum(lengths * (self.weights > 0))          # tokens the pass reads, up to each document
        n_tokens = int(read[-1]) if len(read) else 0
        pool = ThreadPool(default_workers() if n_tokens > LINEAR_THREADS_FROM else 1)
        cuts = np.searchsorted(read, np.arange(1, pool.workers) * n_tokens / pool.workers)
        cuts = np.unique(np.concatenate([[0], cuts, [self.ws.n_documents]])).tolist()
        pool.map(score, list(zip(cuts[:-1], cuts[1:])))
        return out

    def pair_parts(self, doc: int, which: str = "gap", top: int = 3) -> list[tuple[str, str, float]]:
        """The probe-row cells of one document that carry most of its joint-count term."""
        d_ppmi = self.d_quantity_d_ppmi(which)
        words = self.counts.vocab.words
        per_doc = self.document_probe_counts
        parts = []
        n_docs = self.ws.n_documents
        for i in range(len(self.probe_ids)):
            a, b = per_doc.indptr[i * n_docs + doc], per_doc.indptr[i * n_docs + doc + 1]
            for j, c in zip(per_doc.indices[a:b], per_doc.data[a:b]):
                if self.probe_ppmi[i, j] > 0:
                    parts.append((self.probe_words[i], words[j], float(-d_ppmi[i, j] * c / self.probe_counts[i, j])))
        parts.sort(key=lambda t: -abs(t[2]))
        return parts[:top]

    # ---- tier 3 -----------------------------------------------------------------------------
    def _probe_ppmi(self, probe_counts: np.ndarray, row_sums: np.ndarray) -> np.ndarray:
        """PPMI of the probe rows from their counts (shape (..., n_probe, n_words)) and the row sums
        (shape (..., n_words)), dense; ``log Z`` from the row sums (so it moves with a removal)."""
        row_sums = np.asarray(row_sums, dtype=np.float64)
        values = pmi(probe_counts, row_sums[..., self.probe_ids][..., :, None], row_sums[..., None, :], self.alpha,
                     np.asarray(log_z(row_sums, self.alpha))[..., None, None])
        return ppmi(values, self.shift)

    def _effects_without(self, removed: np.ndarray, removed_sums: np.ndarray) -> list[Effect]:
        """B after each removal: ``removed`` (shape (k, n_probe, n_words)) leaves the probe rows,
        ``removed_sums`` (shape (k, n_words)) the row sums; the probe rows of M are recomputed
        exactly (thresholds included) and projected on the same subspace."""
        counts_left = self.probe_counts[None] - removed
        counts_left[np.abs(counts_left) < 1e-9] = 0.0  # a pair that only these documents had
        sums_left = self.row_sums[None] - removed_sums
        sums_left[np.abs(sums_left) < 1e-9] = 0.0
        vectors = self._probe_ppmi(counts_left, sums_left) @ self.projection
        return [self.effect(v) for v in vectors]

    def exact(self, docs) -> Effect:
        """B with the documents removed together (tier 3)."""
        docs = np.atleast_1d(np.asarray(docs, dtype=np.int64))
        n_probe, n_docs = len(self.probe_ids), self.ws.n_documents
        rows = (np.arange(n_probe)[:, None] * n_docs + docs[None, :]).ravel()
        removed = rows_sum(self.document_probe_counts, rows, np.repeat(np.arange(n_probe), len(docs)), n_probe)
        return self._effects_without(removed[None], rows_sum(self.document_row_sums, docs)[None])[0]

    def exact_each(self, docs, *, max_cells: int = 4_000_000) -> list[Effect]:
        """B with each document removed on its own (tier 3), in batches of at most ``max_cells``
        dense probe-row cells."""
        docs = np.asarray(docs, dtype=np.int64)
        n_probe, n_words = len(self.probe_ids), len(self.row_sums)
        step = max(1, max_cells // max(1, n_probe * n_words))
        out = []
        for k in range(0, len(docs), step):
            batch = docs[k:k + step]
            rows = (np.arange(n_probe)[:, None] * self.ws.n_documents + batch[None, :]).ravel()
            removed = self.document_probe_counts[rows].toarray().reshape(n_probe, len(batch), n_words)
            out += self._effects_without(removed.transpose(1, 0, 2), self.document_row_sums[batch].toarray())
        return out

    # ---- tier 1 -----------------------------------------------------------------------------
    @functools.cached_property
    def log_z(self) -> float:
        """log Z of the slice's counts (the counts are symmetric, so column sums are the row sums)."""
        return log_z(self.row_sums, self.alpha)

    @functools.cached_property
    def _z_without(self) -> np.ndarray:
        """Exact Z without each document, shape (n_docs,)."""
        return z_without(self.row_sums, self.document_row_sums, self.alpha, np.exp(self.log_z))

    @functools.cached_property
    def _row_sums_by_word(self) -> sp.csc_array:
        return sp.csc_array(self.document_row_sums)

    @functools.cached_property
    def _probe_counts_by_word(self) -> sp.csc_array:
        return sp.csc_array(self.document_probe_counts)

    def _per_document(self, m: sp.csc_array, j: int, first_row: int = 0) -> np.ndarray:
        """Rows ``first_row`` .. ``first_row + n_docs - 1`` of column j, dense: each document's part."""
        n = self.ws.n_documents
        out = np.zeros(n)
        a, b = m.indptr[j], m.indptr[j + 1]
        rows = m.indices[a:b] - first_row
        keep = (rows >= 0) & (rows < n)
        out[rows[keep]] = m.data[a:b][keep]
        return out

    def leave_one_out_pmi(self, w: str, a: str) -> tuple[float, np.ndarray]:
        """PMI(w, a) of the slice and, for every document, the exact PMI without it (-inf when
        the pair no longer co-occurs)."""
        idx = self.counts.vocab.index
        i, j = idx[w], idx[a]
        c = float(self.counts.matrix[i, j])
        full = pmi(c, self.row_sums[i], self.row_sums[j], self.alpha, self.log_z)
        pair_part = self._per_document(self._probe_counts_by_word, j, self.probe_row_of[w] * self.ws.n_documents)
        sums_i = self._per_document(self._row_sums_by_word, i)
        sums_j = self._per_document(self._row_sums_by_word, j)
        left = c - pair_part
        with np.errstate(divide="ignore", invalid="ignore"):
            log_z_left = np.log(self._z_without)
        loo = pmi(np.where(left > 1e-12, left, 0.0), self.row_sums[i] - sums_i, self.row_sums[j] - sums_j,
                  self.alpha, log_z_left)
        return float(full), loo
