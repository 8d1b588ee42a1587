"""Attribution: how much each document (or source) contributes to a measured association.

The design is in ../shared/ARCHITECTURE.md ("Attribution"). Notation: counts C of a
slice, row sums r, ``Z = sum_k r_k ** alpha``, PPMI matrix M, PPMI-SVD embedding
``W = U_k S_k ** p = M V_k S_k ** (p - 1)``. Removing document d removes its weighted
counts ``C^d`` (and so ``r^d``).

1. First order, exact (:meth:`Attribution.leave_one_out_pmi`): the PMI of a pair
   without document d, from ``C^d_wa``, ``r^d_w``, ``r^d_a`` and the exact ``Z``.
2. Linear influence for every document at once (:meth:`Attribution.linear`): with
   ``V_k`` held fixed the change of an association B is, to first order,
   ``dB(d) = -<K, C^d> + <u, r^d>`` with K nonzero only in the probe rows.
3. Exact re-rank (:meth:`Attribution.exact`): the probe rows of M recomputed without
   the documents (thresholds included) and projected on the same subspace.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
import scipy.sparse as sp

from tracer.core import _kernels as _k
from tracer.core.counting import Counts, token_mask
from tracer.core.threads import ThreadPool, default_workers
from tracer.core.embedding import Embedding
from tracer.core.association import AssociationTest


# The linear pass costs 1.5-3 ns a token; at 0.8M tokens a second thread gained nothing (measured:
# waking it cost what it saved). 4M is a round figure above that, not a measured break-even.
LINEAR_THREADS_FROM = 4_000_000


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
    id_map = counts.vocab.id_map(len(ws.vocab))
    tokens = np.asarray(ws.tokens)
    mapped = id_map[tokens]
    keep = token_mask(ws.doc_offsets, np.asarray(weights) > 0) & (mapped >= 0)
    pos = np.flatnonzero(keep)
    ids = mapped[pos].astype(np.int64)
    doc = ws.doc_of_position(pos)
    first = np.ones(len(doc), bool)
    first[1:] = doc[1:] != doc[:-1]
    run_start = np.flatnonzero(first)
    run = np.cumsum(first) - 1
    run_end = np.append(run_start[1:], len(ids))
    return Stream(ids, doc, pos, run_start[run], run_end[run])


def document_row_sums(stream: Stream, weights: np.ndarray, dist_w: np.ndarray, n_docs: int,
                      n_words: int) -> sp.csr_array:
    """r^d: each document's weighted contribution to every row sum, shape (n_docs, n_words)."""
    window = len(dist_w)
    cw = np.concatenate([[0.0], np.cumsum(dist_w)])
    i = np.arange(len(stream.ids))
    nb = cw[np.minimum(window, i - stream.start)] + cw[np.minimum(window, stream.end - 1 - i)]
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
    (shape (n_cols,)), or with ``groups`` (one label per row, below ``n_groups``) one per group."""
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


@dataclasses.dataclass(frozen=True)
class Effect:
    effect_size: float
    gap: float


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
        self.alpha, self.log_shift, self.p = alpha, float(np.log(shift)), eig_power
        idx = counts.vocab.index
        self.sets = {k: [w for w in (getattr(test, name) or ()) if w in idx]
                     for k, name in (("x", "targets_x"), ("y", "targets_y"), ("a", "attributes_a"),
                                     ("b", "attributes_b"))}
        self.probe_words = list(dict.fromkeys(self.sets["x"] + self.sets["y"] + self.sets["a"] + self.sets["b"]))
        self.probe_ids = np.array([idx[w] for w in self.probe_words], dtype=np.int64)
        self.row_of = {w: k for k, w in enumerate(self.probe_words)}
        self._rows = {k: np.array([self.row_of[w] for w in v], dtype=np.int64) for k, v in self.sets.items()}
        self.r = counts.row_sums
        n_probe = len(self.probe_ids)                                # probe rows of the counts, dense:
        self.C_P = rows_sum(counts.matrix, self.probe_ids, np.arange(n_probe), n_probe)
        self.S = emb.extras["singular_values"].astype(np.float64)
        self.V = emb.extras["context_vectors"].astype(np.float64)
        self.proj = self.V * (self.S ** (self.p - 1.0))            # W_i = M_i @ proj
        self.M_P = self._probe_ppmi(self.C_P, self.r)              # probe rows of the PPMI matrix, dense
        self.W_P = self.M_P @ self.proj
        self._scores_P = self._scores(self.W_P)                    # kept for the gradient
        self.base = self._effect_of(self._scores_P)
        self._dB_dM_cache: dict[str, np.ndarray] = {}

    # ---- per-document counts, built when an exact step needs them ---------------------------
    @functools.cached_property
    def stream(self) -> Stream:
        return kept_stream(self.ws, self.weights, self.counts)

    @functools.cached_property
    def R(self) -> sp.csr_array:
        """r^d for every document, shape (n_docs, n_words)."""
        return document_row_sums(self.stream, self.weights, self.counts.settings.distance_weights(),
                                 self.ws.n_documents, len(self.counts.vocab))

    @functools.cached_property
    def P(self) -> sp.csr_array:
        """C^d of the probe words' rows, shape (n_probe * n_docs, n_words); row ``k * n_docs + d`` is
        document d's part of probe word k's row (:func:`document_probe_rows`)."""
        return document_probe_rows(self.stream, self.weights, self.counts.settings.distance_weights(),
                                   self.probe_ids, self.ws.n_documents, len(self.counts.vocab))

    # ---- the association as a function of the probe vectors ----------------------------------
    def _scores(self, W):
        norms = np.linalg.norm(W, axis=1)
        unit = W / np.where(norms > 0, norms, 1.0)[:, None]
        rows = self._rows
        targets = np.concatenate([rows["x"], rows["y"]])
        s = (unit[targets] @ unit[rows["a"]].T).mean(1) - (unit[targets] @ unit[rows["b"]].T).mean(1)
        return unit, norms, rows, targets, s

    def effect(self, W) -> Effect:
        return self._effect_of(self._scores(W))

    def _effect_of(self, scores) -> Effect:
        _, _, rows, _, s = scores
        nx = len(rows["x"])
        sx, sy = s[:nx], s[nx:]
        if len(sy) == 0:
            return Effect(float("nan"), float(sx.mean()))
        sd = s.std()
        gap = float(sx.mean() - sy.mean())
        return Effect(gap / sd if sd > 0 else float("nan"), gap)

    def gradient(self, which: str) -> np.ndarray:
        """d B / d W for the probe rows, shape (n_probe, dim); B is "effect_size" or "gap"."""
        unit, norms, rows, targets, s = self._scores_P
        nx, ny = len(rows["x"]), len(rows["y"])
        coef = np.concatenate([np.full(nx, 1.0 / nx), np.full(ny, -1.0 / ny if ny else 0.0)])
        if which == "effect_size" and ny:
            n = nx + ny
            sd = s.std()
            gap = s[:nx].mean() - s[nx:].mean()
            coef = coef / sd - gap * (s - s.mean()) / (n * sd ** 3)
        G = np.zeros_like(self.W_P)
        inv = 1.0 / np.where(norms > 0, norms, 1.0)
        for attr_rows, sign in ((rows["a"], 1.0), (rows["b"], -1.0)):
            U_t, U_a = unit[targets], unit[attr_rows]
            cos = U_t @ U_a.T                                    # (targets, attributes)
            E = np.outer(coef * sign / len(attr_rows), np.ones(len(attr_rows)))
            # d cos(t, a) / d W_t = (u_a - cos u_t) / |W_t|, and symmetrically for W_a
            np.add.at(G, targets, (E @ U_a - (E * cos).sum(1)[:, None] * U_t) * inv[targets, None])
            np.add.at(G, attr_rows, (E.T @ U_t - (E * cos).sum(0)[:, None] * U_a) * inv[attr_rows, None])
        return G

    # ---- tier 2 -----------------------------------------------------------------------------
    def _dB_dM(self, which: str) -> np.ndarray:
        """dB / dM for the probe rows, shape (n_probe, n_words); computed once per quantity."""
        if which not in self._dB_dM_cache:
            self._dB_dM_cache[which] = self.gradient(which) @ self.proj.T
        return self._dB_dM_cache[which]

    def linear(self, which: str = "gap") -> np.ndarray:
        """Estimated change of B when each document is removed, shape (n_docs,) (tier 2).

        ``dB(d) = -<K, C^d> + <u, r^d>``, summed in one pass over the tokens
        (``tracer.core._kernels.linear_scores``) without building ``C^d`` or ``r^d``.
        """
        g = self._dB_dM(which)
        active = self.M_P > 0                                    # only cells above the threshold move
        n_words = len(self.r)
        gv = np.where(active, g, 0.0)
        K = np.divide(gv, self.C_P, out=np.zeros_like(gv), where=active)
        r = np.where(self.r > 0, self.r, 1.0)
        u = self.alpha * gv.sum(0) / r - self.alpha * gv.sum() * r ** (self.alpha - 1.0) / np.exp(self.log_z)
        u[self.probe_ids] += gv.sum(1) / r[self.probe_ids]
        probe_row = np.full(n_words, -1, np.int64)
        probe_row[self.probe_ids] = np.arange(len(self.probe_ids))
        dist_w = self.counts.settings.distance_weights()
        offsets, tokens = self.ws.doc_offsets, np.asarray(self.ws.tokens)
        id_map, cum_w = self.counts.vocab.id_map(len(self.ws.vocab)), np.concatenate([[0.0], np.cumsum(dist_w)])
        lengths = np.diff(offsets)
        longest = int(lengths.max(initial=0))
        out = np.empty(self.ws.n_documents)

        def score(a, b):  # documents a..b-1; the kernel skips those of weight 0 without reading them
            _k.linear_scores(tokens, offsets[a:b], offsets[a + 1:b + 1], id_map, self.weights[a:b], dist_w, cum_w,
                             probe_row, K, u, np.empty(longest, np.int32), np.empty(longest, np.int64), out[a:b])

        read = np.cumsum(lengths * (self.weights > 0))          # tokens the pass reads, up to each document
        n_tokens = int(read[-1]) if len(read) else 0
        pool = ThreadPool(default_workers() if n_tokens > LINEAR_THREADS_FROM else 1)
        cuts = np.searchsorted(read, np.arange(1, pool.workers) * n_tokens / pool.workers)
        cuts = np.unique(np.concatenate([[0], cuts, [self.ws.n_documents]])).tolist()
        pool.map(score, list(zip(cuts[:-1], cuts[1:])))
        return out

    def pair_parts(self, doc: int, which: str = "gap", top: int = 3) -> list[tuple[str, str, float]]:
        """The probe-row cells of one document that carry most of its joint-count term."""
        g = self._dB_dM(which)
        words = self.counts.vocab.words
        parts = []
        n_docs = self.ws.n_documents
        for i in range(len(self.probe_ids)):
            a, b = self.P.indptr[i * n_docs + doc], self.P.indptr[i * n_docs + doc + 1]
            for j, c in zip(self.P.indices[a:b], self.P.data[a:b]):
                if self.M_P[i, j] > 0:
                    parts.append((self.probe_words[i], words[j], float(-g[i, j] * c / self.C_P[i, j])))
        parts.sort(key=lambda t: -abs(t[2]))
        return parts[:top]

    # ---- tier 3 -----------------------------------------------------------------------------
    def _probe_ppmi(self, C: np.ndarray, r: np.ndarray) -> np.ndarray:
        """PPMI of the probe rows from counts ``C`` (shape (..., n_probe, n_words)) and row sums
        ``r`` (shape (..., n_words)), dense; ``log Z`` from ``r`` (so it moves with a removal)."""
        C = np.asarray(C, dtype=np.float64)
        r = np.asarray(r, dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_r = np.where(r > 0, np.log(r), 0.0)
            log_z = np.log(np.sum(np.where(r > 0, r, 0.0) ** self.alpha, axis=-1))
            pmi = (np.log(C) - log_r[..., self.probe_ids][..., :, None] - self.alpha * log_r[..., None, :]
                   + log_z[..., None, None])
        return np.where(C > 0, np.maximum(pmi - self.log_shift, 0.0), 0.0)

    def _effects_without(self, removed: np.ndarray, removed_r: np.ndarray) -> list[Effect]:
        """B after each removal: ``removed`` (shape (k, n_probe, n_words)) leaves the probe rows,
        ``removed_r`` (shape (k, n_words)) the row sums; the probe rows of M are recomputed
        exactly (thresholds included) and projected on the same subspace."""
        C_new = self.C_P[None] - removed
        C_new[np.abs(C_new) < 1e-9] = 0.0  # a pair that only these documents had
        r_new = self.r[None] - removed_r
        r_new[np.abs(r_new) < 1e-9] = 0.0
        W = self._probe_ppmi(C_new, r_new) @ self.proj
        return [self.effect(w) for w in W]

    def exact(self, docs) -> Effect:
        """B with the documents removed together (tier 3)."""
        docs = np.atleast_1d(np.asarray(docs, dtype=np.int64))
        n_probe, n_docs = len(self.probe_ids), self.ws.n_documents
        rows = (np.arange(n_probe)[:, None] * n_docs + docs[None, :]).ravel()
        removed = rows_sum(self.P, rows, np.repeat(np.arange(n_probe), len(docs)), n_probe)
        return self._effects_without(removed[None], rows_sum(self.R, docs)[None])[0]

    def exact_each(self, docs, *, max_cells: int = 4_000_000) -> list[Effect]:
        """B with each document removed on its own (tier 3), in batches of at most ``max_cells``
        dense probe-row cells."""
        docs = np.asarray(docs, dtype=np.int64)
        n_probe, n_words = len(self.probe_ids), len(self.r)
        step = max(1, max_cells // max(1, n_probe * n_words))
        out = []
        for k in range(0, len(docs), step):
            batch = docs[k:k + step]
            rows = (np.arange(n_probe)[:, None] * self.ws.n_documents + batch[None, :]).ravel()
            removed = self.P[rows].toarray().reshape(n_probe, len(batch), n_words).transpose(1, 0, 2)
            out += self._effects_without(removed, self.R[batch].toarray())
        return out

    # ---- tier 1 -----------------------------------------------------------------------------
    @functools.cached_property
    def log_z(self) -> float:
        """log Z of the slice's counts, ``Z = sum_k r_k ** alpha`` (the counts are symmetric, so
        column sums are the row sums)."""
        r = self.r[self.r > 0]
        return float(np.log(np.sum(r ** self.alpha))) if len(r) else 0.0

    @functools.cached_property
    def _z_without(self) -> np.ndarray:
        """Exact Z without each document: Z - sum over its words of (r_k^alpha - (r_k - r^d_k)^alpha)."""
        Rc = self.R.tocoo()
        rk = self.r[Rc.col]
        drop = rk ** self.alpha - np.maximum(rk - Rc.data, 0.0) ** self.alpha
        return np.exp(self.log_z) - np.bincount(Rc.row, weights=drop, minlength=self.ws.n_documents)

    @functools.cached_property
    def _R_csc(self) -> sp.csc_array:
        return sp.csc_array(self.R)

    @functools.cached_property
    def _P_csc(self) -> sp.csc_array:
        return sp.csc_array(self.P)

    def _column(self, m: sp.csc_array, j: int, first_row: int = 0) -> np.ndarray:
        """Rows ``first_row`` .. ``first_row + n_docs - 1`` of column j, dense."""
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
        full = np.log(c) - np.log(self.r[i]) - self.alpha * np.log(self.r[j]) + self.log_z if c > 0 else -np.inf
        cd = self._column(self._P_csc, j, self.row_of[w] * self.ws.n_documents)
        ri, rj = self._column(self._R_csc, i), self._column(self._R_csc, j)
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = (np.log(c - cd) - np.log(self.r[i] - ri) - self.alpha * np.log(self.r[j] - rj)
                   + np.log(self._z_without))
        loo = np.where(c - cd > 1e-12, loo, -np.inf)
        return float(full), loo
