"""Drift across periods: trajectories with intervals, aligned spaces, and a split of each change
into "the mix of sources changed" and "the sources changed".

Trends and decompositions are computed on the raw gap (mean association of the first
target set minus that of the second): the effect size is bounded by 2 and reaches its
ceiling as soon as the target sets separate, while the gap keeps moving. The effect
size is shown beside it.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
from scipy import stats

from tracer.core.counting import CountSettings
from tracer.corpus.slices import Slice
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import train_embedding
from tracer.core.embedding import Embedding
from tracer.errors import SettingError, WordNotInVocabulary
from tracer.analysis.measure import MeasureSettings, measure
from tracer.core.association import AssociationTest
from tracer.provenance.specs import normalized_tests

DEFAULT_MIN_TOKENS = 20_000


@dataclasses.dataclass(frozen=True)
class DriftResult:
    """``periods``: period, measured, reason, effect_size, ci_low, ci_high, gap, gap_ci_low, gap_ci_high,
    tokens, documents, dropped_words, change_significant (the gap's change from the previous measured
    period: its bootstrap interval excludes 0). ``trend``: slope (gap per decade), slope_ci_low,
    slope_ci_high, p_value (Kendall's tau of gap against time), tau, periods_used. ``changes``: from, to,
    total, mix_part, within_part, mix_share, reweighted_gap, sources_only_in_from, sources_only_in_to.
    ``source_parts``: from, to, source, share_from, share_to, within_contribution (the source's share of
    the within-source change, estimated with trace's machinery: the within change minus what it would
    be without that source in both periods)."""

    test: str
    model: str
    periods: pd.DataFrame
    trend: dict
    changes: pd.DataFrame
    source_parts: pd.DataFrame
    notes: list[str]


def _decade_position(name: str) -> float:
    """Midpoint of a period named time=A..B, in decades."""
    span = name.split("=", 1)[1]
    a, _, b = span.partition("..")
    return (int(a) + int(b or a)) / 2 / 10


def source_shares(ws, weights: np.ndarray) -> pd.Series:
    docs = ws.documents
    tokens = pd.Series(docs["n_tokens"].to_numpy() * weights, index=docs["source"].to_numpy())
    per = tokens.groupby(level=0).sum()
    per = per[per > 0]
    return per / per.sum()


def reweight_to(ws, later: Slice, earlier: Slice) -> tuple[Slice, list[str], list[str]]:
    """The later period with documents reweighted so that each source has the earlier period's token share.

    Returns the reweighted slice, the sources found only in the later period (weight 0) and
    those found only in the earlier one (which the later period cannot stand in for).
    """
    s_early, s_late = source_shares(ws, earlier.weights), source_shares(ws, later.weights)
    common = s_early.index.intersection(s_late.index)
    if len(common) == 0:
        raise SettingError(f"periods {earlier.name} and {later.name} share no source; the mix cannot be held fixed")
    target = s_early[common] / s_early[common].sum()
    ratio = (target / s_late[common]).to_dict()
    src = ws.documents["source"].to_numpy()
    factor = np.array([ratio.get(s, 0.0) for s in src])
    w = later.weights * factor
    only_late = sorted(set(s_late.index) - set(common))
    only_early = sorted(set(s_early.index) - set(common))
    return (Slice(f"{later.name} with the source mix of {earlier.name}", w, int((w > 0).sum()), later.n_tokens),
            only_late, only_early)


def drift(ws, test: AssociationTest, model: str, periods: list[Slice], counts: CountSettings = CountSettings(),
          model_settings=None, settings: MeasureSettings = MeasureSettings(bootstrap=20), *,
          min_tokens: int = DEFAULT_MIN_TOKENS, progress: bool = False) -> DriftResult:
    """Trajectory, trend and decomposition of one two-target test over consecutive periods."""
    return drift_tests(ws, {test.name: test}, model, periods, counts, model_settings, settings,
                       min_tokens=min_tokens, progress=progress)[test.name]


def drift_tests(ws, tests: dict[str, AssociationTest], model: str, periods: list[Slice],
                counts: CountSettings = CountSettings(), model_settings=None,
                settings: MeasureSettings = MeasureSettings(bootstrap=20), *, min_tokens: int = DEFAULT_MIN_TOKENS,
                progress: bool = False) -> dict[str, DriftResult]:
    """:func:`drift` of several tests, by name: each period's models, bootstrap replicates and
    reweighted counterparts are made once for all of them (the results are those of one test at
    a time: every test and slice draws from its own random stream)."""
    tests = normalized_tests(tests, ws)
    for test in tests.values():
        if not test.two_target:
            raise SettingError(f"test {test.name} has one target set; drift takes two-target tests")
    if len(periods) < 2:
        raise SettingError("drift needs at least two periods (e.g. --by time:10y)")
    usable = [p for p in periods if p.n_tokens >= min_tokens]
    res = measure(ws, tests, model, usable, counts, model_settings, settings, progress=progress)
    shared = _Reweighted(ws, tests, model, counts, model_settings, settings)
    return {name: _one_drift(ws, test, model, periods, res, shared, min_tokens) for name, test in tests.items()}


def _one_drift(ws, test, model, periods, res, shared, min_tokens) -> DriftResult:
    notes = []
    summary = res.summary[res.summary["test"] == test.name]
    by_name = summary.set_index("slice")
    rows = []
    for p in periods:
        base = {"period": p.name, "tokens": p.n_tokens, "documents": p.n_documents}
        if p.n_tokens < min_tokens:
            rows.append({**base, "measured": False,
                         "reason": f"{p.n_tokens} tokens, fewer than the {min_tokens} a period needs"})
            continue
        r = by_name.loc[p.name]
        rows.append({**base, "measured": bool(r.measured), "reason": r.reason, "effect_size": r.effect_size,
                     "ci_low": r.ci_low, "ci_high": r.ci_high, "gap": r.gap, "gap_ci_low": r.gap_ci_low,
                     "gap_ci_high": r.gap_ci_high, "dropped_words": r.dropped_words})
    table = pd.DataFrame(rows, columns=["period", "measured", "reason", "effect_size", "ci_low", "ci_high", "gap",
                                        "gap_ci_low", "gap_ci_high", "tokens", "documents", "dropped_words"])
    replicates = res.replicates[res.replicates["test"] == test.name]
    reps = {name: g.sort_values("replicate")["gap"].to_numpy() for name, g in replicates.groupby("slice")}
    measured = [p for p in periods if table.set_index("period").loc[p.name, "measured"]]
    sig = {}
    for a, b in zip(measured[:-1], measured[1:]):
        if a.name in reps and b.name in reps:
            diff = reps[b.name] - reps[a.name][: len(reps[b.name])]
            lo, hi = np.percentile(diff, [2.5, 97.5])
            sig[b.name] = bool(lo > 0 or hi < 0)
    table["change_significant"] = table["period"].map(sig)
    trend = _trend(table[table["measured"] == True], reps)  # noqa: E712 - a column of bools
    changes, parts = _decompose(ws, test, measured, table, shared, notes)
    return DriftResult(test.name, model, table, trend, changes, parts, notes)


def _trend(measured: pd.DataFrame, reps: dict) -> dict:
    """OLS slope of the gap per decade, its interval from one bootstrap replicate per period, and
    Kendall's tau (a rank-based trend test) of the gap against time."""
    if len(measured) < 3:
        return {"slope": None, "slope_ci_low": None, "slope_ci_high": None, "p_value": None, "tau": None,
                "periods_used": len(measured)}
    x = np.array([_decade_position(p) for p in measured["period"]])
    y = measured["gap"].to_numpy(dtype=float)
    slope = float(np.polyfit(x, y, 1)[0])
    lo = hi = None
    if all(p in reps for p in measured["period"]):
        n = min(len(reps[p]) for p in measured["period"])
        draws = np.array([reps[p][:n] for p in measured["period"]])  # (periods, replicates)
        slopes = np.polyfit(x, draws, 1)[0]
        lo, hi = (float(v) for v in np.percentile(slopes, [2.5, 97.5]))
    tau = stats.kendalltau(x, y)
    return {"slope": slope, "slope_ci_low": lo, "slope_ci_high": hi, "p_value": float(tau.pvalue),
            "tau": float(tau.statistic), "periods_used": len(measured)}


class _Reweighted:
    """The later period of each pair reweighted to the earlier one's source mix: measured for every
    test, and counted and factorised for the per-source split, once per pair."""

    def __init__(self, ws, tests, model, counts, model_settings, settings: MeasureSettings):
        self.ws, self.tests, self.model, self.counts = ws, tests, model, counts
        self.model_settings = model_settings
        self.svd = model_settings if isinstance(model_settings, PpmiSvdSettings) else PpmiSvdSettings(
            dim=getattr(model_settings, "dim", 100))
        self.one = MeasureSettings(min_words=settings.min_words, bootstrap=0, seeds=settings.seeds,
                                   permutations=settings.permutations, exact_budget=settings.exact_budget,
                                   seed=settings.seed, alpha=settings.alpha)
        self._pairs: dict = {}
        self._models: dict = {}

    def pair(self, a: Slice, b: Slice):
        """(the reweighted slice, sources only in b, sources only in a, its measure summary by test)."""
        if (a.name, b.name) not in self._pairs:
            rw, only_b, only_a = reweight_to(self.ws, b, a)
            summary = measure(self.ws, self.tests, self.model, [rw], self.counts, self.model_settings,
                              self.one).summary.set_index("test")
            self._pairs[a.name, b.name] = (rw, only_b, only_a, summary)
        return self._pairs[a.name, b.name]

    def counts_and_model(self, period: Slice):
        """The PPMI-SVD counts and model of a period (for trace's machinery), made once."""
        from tracer.provenance.counts import count_slice
        from tracer.provenance.models import embedding_from_counts
        if period.name not in self._models:
            c = count_slice(self.ws, period.weights, self.counts, slice_name=period.name)
            self._models[period.name] = (c, embedding_from_counts(self.ws, period, c, self.svd))
        return self._models[period.name]


def _decompose(ws, test, measured, table, shared: _Reweighted, notes):
    gaps = table.set_index("period")["gap"]
    rows, parts = [], []
    pairs = list(zip(measured[:-1], measured[1:]))
    if len(measured) > 2:
        pairs.append((measured[0], measured[-1]))
    for a, b in pairs:
        rw, only_b, only_a, summary = shared.pair(a, b)
        r = summary.loc[test.name]
        total = float(gaps[b.name] - gaps[a.name])
        within = float(r.gap - gaps[a.name]) if r.measured else float("nan")
        mix = total - within
        rows.append({"from": a.name, "to": b.name, "overall": (a, b) == (measured[0], measured[-1]) and len(measured) > 2,
                     "total": total, "mix_part": mix, "within_part": within,
                     "mix_share": abs(mix) / (abs(mix) + abs(within)) if np.isfinite(within) and (mix or within) else None,
                     "reweighted_gap": float(r.gap), "sources_only_in_from": only_a, "sources_only_in_to": only_b})
        if only_a or only_b:
            notes.append(f"{a.name} -> {b.name}: sources in one period only: "
                         + ", ".join([f"{s} ({a.name})" for s in only_a] + [f"{s} ({b.name})" for s in only_b]))
        sa, sb = source_shares(ws, a.weights), source_shares(ws, b.weights)
        within_by_source = _within_by_source(ws, test, a, rw, shared) if r.measured else {}
        for s in sorted(set(sa.index) | set(sb.index)):
            parts.append({"from": a.name, "to": b.name, "source": s, "share_from": float(sa.get(s, 0.0)),
                          "share_to": float(sb.get(s, 0.0)), "within_contribution": within_by_source.get(s)})
    return (pd.DataFrame(rows, columns=["from", "to", "overall", "total", "mix_part", "within_part", "mix_share",
                                        "reweighted_gap", "sources_only_in_from", "sources_only_in_to"]),
            pd.DataFrame(parts, columns=["from", "to", "source", "share_from", "share_to", "within_contribution"]))


def _within_by_source(ws, test, earlier: Slice, reweighted: Slice, shared: _Reweighted) -> dict:
    """Each source's share of the within-source change, with trace's machinery on the difference.

    within = gap(later, reweighted) - gap(earlier). Without source s in both periods it would be
    within_{-s}; the source's contribution is within - within_{-s}, each gap without s estimated
    exactly on the probe rows with the period's subspace held fixed (an estimate, like trace's).
    """
    from tracer.analysis.influence import Attribution

    svd = shared.svd
    src = ws.documents["source"].to_numpy()
    attrs = []
    for period in (earlier, reweighted):
        c, emb = shared.counts_and_model(period)
        attrs.append(Attribution(ws, period.weights, c, emb, test, alpha=svd.alpha, shift=svd.shift,
                                 eig_power=svd.eig_power))
    early, late = attrs
    within = late.base.gap - early.base.gap
    out = {}
    for s in sorted(set(src[(earlier.weights > 0) | (reweighted.weights > 0)])):
        docs_early = np.flatnonzero((src == s) & (earlier.weights > 0))
        docs_late = np.flatnonzero((src == s) & (reweighted.weights > 0))
        g_early = early.exact(docs_early).gap if len(docs_early) else early.base.gap
        g_late = late.exact(docs_late).gap if len(docs_late) else late.base.gap
        out[s] = float(within - (g_late - g_early))
    return out


# ---- aligned spaces ----------------------------------------------------------------------------

def procrustes_rotation(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The orthogonal R minimising ||a R - b|| (Schoenemann 1966): R = U V^T from the SVD of a^T b."""
    u, _, vt = np.linalg.svd(a.T @ b)
    return u @ vt


def aligned(embeddings: list[Embedding], reference: int = -1) -> tuple[list[Embedding], list[int]]:
    """Rotate every embedding onto the reference one (orthogonal Procrustes on their shared words,
    Hamilton, Leskovec and Jurafsky 2016). Returns the rotated embeddings and, for each, the number
    of shared words the rotation used."""
    ref = embeddings[reference]
    out, shared_counts = [], []
    for e in embeddings:
        if e.dim != ref.dim:
            raise SettingError("periods must have embeddings of one dimension to be aligned")
        shared = [w for w in e.words if w in ref.index]
        if len(shared) < e.dim:
            raise SettingError(f"only {len(shared)} words are shared with the reference period, fewer than the "
                               f"{e.dim} dimensions; use a lower --dim or longer periods")
        a = e.unit_vectors[[e.index[w] for w in shared]]
        b = ref.unit_vectors[[ref.index[w] for w in shared]]
        rot = procrustes_rotation(a, b)
        out.append(Embedding(e.words, (e.unit_vectors @ rot).astype(np.float32), e.card))
        shared_counts.append(len(shared))
    return out, shared_counts


def word_drift(ws, words: list[str], periods: list[Slice], counts: CountSettings = CountSettings(),
               settings: PpmiSvdSettings = PpmiSvdSettings(), neighbours: int = 10) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    """Per word and period: cosine distance to the previous period in the aligned space, and the nearest
    neighbours in each period. Only words above the minimum count in both periods are compared."""
    words = ws.normalize_words(words)
    embs = [train_embedding(ws, p, "ppmi-svd", counts, settings, save=False) for p in periods]
    rotated, shared = aligned(embs)
    notes = [f"{p.name}: {n} words shared with {periods[-1].name} were used for the rotation"
             for p, n in zip(periods, shared)]
    unknown = [w for w in words if not any(w in e for e in embs)]
    if unknown:
        raise WordNotInVocabulary(f"not at min count {counts.min_count} in any period: {', '.join(unknown)}")
    change, near = [], []
    for k, (p, e) in enumerate(zip(periods, rotated)):
        prev = rotated[k - 1] if k else None
        both = sum(1 for w in e.words if prev is not None and w in prev.index)
        for w in words:
            row = {"word": w, "period": p.name, "in_vocabulary": w in e}
            if w in e and prev is not None and w in prev:
                row["distance_from_previous"] = float(1 - e.unit_vectors[e.index[w]] @ prev.unit_vectors[prev.index[w]])
            else:
                row["distance_from_previous"] = None
            row["words_compared"] = both if prev is not None else None
            change.append(row)
            if w in e:
                near.extend({"word": w, "period": p.name, "rank": r + 1, "neighbour": n, "cosine": s}
                            for r, (n, s) in enumerate(embs[k].neighbours(w, neighbours)))
    return pd.DataFrame(change), pd.DataFrame(near), notes
