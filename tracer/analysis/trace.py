"""Trace a measured association to its sources, documents and passages, and check the link.

Every figure here except the verification is an estimate: the sources and documents
tables give the change of the association if they were removed, computed from the
counts with the model's subspace held fixed (tier 3 of the design: exact probe rows,
same singular vectors), and for documents first ranked by the per-cell estimate of
tier 2 (:meth:`Attribution.estimate`). ``verify`` retrains without the top sources and document sets and sets the
predicted changes beside the real ones; the ranking counts as confirmed only when the
retrained changes agree with the predicted ones in order and sign (see ``CONFIRM``).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from tracer.analysis.influence import Attribution
from tracer.core.counting import CountSettings
from tracer.provenance.counts import count_slice
from tracer.corpus.slices import Slice
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import embedding_from_counts
from tracer.core.word2vec import Word2VecSettings
from tracer.errors import SettingError, WordNotInVocabulary
from tracer.core.association import AssociationTest
from tracer.provenance.specs import normalized_test
from tracer.analysis.verification import (CONFIRM, NOT_CONFIRMED, Verification, _measure_without,  # noqa: F401
                                         _support, agreement_of, verify)

RANK_BY = ("gap", "effect_size")


@dataclasses.dataclass(frozen=True)
class TraceSettings:
    """top: documents listed; candidates: documents re-ranked exactly; verify: K of the verification;
    rank_by: "gap" (raw difference of mean association) or "effect_size"; seeds: word2vec retrains;
    matched_view: for word2vec, count and shift the PPMI view as skip-gram sees the text (see
    :func:`word2vec_view`); off by default: on the demo it lowered the agreement with the word2vec
    retrains (tribune_mix: Pearson r 0.96 -> 0.86, sign agreement 0.38 -> 0.25) and gave the view the
    wrong sign for gazette_outlet (d -1.14 where word2vec's is +1.99; shift log 5 empties most cells
    of a 493-word vocabulary)."""

    top: int = 20
    candidates: int = 200
    verify: int = 0
    rank_by: str = "gap"
    passage_docs: int = 10
    passages_per_doc: int = 3
    context_tokens: int = 8
    first_order_docs: int = 3
    seeds: int = 3
    seed: int = 0
    matched_view: bool = False

    def __post_init__(self):
        if self.rank_by not in RANK_BY:
            raise SettingError(f"rank_by must be one of {', '.join(RANK_BY)}; got {self.rank_by!r}")
        for name in ("top", "candidates"):
            if getattr(self, name) < 1:
                raise SettingError(f"{name} must be >= 1")


@dataclasses.dataclass(frozen=True)
class TraceResult:
    """``effect_size`` and ``gap`` are the traced model's own (for word2vec the mean over the seeds);
    ``view_effect_size`` and ``view_gap`` those of the PPMI-SVD view the attribution works in (the
    same for PPMI-SVD)."""

    test: str
    model: str
    slice: str
    effect_size: float
    gap: float
    rank_by: str
    sources: pd.DataFrame
    documents: pd.DataFrame
    passages: pd.DataFrame
    first_order: pd.DataFrame
    verification: Verification | None
    notes: list[str]
    view_effect_size: float = float("nan")
    view_gap: float = float("nan")

    @property
    def confirmed(self) -> bool | None:
        """True or False after a verification, None without one."""
        return None if self.verification is None else self.verification.confirmed

    def headline(self) -> str:
        own = f"effect size {self.effect_size:.3f}, gap {self.gap:.4f}"
        if self.model != "ppmi-svd":
            own += (f" ({self.model}); sources and documents are estimated in its PPMI-SVD view "
                    f"(effect size {self.view_effect_size:.3f}, gap {self.view_gap:.4f})")
        line = f"Trace of {self.test} ({self.model}, slice {self.slice}): {own}; ranked by {self.rank_by}."
        if self.verification is None:
            return line + " Not verified (--verify K retrains and checks the ranking)."
        return line + "\n" + self.verification.headline()


def word2vec_view(counts: CountSettings, w2v: Word2VecSettings) -> tuple[CountSettings, PpmiSvdSettings]:
    """Count and PPMI settings whose PPMI-SVD is closest to what skip-gram with negative sampling fits.

    SGNS factorises PMI shifted by log k (k negative samples) with contexts drawn from the
    unigram distribution to the power 0.75 (gensim's default ``ns_exponent``) (Levy and
    Goldberg 2014); its dynamic window keeps a context at distance j of a window w with
    probability (w - j + 1) / w, which is the "linear" weighting. Frequent-word subsampling is
    not mirrored: it would weight each pair by both words' keep probabilities, which the
    per-document counts of the attribution do not carry.
    """
    return (dataclasses.replace(counts, weighting="linear"),
            PpmiSvdSettings(dim=w2v.dim, alpha=0.75, shift=float(max(1, w2v.negative)), eig_power=0.5))


def trace(ws, test: AssociationTest, model: str, sl: Slice, counts: CountSettings = CountSettings(),
          model_settings=None, settings: TraceSettings = TraceSettings(), *, progress: bool = False) -> TraceResult:
    """Sources, documents, passages and first-order table for one test on one slice (see the module doc).

    For word2vec the attribution is computed in the PPMI-SVD view of the same counts
    (skip-gram with negative sampling factorises shifted PMI; Levy and Goldberg 2014)
    and verified by retraining word2vec over ``settings.seeds`` seeds.
    """
    if not test.two_target:
        raise SettingError(f"test {test.name} has one target set; trace takes two-target tests")
    test = normalized_test(test, ws)
    if model_settings is None:
        model_settings = PpmiSvdSettings() if model == "ppmi-svd" else Word2VecSettings()
    view_counts, svd_settings = counts, model_settings
    if model != "ppmi-svd":
        view_counts, svd_settings = (word2vec_view(counts, model_settings) if settings.matched_view
                                     else (counts, PpmiSvdSettings(dim=model_settings.dim)))
    c = count_slice(ws, sl.weights, view_counts, slice_name=sl.name, progress=progress)
    emb = embedding_from_counts(ws, sl, c, svd_settings)
    attr = Attribution(ws, sl.weights, c, emb, test, alpha=svd_settings.alpha, shift=svd_settings.shift,
                       eig_power=svd_settings.eig_power)
    for key, label in (("x", "targets_x"), ("y", "targets_y"), ("a", "attributes_a"), ("b", "attributes_b")):
        if not attr.sets[key]:
            raise WordNotInVocabulary(f"test {test.name}: no word of {label} is in the vocabulary of slice {sl.name}")
    notes = []
    dropped = [w for w in test.all_words if w not in c.vocab.index]
    if dropped:
        notes.append(f"not in the vocabulary of slice {sl.name}, left out: {', '.join(dropped)}")
    base = attr.base
    rank_base = getattr(base, settings.rank_by)
    docs = ws.documents
    src = docs["source"].to_numpy()
    in_slice = sl.weights > 0

    # sources: exact fixed-subspace removal of each whole source (the linear sum misleads for big ones)
    lin = attr.linear(settings.rank_by)
    total_tokens = int(docs["n_tokens"].to_numpy()[in_slice].sum())
    rows = []
    for s in sorted(set(src[in_slice])):
        members = np.flatnonzero((src == s) & in_slice)
        ex = attr.exact(members)
        tokens = int(docs["n_tokens"].to_numpy()[members].sum())
        rows.append({"source": s, "documents": len(members), "tokens": tokens, "token_share": tokens / total_tokens,
                     "contribution": ex.effect_size - base.effect_size, "contribution_gap": ex.gap - base.gap,
                     "linear_estimate": float(lin[members].sum())})
    sources = pd.DataFrame(rows)
    ranked = sources["contribution_gap" if settings.rank_by == "gap" else "contribution"].to_numpy()
    support = _support(ranked, rank_base)
    sources["contribution_per_million_tokens"] = ranked / sources["tokens"] * 1e6
    share = ranked / np.abs(ranked).sum() if np.abs(ranked).sum() > 0 else ranked * 0
    sources["share_ratio"] = share / sources["token_share"]
    sources = sources.iloc[np.argsort(-support, kind="stable")].reset_index(drop=True)

    # documents: per-cell estimate for all (linear() misjudges cells one document holds), exact re-rank
    est = attr.estimate(settings.rank_by)
    cand = np.flatnonzero(in_slice)
    cand = cand[np.argsort(-_support(est[cand], rank_base), kind="stable")[: settings.candidates]]
    exact = dict(zip(cand.tolist(), attr.exact_each(cand)))
    ex_rank = np.array([getattr(exact[int(d)], settings.rank_by) - rank_base for d in cand])
    order = cand[np.argsort(-_support(ex_rank, rank_base), kind="stable")][: settings.top]
    doc_rows = []
    for rank, d in enumerate(order, start=1):
        e = exact[int(d)]
        pairs = attr.pair_parts(int(d), settings.rank_by)
        doc_rows.append({"rank": rank, "doc_id": docs.at[d, "doc_id"], "source": docs.at[d, "source"],
                         "time": docs.at[d, "time"], "title": docs.at[d, "title"],
                         "tokens": int(docs.at[d, "n_tokens"]), "estimate": float(est[d]),
                         "exact": getattr(e, settings.rank_by) - rank_base,
                         "contribution": e.effect_size - base.effect_size, "contribution_gap": e.gap - base.gap,
                         "pairs": "; ".join(f"{w}-{x} {v:+.2g}" for w, x, v in pairs), "doc_index": int(d)})
    documents = pd.DataFrame(doc_rows)

    passages = find_passages(ws, c, attr.stream, order[: settings.passage_docs], attr.sets["x"] + attr.sets["y"],
                             attr.sets["a"] + attr.sets["b"], settings)
    first_order = _first_order(attr, docs, settings)
    own = (base.effect_size, base.gap, 0.0) if model == "ppmi-svd" else \
        _measure_without(ws, test, model, sl, counts, model_settings, np.zeros(len(src), bool), settings.seeds)
    verification = None
    if settings.verify > 0:
        verification = verify(ws, test, model, sl, counts, model_settings, attr, sources, order, lin, settings,
                              progress=progress, full=own)
    if model == "word2vec":
        notes.append(f"word2vec has no cheap exact influence: sources and documents are estimated in the PPMI-SVD "
                     f"view of the same text ({view_counts.weighting} window weighting, shift log "
                     f"{svd_settings.shift:g}, context power {svd_settings.alpha:g}); the effect size and gap are "
                     f"word2vec's own (mean of {settings.seeds} seeds), and the verification retrains word2vec itself")
    return TraceResult(test.name, model, sl.name, own[0], own[1], settings.rank_by, sources,
                       documents.drop(columns=["doc_index"]) if len(documents) else documents, passages,
                       first_order, verification, notes, base.effect_size, base.gap)


def _first_order(attr: Attribution, docs: pd.DataFrame, settings: TraceSettings) -> pd.DataFrame:
    """Each target-attribute pair: joint count, PMI, and the documents whose removal moves its PMI most."""
    rows = []
    for t in attr.sets["x"] + attr.sets["y"]:
        for a in attr.sets["a"] + attr.sets["b"]:
            idx = attr.counts.vocab.index
            count = float(attr.counts.matrix[idx[t], idx[a]])
            base = {"target": t, "attribute": a, "set": "a" if a in attr.sets["a"] else "b", "count": count}
            if count == 0:
                rows.append({**base, "pmi": None, "doc_id": None, "pmi_without": None, "change": None})
                continue
            full, loo = attr.leave_one_out_pmi(t, a)
            change = loo - full
            for d in _largest(np.where(np.isneginf(loo), np.inf, np.abs(np.nan_to_num(change))),
                              settings.first_order_docs):
                rows.append({**base, "pmi": full, "doc_id": docs.at[d, "doc_id"],
                             "pmi_without": float(loo[d]) if np.isfinite(loo[d]) else None,
                             "change": float(change[d]) if np.isfinite(change[d]) else None})
    return pd.DataFrame(rows, columns=["target", "attribute", "set", "count", "pmi", "doc_id", "pmi_without", "change"])


def _largest(values: np.ndarray, k: int) -> np.ndarray:
    """Indices of the k largest positive values, largest first, ties in index order (no full sort)."""
    k = min(k, len(values))
    if k == 0:
        return np.zeros(0, np.int64)
    cut = np.partition(values, len(values) - k)[len(values) - k]
    top = np.flatnonzero((values >= cut) & (values > 0))
    return top[np.argsort(-values[top], kind="stable")][:k]


def find_passages(ws, counts, stream, doc_indices, targets: list[str], attributes: list[str],
                  settings: TraceSettings) -> pd.DataFrame:
    """Windows of the given documents where a target word and an attribute word co-occur.

    ``stream`` is the counted token stream (:func:`tracer.analysis.influence.kept_stream`), so a
    passage is a window exactly as the counter saw it. Offsets are characters of the
    stored text; ``marked`` has the two words in [[ ]].
    """
    idx = counts.vocab.index
    t_ids = {idx[w] for w in targets}
    a_ids = {idx[w] for w in attributes}
    st = stream
    window = counts.settings.window
    texts = ws.texts(doc_indices)
    tok = ws.tokenizer
    docs = ws.documents
    rows = []
    for d in doc_indices:
        d = int(d)
        lo, hi = np.searchsorted(st.doc, [d, d + 1])
        ids, pos = st.ids[lo:hi], st.pos[lo:hi]
        found = []
        for q in np.flatnonzero(np.isin(ids, list(t_ids))):
            for q2 in range(max(0, q - window), min(len(ids), q + window + 1)):
                if q2 != q and ids[q2] in a_ids:
                    found.append((q, q2))
        if not found:
            continue
        text = texts[d]
        spans = tok.spans(text)
        start_tok = int(ws.doc_offsets[d])
        for q, q2 in found[: settings.passages_per_doc]:
            p1, p2 = int(pos[q]) - start_tok, int(pos[q2]) - start_tok
            first, last = min(p1, p2), max(p1, p2)
            row = {"doc_id": docs.at[d, "doc_id"], "source": docs.at[d, "source"], "time": docs.at[d, "time"],
                   "target": counts.vocab.words[ids[q]], "attribute": counts.vocab.words[ids[q2]]}
            if spans is None:
                rows.append({**row, "start": None, "end": None, "text": None, "marked": None,
                             "note": "character offsets unavailable for this text"})
                continue
            a = spans[max(0, first - settings.context_tokens)][0]
            b = spans[min(len(spans) - 1, last + settings.context_tokens)][1]
            marks = sorted([spans[p1], spans[p2]])
            marked = (text[a:marks[0][0]] + "[[" + text[marks[0][0]:marks[0][1]] + "]]"
                      + text[marks[0][1]:marks[1][0]] + "[[" + text[marks[1][0]:marks[1][1]] + "]]" + text[marks[1][1]:b])
            rows.append({**row, "start": a, "end": b, "text": text[a:b], "marked": marked, "note": ""})
    return pd.DataFrame(rows, columns=["doc_id", "source", "time", "target", "attribute", "start", "end", "text",
                                       "marked", "note"])


def pair_passages(ws, word: str, contexts: list[str], sl: Slice, counts: CountSettings = CountSettings(),
                  top: int = 10, per_doc: int = 3, context_tokens: int = 8) -> pd.DataFrame:
    """KWIC evidence for a pair: passages of the ``top`` documents where ``word`` co-occurs most with the
    context words (window counts, as counted), with character offsets into the stored text."""
    word, contexts = ws.normalize_words([word])[0], ws.normalize_words(contexts)
    c = count_slice(ws, sl.weights, counts, slice_name=sl.name)
    missing = [w for w in [word] + contexts if w not in c.vocab.index]
    if missing:
        raise WordNotInVocabulary(f"not in the vocabulary of slice {sl.name} (min count {counts.min_count}): "
                                  + ", ".join(missing))
    from tracer.analysis.influence import document_probe_rows, kept_stream

    stream = kept_stream(ws, sl.weights, c)
    probe = np.array([c.vocab.index[word]])
    rows = document_probe_rows(stream, sl.weights, counts.distance_weights(), probe, ws.n_documents, len(c.vocab))
    cols = [c.vocab.index[w] for w in contexts]
    per_doc_count = np.asarray(rows[:, cols].sum(axis=1)).ravel()
    order = np.argsort(-per_doc_count, kind="stable")
    order = order[per_doc_count[order] > 0][:top]

    out = find_passages(ws, c, stream, order, [word], list(contexts),
                        TraceSettings(passages_per_doc=per_doc, context_tokens=context_tokens))
    counts_by_doc = dict(zip(ws.documents["doc_id"].to_numpy()[order], per_doc_count[order]))
    out.insert(3, "pair_count", out["doc_id"].map(counts_by_doc))
    return out
