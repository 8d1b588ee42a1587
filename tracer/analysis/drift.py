"""Drift across periods: trajectories with intervals, aligned spaces, and a split of each change
into "the mix of sources changed" and "the sources changed".

Trends and decompositions are computed on the raw gap (mean association of the first
target set minus that of the second): the effect size is bounded by 2 and reaches its
ceiling as soon as the target sets separate, while the gap keeps moving. The effect
size is shown beside it.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Callable

import numpy as np
import pandas as pd
from scipy import stats

from tracer.core.counting import CountSettings
from tracer.corpus.slices import Slice
from tracer.core.association import AssociationTest, unit_rows, weat, word_sets
from tracer.core.embedding import Embedding
from tracer.core.intervals import combined_interval, difference_interval
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.errors import SettingError, WordNotInVocabulary
from tracer.analysis.measure import (MeasureSettings, bootstrap_stream, bootstrap_weights, common_words, measure,
                                     restricted)
from tracer.provenance.counts import count_slice
from tracer.provenance.models import embedding_from_counts, start_replicate_vectors, train_embedding
from tracer.provenance.specs import normalized_tests

DEFAULT_MIN_TOKENS = 20_000


@dataclasses.dataclass(frozen=True)
class DriftResult:
    """``periods``: period, measured, reason, effect_size, ci_low, ci_high, gap, gap_ci_low, gap_ci_high,
    tokens, documents, dropped_words, change (the gap minus the previous measured period's),
    change_ci_low, change_ci_high (from the two periods' independent replicate sets, no pairing),
    change_significant (that interval excludes 0). ``trend``: slope, slope_unit ("gap per decade"),
    slope_ci_low, slope_ci_high (the OLS slope's interval from each period's own replicates),
    p_value (Kendall's tau of gap against time), tau, p_floor (the smallest p Kendall's exact test
    can give with this many periods), periods_used. ``changes``: from, to, overall, total, total_ci_low,
    total_ci_high, mix_part, mix_ci_low, mix_ci_high, within_part, within_ci_low, within_ci_high,
    mix_share (mix_part / total, see :func:`_decompose`), mix_part_at_from_mix and mix_part_at_to_mix
    (the mix part of each reweighting direction alone, whose mean is mix_part), reweighted_gap, sources_only_in_from,
    sources_only_in_to. ``source_parts``: from, to, source, share_from, share_to, within_contribution
    (the source's share of the within-source change, estimated with trace's machinery: the within
    change minus what it would be without that source in both periods)."""

    test: str
    model: str
    periods: pd.DataFrame
    trend: dict
    changes: pd.DataFrame
    source_parts: pd.DataFrame
    notes: list[str]


SLOPE_UNIT = "gap per decade"


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
    a time: every test and slice draws from its own random stream). Unless
    ``settings.per_slice_words``, every period uses the words known in every measured period."""
    tests = normalized_tests(tests, ws)
    for test in tests.values():
        if not test.two_target:
            raise SettingError(f"test {test.name} has one target set; drift takes two-target tests")
    if len(periods) < 2:
        raise SettingError("drift needs at least two periods (e.g. --by time:10y)")
    usable = [p for p in periods if p.n_tokens >= min_tokens]
    res = measure(ws, tests, model, usable, counts, model_settings, settings, progress=progress)
    used = tests
    if not settings.per_slice_words and len(usable) > 1:
        used = {n: restricted(t, common_words(ws, tests, usable, counts)) for n, t in tests.items()}
    shared = _Reweighted(ws, used, model, counts, model_settings, settings)
    return {name: _one_drift(ws, test, model, periods, res, shared, min_tokens) for name, test in used.items()}


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
    gaps = table.set_index("period")["gap"]
    change = {}
    for a, b in zip(measured[:-1], measured[1:]):
        iv = difference_interval(gaps[a.name], reps.get(a.name, []), gaps[b.name], reps.get(b.name, []))
        change[b.name] = (iv.estimate, iv.low, iv.high, bool(iv.low > 0 or iv.high < 0) if iv.n >= 2 else None)
    for k, col in enumerate(["change", "change_ci_low", "change_ci_high", "change_significant"]):
        table[col] = table["period"].map({n: v[k] for n, v in change.items()})
    trend = _trend(table[table["measured"] == True], reps)  # noqa: E712 - a column of bools
    if trend["p_value"] is not None and trend["p_value"] <= trend["p_floor"] * (1 + 1e-9):
        notes.append(f"trend: p = {trend['p_value']:.3g} is the smallest Kendall's exact test can give with "
                     f"{trend['periods_used']} periods (2 / {trend['periods_used']}!); more periods are needed for "
                     "a smaller one")
    if model == "ppmi-svd":
        changes, parts = _decompose(ws, test, measured, table, reps, shared, notes)
    else:
        changes, parts = _totals_only(measured, table, reps), pd.DataFrame(columns=SOURCE_PART_COLUMNS)
        notes.append(NO_SPLIT_NOTE.format(model=model))
    return DriftResult(test.name, model, table, trend, changes, parts, notes)


def _trend(measured: pd.DataFrame, reps: dict) -> dict:
    """OLS slope of the gap per decade with its interval, and Kendall's tau of the gap against time.

    The slope is ``sum_i c_i gap_i`` with ``c_i = (x_i - mean x) / sum (x - mean x)^2`` (x in
    decades), so its standard error combines each period's own bootstrap standard error
    (independent periods, :func:`tracer.core.intervals.combined_interval`). The interval is for
    the slope through these periods' gaps: it reflects the sampling of documents within the
    periods, not how well a straight line fits.
    """
    n = len(measured)
    if n < 3:
        return {"slope": None, "slope_unit": SLOPE_UNIT, "slope_ci_low": None, "slope_ci_high": None,
                "p_value": None, "tau": None, "p_floor": None, "periods_used": n}
    x = np.array([_decade_position(p) for p in measured["period"]])
    y = measured["gap"].to_numpy(dtype=float)
    coef = (x - x.mean()) / np.sum((x - x.mean()) ** 2)
    slope = float(coef @ y)
    lo = hi = None
    if all(p in reps for p in measured["period"]):
        iv = combined_interval(slope, coef, [reps[p] for p in measured["period"]])
        lo, hi = iv.low, iv.high
    tau = stats.kendalltau(x, y)
    return {"slope": slope, "slope_unit": SLOPE_UNIT, "slope_ci_low": lo, "slope_ci_high": hi,
            "p_value": float(tau.pvalue), "tau": float(tau.statistic), "p_floor": 2.0 / math.factorial(n),
            "periods_used": n}


class _Reweighted:
    """Each period of a pair reweighted to the other's source mix: measured for every test, with
    bootstrap replicates that reuse the period's own resamples (so that a period's plain and
    reweighted replicates move together), and counted and factorised for the per-source split."""

    def __init__(self, ws, tests, model, counts, model_settings, settings: MeasureSettings):
        self.ws, self.tests, self.model, self.counts = ws, tests, model, counts
        self.model_settings = model_settings
        self.settings = settings
        self.svd = model_settings if isinstance(model_settings, PpmiSvdSettings) else PpmiSvdSettings(
            dim=getattr(model_settings, "dim", 100))
        self._pairs: dict = {}
        self._models: dict = {}
        self._counts: dict = {}
        self._resamples: dict = {}

    def pair(self, period: Slice, other: Slice):
        """(period reweighted to other's mix, sources only in period, sources only in other, its gaps
        by test (measured, gap), its replicate gaps by test)."""
        if (period.name, other.name) not in self._pairs:
            rw, only_p, only_o = reweight_to(self.ws, period, other)
            replicates = self._replicates(period, other, rw)  # started first: they run beside the model's SVD
            gaps = self._gaps(rw)
            self._pairs[period.name, other.name] = (rw, only_p, only_o, gaps, replicates())
        return self._pairs[period.name, other.name]

    def _gaps(self, rw: Slice) -> pd.DataFrame:
        """Whether each test can be measured on the reweighted period and its gap there, by test: what
        :func:`measure` gives in those columns, from the model :meth:`counts_and_model` keeps (which
        the per-source split and the replicates use as well), so it is made once."""
        c, emb = self.counts_and_model(rw)
        unit, known = unit_rows(emb.vectors), set(emb.index) & set(c.vocab.index)
        rows = []
        for name, t in self.tests.items():
            ok = word_sets(t, known).reason_not_measured(True, self.settings.min_words) is None
            rows.append({"test": name, "measured": ok,
                         "gap": weat(unit, emb.index, t, with_p=False).gap if ok else float("nan")})
        return pd.DataFrame(rows, columns=["test", "measured", "gap"]).set_index("test")

    def _replicates(self, period: Slice, other: Slice, rw: Slice) -> Callable[[], dict]:
        """Start the gaps of the reweighted period over the period's own bootstrap resamples, each
        reweighted to ``other``'s mix (PPMI-SVD only: each replicate gets the exact SVD, as in
        measure, on the replicate pool's workers); returns the function that waits for them."""
        if self.model != "ppmi-svd" or self.settings.bootstrap < 2:
            return dict
        if period.name not in self._resamples:
            rng = bootstrap_stream(self.settings.seed, period.name)
            self._resamples[period.name] = [bootstrap_weights(period, rng) for _ in range(self.settings.bootstrap)]
        c = self.counts_of(rw)
        resamples = self._resamples[period.name]
        matrices = (count_slice(self.ws, reweight_to(self.ws, Slice(period.name, w, int((w > 0).sum()), period.n_tokens),
                                                     other)[0].weights, self.counts, slice_name=rw.name,
                                vocab=c.vocab).matrix for w in resamples)
        pending = start_replicate_vectors(self.ws, matrices, self.svd, len(resamples), c.matrix)

        def gaps() -> dict:
            index = self.counts_and_model(rw)[1].index
            out = {name: [] for name in self.tests}
            for vectors in pending():
                unit = unit_rows(vectors)
                for name, t in self.tests.items():
                    out[name].append(weat(unit, index, t, with_p=False).gap)
            return {name: np.array(v) for name, v in out.items()}
        return gaps

    def counts_of(self, period: Slice):
        """The counts of a period, made once."""
        if period.name not in self._counts:
            self._counts[period.name] = count_slice(self.ws, period.weights, self.counts, slice_name=period.name)
        return self._counts[period.name]

    def counts_and_model(self, period: Slice):
        """The PPMI-SVD counts and model of a period (for trace's machinery), made once."""
        if period.name not in self._models:
            c = self.counts_of(period)
            self._models[period.name] = (c, embedding_from_counts(self.ws, period, c, self.svd))
        return self._models[period.name]


def _decompose(ws, test, measured, table, reps, shared: _Reweighted, notes):
    """Split each change of the gap into the mix part and the within part, symmetrically.

    With g the gap, b->a the later period reweighted to the earlier one's source mix and a->b
    the reverse, the within part averages both directions,
    ``within = ((g(b->a) - g(a)) + (g(b) - g(a->b))) / 2``, and ``mix = total - within``, so the
    parts add up to the change. Regrouped by period, ``within = S_b - S_a`` with
    ``S = (g(period) + g(period reweighted)) / 2`` (and ``mix`` likewise with differences), each S
    a function of one period's documents: the intervals combine the two periods' independent
    replicate sets. ``mix_share = mix / total`` is the share of the change due to the mix; it lies
    outside 0..1 when the parts pull in opposite directions (then neither part is "most" of it).
    """
    gaps = table.set_index("period")["gap"]
    rows, parts = [], []
    pairs = list(zip(measured[:-1], measured[1:]))
    if len(measured) > 2:
        pairs.append((measured[0], measured[-1]))
    for a, b in pairs:
        rw_b, only_b, only_a, sum_b, rep_b = shared.pair(b, a)
        rw_a, _, _, sum_a, rep_a = shared.pair(a, b)
        ga, gb = float(gaps[a.name]), float(gaps[b.name])
        gba, gab = float(sum_b.loc[test.name].gap), float(sum_a.loc[test.name].gap)
        total = gb - ga
        within = ((gba - ga) + (gb - gab)) / 2
        mix = total - within
        row = {"from": a.name, "to": b.name, "overall": (a, b) == (measured[0], measured[-1]) and len(measured) > 2,
               "total": total, "mix_part": mix, "within_part": within,
               "mix_share": mix / total if np.isfinite(mix) and total != 0 else None,
               "mix_part_at_from_mix": gb - gba, "mix_part_at_to_mix": gab - ga,
               "reweighted_gap": gba, "sources_only_in_from": only_a, "sources_only_in_to": only_b}
        row.update(_part_intervals(reps.get(a.name), reps.get(b.name), rep_a.get(test.name), rep_b.get(test.name),
                                   ga, gb, gab, gba))
        rows.append(row)
        if only_a or only_b:
            notes.append(f"{a.name} -> {b.name}: sources in one period only: "
                         + ", ".join([f"{s} ({a.name})" for s in only_a] + [f"{s} ({b.name})" for s in only_b]))
        sa, sb = source_shares(ws, a.weights), source_shares(ws, b.weights)
        note = _upweight_note(a.name, b.name, sa, sb)
        if note:
            notes.append(note)
        within_by_source = _within_by_source(ws, test, a, rw_b, shared) if sum_b.loc[test.name].measured else {}
        for s in sorted(set(sa.index) | set(sb.index)):
            parts.append({"from": a.name, "to": b.name, "source": s, "share_from": float(sa.get(s, 0.0)),
                          "share_to": float(sb.get(s, 0.0)), "within_contribution": within_by_source.get(s)})
    return (pd.DataFrame(rows, columns=CHANGE_COLUMNS),
            pd.DataFrame(parts, columns=SOURCE_PART_COLUMNS))


NO_SPLIT_NOTE = ("changes: no mix/within split and no interval for its parts with {model}: the split reweights "
                 "each period's documents to the other period's source mix, and those fractional weights only "
                 "PPMI-SVD can train on; the total change and its interval are given; use --model ppmi-svd "
                 "for the split")
SOURCE_PART_COLUMNS = ["from", "to", "source", "share_from", "share_to", "within_contribution"]


def _totals_only(measured, table, reps) -> pd.DataFrame:
    """The changes table without the split (models that cannot train on reweighted documents): the
    total change of each pair with its interval from the periods' own replicates."""
    gaps = table.set_index("period")["gap"]
    pairs = list(zip(measured[:-1], measured[1:]))
    if len(measured) > 2:
        pairs.append((measured[0], measured[-1]))
    rows = []
    for a, b in pairs:
        ga, gb = float(gaps[a.name]), float(gaps[b.name])
        row = {"from": a.name, "to": b.name, "overall": (a, b) == (measured[0], measured[-1]) and len(measured) > 2,
               "total": gb - ga}
        row.update(_part_intervals(reps.get(a.name), reps.get(b.name), None, None, ga, gb, None, None))
        rows.append(row)
    return pd.DataFrame(rows, columns=CHANGE_COLUMNS)


CHANGE_COLUMNS = ["from", "to", "overall", "total", "total_ci_low", "total_ci_high", "mix_part", "mix_ci_low",
                  "mix_ci_high", "within_part", "within_ci_low", "within_ci_high", "mix_share", "mix_part_at_from_mix",
                  "mix_part_at_to_mix", "reweighted_gap",
                  "sources_only_in_from", "sources_only_in_to"]


UPWEIGHT_NOTE_FROM = 3.0


def _upweight_note(a: str, b: str, sa: pd.Series, sb: pd.Series) -> str:
    """A note when either reweighting multiplies one source's documents by UPWEIGHT_NOTE_FROM or more:
    a model of few distinct documents weighted up gives smaller gaps (as bootstrap replicates do),
    a bias the replicate intervals do not show."""
    common = sa.index.intersection(sb.index)
    if len(common) == 0:
        return ""
    fa, fb = sa[common] / sa[common].sum(), sb[common] / sb[common].sum()
    worst = max(((fb / fa).max(), (fb / fa).idxmax(), a, b), ((fa / fb).max(), (fa / fb).idxmax(), b, a))
    if worst[0] < UPWEIGHT_NOTE_FROM:
        return ""
    factor, source, period, other = worst
    return (f"{a} -> {b}: {period} reweighted to the source mix of {other} weights the documents of {source} "
            f"{factor:.1f}x; a model of so few distinct documents tends to give smaller gaps, which the "
            "intervals do not show: compare mix_part_at_from_mix and mix_part_at_to_mix")


def _part_intervals(rep_a, rep_b, rep_ab, rep_ba, ga, gb, gab, gba) -> dict:
    """Intervals of the total, mix and within parts from the periods' replicate sets (NaN without)."""
    out = {}
    if rep_a is not None and rep_b is not None:
        iv = difference_interval(ga, rep_a, gb, rep_b)
        out.update(total_ci_low=iv.low, total_ci_high=iv.high)
    if rep_a is None or rep_b is None or rep_ab is None or rep_ba is None:
        return out
    n = min(len(rep_a), len(rep_ab), len(rep_b), len(rep_ba))  # a period's plain and reweighted replicates pair up
    s_a, s_b = (rep_a[:n] + rep_ab[:n]) / 2, (rep_b[:n] + rep_ba[:n]) / 2
    m_a, m_b = (rep_ab[:n] - rep_a[:n]) / 2, (rep_b[:n] - rep_ba[:n]) / 2
    within = difference_interval((ga + gab) / 2, s_a, (gb + gba) / 2, s_b)
    mix = combined_interval((gab - ga) / 2 + (gb - gba) / 2, [1.0, 1.0], [m_a, m_b])
    out.update(within_ci_low=within.low, within_ci_high=within.high, mix_ci_low=mix.low, mix_ci_high=mix.high)
    return out


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


def _all_distances(e: Embedding, prev: Embedding) -> np.ndarray:
    """Cosine distance between the two aligned periods of every word both know: the noise floor
    against which one word's change is read (shape (n_shared,))."""
    shared = [w for w in e.words if w in prev.index]
    a = e.unit_vectors[[e.index[w] for w in shared]].astype(np.float64)
    b = prev.unit_vectors[[prev.index[w] for w in shared]].astype(np.float64)
    return 1 - np.einsum("ij,ij->i", a, b)


def word_drift(ws, words: list[str], periods: list[Slice], counts: CountSettings = CountSettings(),
               settings: PpmiSvdSettings = PpmiSvdSettings(), neighbours: int = 10) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    """Per word and period: cosine distance to the previous period in the aligned space, read against
    the same distance of every word the two periods share (distance_percentile: the share of shared
    words that moved no more, in percent; their median and 95th percentile beside it), and the
    nearest neighbours in each period. Only words above the minimum count in both periods are compared."""
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
        floor = _all_distances(e, prev) if prev is not None else np.array([])
        for w in words:
            row = {"word": w, "period": p.name, "in_vocabulary": w in e, "distance_from_previous": None,
                   "distance_percentile": None, "median_distance_all_words": None,
                   "distance_95th_all_words": None, "words_compared": len(floor) if prev is not None else None}
            if w in e and prev is not None and w in prev:
                dist = float(1 - e.unit_vectors[e.index[w]] @ prev.unit_vectors[prev.index[w]])
                row.update(distance_from_previous=dist,
                           distance_percentile=float(100 * np.mean(floor <= dist + 1e-12)),
                           median_distance_all_words=float(np.median(floor)),
                           distance_95th_all_words=float(np.percentile(floor, 95)))
            change.append(row)
            if w in e:
                near.extend({"word": w, "period": p.name, "rank": r + 1, "neighbour": n, "cosine": s}
                            for r, (n, s) in enumerate(embs[k].neighbours(w, neighbours)))
    return pd.DataFrame(change), pd.DataFrame(near), notes
