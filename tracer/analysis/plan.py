"""Plan a removal that brings a test's |d| to a goal, verified by retraining.

Each round estimates on the model of the corpus as it stands (linear influence, then the
exact fixed-subspace re-check of :class:`~tracer.analysis.influence.Attribution`), adds the
units that reach the goal by that estimate, preferring those that weaken the association
most per token removed and keeping a unit only while, among the units chosen before it, it still
does at least half of what it does alone (MIN_KEPT_SUPPORT; one whose effect the earlier units
already took would be text removed for nothing), and retrains. The retrained model of the reduced corpus is the
verification; when it overshoots, the round's additions are cut back to the shortest prefix
that still reaches the goal (bisection, one retrain per step). Rounds stop when the verified
effect (or, if asked, its whole interval) is within the goal, or with ``reached`` False.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from tracer.analysis.counterfactual import gap_and_score_sd, reduced_slice
from tracer.analysis.influence import Attribution
from tracer.analysis.measure import MeasureSettings, bootstrap_weights, measure
from tracer.analysis.plan_loss import loss_tables
from tracer.core.association import AssociationTest, score_sd, weat
from tracer.core.intervals import RATIO_METHOD, ratio_interval
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.corpus.slices import Slice
from tracer.errors import SettingError
from tracer.provenance.counts import count_slice
from tracer.provenance.specs import normalized_test
from tracer.provenance.models import embedding_from_counts, train_embedding

MIN_KEPT_SUPPORT = 0.5  # share of a unit's own exact effect it must keep among the units chosen before it
SOURCE_P = 0.05  # a source is dropped only if the test is significant inside it at this level


@dataclasses.dataclass(frozen=True)
class Plan:
    """The outcome of :func:`plan`.

    ``removed``: document ids or source names, in the order added; ``removed_table``: one row per
    source with the documents and tokens the plan takes from it; ``rounds``: the verified effect
    after each round; ``verified_low``/``verified_high``: its interval (NaN without bootstrap),
    made as ``interval_method`` says; ``losses``: occurrences of the test's words removed;
    ``falling``: the frequent words whose counts fall most; ``usefulness``: measure, before, after.
    """

    unit: str
    goal: float
    reached: bool
    message: str
    removed: list[str]
    doc_indices: np.ndarray
    tokens_removed: int
    token_share: float
    effect_before: float
    predicted_effect: float
    verified_effect: float
    verified_low: float
    verified_high: float
    interval_method: str
    steps: pd.DataFrame
    rounds: pd.DataFrame
    removed_table: pd.DataFrame
    losses: pd.DataFrame
    falling: pd.DataFrame
    usefulness: pd.DataFrame


def _model(ws, sl: Slice, test: AssociationTest, counts: CountSettings, settings: PpmiSvdSettings):
    c = count_slice(ws, sl.weights, counts, slice_name=sl.name)
    emb = embedding_from_counts(ws, sl, c, settings)
    return emb, Attribution(ws, sl.weights, c, emb, test, alpha=settings.alpha, shift=settings.shift,
                            eig_power=settings.eig_power)


def _units(ws, attr: Attribution, weights: np.ndarray, unit: str, candidates: int, per_token: bool = True,
           allowed: list[str] | None = None):
    """Candidate units of the current corpus, most support per token first: (groups, names, tokens).

    Support is the exact fall of the gap towards zero: near its ceiling of 2 the effect size
    hardly moves at first, so ranking by it favours documents that only change the spread of
    the scores."""
    docs = ws.documents
    n_tokens = docs["n_tokens"].to_numpy()
    base = attr.base.gap
    sign = np.sign(base) if base != 0 else 1.0
    members = np.flatnonzero(weights > 0)
    if unit == "source":
        src = docs["source"].to_numpy()
        names = [s for s in sorted(set(src[members])) if allowed is None or s in allowed]
        groups = [np.flatnonzero((src == s) & (weights > 0)) for s in names]
        support = np.array([-sign * (attr.exact(g).gap - base) for g in groups])
    else:
        lin = -sign * attr.linear("gap")[members]
        scale = np.maximum(n_tokens[members], 1) if per_token else 1
        keep = np.flatnonzero(lin > 0)
        first = members[keep[np.argsort(-(lin / scale)[keep], kind="stable")]][:candidates]
        groups = [np.array([d]) for d in first]
        names = [str(docs.at[int(d), "doc_id"]) for d in first]
        support = np.array([-sign * (e.gap - base) for e in attr.exact_each(first)]) if len(first) else np.zeros(0)
    tokens = np.array([int(n_tokens[g].sum()) for g in groups])
    order = [i for i in np.argsort(-support / (np.maximum(tokens, 1) if per_token else 1), kind="stable")
             if support[i] > 0]
    return ([groups[i] for i in order], [names[i] for i in order], tokens[order] if order else tokens[:0],
            support[order] if order else support[:0])


def _round(attr: Attribution, groups, names, tokens, support, target: float, budget: int, one_only: bool):
    """Greedy additions of one round, until the exact |d| is within ``target``: keep a unit only if
    the exact re-check of the units together says it still brings the gap towards zero by at least
    MIN_KEPT_SUPPORT of what it does alone (a unit whose effect the earlier ones already took is
    innocent text removed for nothing)."""
    chosen, steps = [], []
    current = attr.base
    for g, name, tok, alone in zip(groups, names, tokens, support):
        if abs(current.effect_size) <= target or len(chosen) >= budget:
            break
        trial = attr.exact(np.concatenate([c[0] for c in chosen] + [g]))
        if abs(current.gap) - abs(trial.gap) > MIN_KEPT_SUPPORT * alone:
            chosen.append((g, name, int(tok)))
            current = trial
            steps.append({"removed": name, "tokens": int(tok), "predicted_effect": trial.effect_size,
                          "predicted_gap": trial.gap})
            if one_only:
                break
    return chosen, steps, current.effect_size


def _bootstrap_interval(ws, sl: Slice, test, counts, settings, emb, n: int, seed: int):
    """The interval of d on the model ``emb`` of the filtered corpus ``sl``: the delta method on the
    gap and score sd of ``n`` document-bootstrap replicates (cold SVD each), as ``measure`` gives d's."""
    rng = np.random.default_rng([seed, 7])
    reps = []
    for _ in range(n):
        w = bootstrap_weights(sl, rng)
        reps.append(gap_and_score_sd(train_embedding(ws, sl, "ppmi-svd", counts, settings, weights=w, save=False),
                                     test))
    full = weat(emb.unit_vectors, emb.index, test, with_p=False)
    i = ratio_interval(full.effect_size, full.gap, score_sd(full), *np.array(reps).T)
    return i.low, i.high


def plan(ws, test: AssociationTest, sl: Slice, goal: float, *, unit: str = "document", max_steps: int = 500,
         counts: CountSettings = CountSettings(), settings: PpmiSvdSettings = PpmiSvdSettings(),
         max_rounds: int = 6, candidates: int = 2000, bootstrap: int = 0, on_interval: bool = False,
         seed: int = 0, per_token: bool = True, source_p: float = SOURCE_P) -> Plan:
    """Find a small removal (in tokens) whose retrained |d| is within ``goal`` (see the module doc).

    ``bootstrap`` replicates of the filtered corpus give the verified effect an interval;
    ``on_interval`` asks that the whole interval lie within the goal. With ``unit="source"`` a
    source is a candidate only when the test, measured inside that source alone, has the pooled
    effect's sign and a permutation p below ``source_p`` (so a source that only tips the pooled
    balance by chance is not dropped). A goal that is not reached is no error: ``reached`` is
    False and ``message`` says what was reached.
    """
    if unit not in ("document", "source"):
        raise SettingError(f"unit must be document or source; got {unit!r}")
    if goal < 0:
        raise SettingError(f"goal must be >= 0 (a bound on |d|); got {goal}")
    if on_interval and bootstrap < 2:
        raise SettingError("a goal on the interval needs --interval-replicates of at least 2")
    test = normalized_test(test, ws)
    emb_before, attr = _model(ws, sl, test, counts, settings)
    base = attr.base.effect_size
    own = _own_source_effects(ws, test, sl, counts, settings, seed, base, source_p) if unit == "source" else None
    allowed = None if own is None else own.loc[own["implicated"], "source"].tolist()
    chosen, steps, rounds = [], [], [{"round": 0, "removed": 0, "tokens_removed": 0, "predicted_effect": base,
                                      "verified_effect": base}]
    mask = np.zeros(ws.n_documents, bool)
    verified, predicted, interval, emb, half, gain = base, base, (np.nan, np.nan), emb_before, 0.0, 1.0
    for rnd in range(1, max_rounds + 1):
        if abs(verified) <= goal:
            if not on_interval:
                break
            interval = _bootstrap_interval(ws, _current(sl, ws, mask), test, counts, settings, emb, bootstrap, seed)
            if max(abs(interval[0]), abs(interval[1])) <= goal:
                break
            half = (interval[1] - interval[0]) / 2
        # the fixed-subspace estimate runs ahead of the retrained change: aim deeper by the last ratio
        aim = max(0.0, abs(verified) - (abs(verified) - max(0.0, goal - half)) / gain)
        with threadpool_limits(1):  # probe-row products are tiny: waking BLAS threads costs 10x the work
            groups, names, tokens, support = _units(ws, attr, sl.weights * ~mask, unit, candidates, per_token,
                                                    allowed)
            new, new_steps, predicted = _round(attr, groups, names, tokens, support, aim, max_steps - len(chosen),
                                               one_only=unit == "source")
        if not new:
            break
        before_round = verified
        chosen += new
        steps += [{"step": len(steps) + k + 1, "round": rnd, **s} for k, s in enumerate(new_steps)]
        mask = _mask_of(ws, chosen)
        emb, attr = _model(ws, _current(sl, ws, mask), test, counts, settings)
        verified = attr.base.effect_size
        if abs(before_round) - abs(predicted) > 1e-9:
            gain = float(np.clip((abs(before_round) - abs(verified)) / (abs(before_round) - abs(predicted)), 0.1, 1.0))
        if abs(verified) <= goal and len(new) > 1 and not on_interval:
            keep = _shortest_prefix(ws, sl, test, counts, settings, chosen[:-len(new)], new, goal)
            if keep < len(new):
                chosen, steps = chosen[:len(chosen) - len(new) + keep], steps[:len(steps) - len(new) + keep]
                mask = _mask_of(ws, chosen)
                emb, attr = _model(ws, _current(sl, ws, mask), test, counts, settings)
                verified = attr.base.effect_size
        rounds.append({"round": rnd, "removed": len(chosen), "tokens_removed": int(sum(c[2] for c in chosen)),
                       "predicted_effect": predicted, "verified_effect": verified})
    if bootstrap >= 2 and np.isnan(interval[0]) and chosen:
        interval = _bootstrap_interval(ws, _current(sl, ws, mask), test, counts, settings, emb, bootstrap, seed)
    inside = max(abs(interval[0]), abs(interval[1])) if on_interval else abs(verified)
    return _result(ws, sl, test, counts, settings, unit, goal, bool(inside <= goal), chosen, steps, rounds, base,
                   predicted, verified, interval, bootstrap, emb_before, emb, mask, on_interval, seed, own)


def _own_source_effects(ws, test, sl: Slice, counts, settings, seed: int, base: float,
                        level: float) -> pd.DataFrame:
    """The test measured inside each source of the slice alone: effect size, permutation p, implicated."""
    src = ws.documents["source"].to_numpy()
    names = sorted(set(src[sl.weights > 0]))
    slices = [Slice(f"source={s}", sl.weights * (src == s), int(((sl.weights > 0) & (src == s)).sum()), 0)
              for s in names]
    summary = measure(ws, {test.name: test}, "ppmi-svd", slices, counts, settings,
                      MeasureSettings(seed=seed, alpha=settings.alpha)).summary
    pooled = np.sign(base)
    rows = []
    for s, row in zip(names, summary.itertuples()):
        d, pv = float(row.effect_size), float(row.p_value)
        rows.append({"source": s, "own_effect_size": d, "own_p_value": pv,
                     "implicated": bool(np.sign(d) == pooled and pv < level)})
    return pd.DataFrame(rows)


def _current(sl: Slice, ws, mask: np.ndarray) -> Slice:
    return reduced_slice(sl, ws, mask, "the plan") if mask.any() else sl


def _mask_of(ws, chosen) -> np.ndarray:
    mask = np.zeros(ws.n_documents, bool)
    for g, _, _ in chosen:
        mask[g] = True
    return mask


def _shortest_prefix(ws, sl, test, counts, settings, kept, new, goal: float) -> int:
    """How many of the round's additions (in order) are needed for the retrained |d| to be within the goal;
    bisection, on the assumption that more removal along the order weakens it further."""
    lo, hi = 0, len(new)                     # hi reaches the goal; lo does not (the round started above it)
    while hi - lo > 1:
        mid = (lo + hi) // 2
        e = train_embedding(ws, _current(sl, ws, _mask_of(ws, kept + new[:mid])), "ppmi-svd", counts, settings,
                            save=False)
        if abs(weat(e.unit_vectors, e.index, test, with_p=False).effect_size) <= goal:
            hi = mid
        else:
            lo = mid
    return hi


def _result(ws, sl, test, counts, settings, unit, goal, reached, chosen, steps, rounds, base, predicted, verified,
            interval, bootstrap, emb_before, emb_after, mask, on_interval, seed, own) -> Plan:
    docs = ws.documents
    removed = np.flatnonzero(mask)
    tokens = int(docs["n_tokens"].to_numpy()[removed].sum())
    what = "|d|" if not on_interval else "the whole interval of d"
    items = f"{len(chosen)} {unit}" + ("" if len(chosen) == 1 else "s")
    if reached:
        message = (f"goal reached: verified d {verified:.3f} (|d| <= {goal}) after removing {items}, "
                   f"{tokens} tokens")
    else:
        message = (f"goal not reached: {what} <= {goal} was not verified; the best verified d was {verified:.3f} "
                   f"after removing {items}, {tokens} tokens")
        if own is not None and (~own["implicated"]).any():
            message += ("; not dropped because the test is not significant inside them (own permutation p >= "
                        f"{SOURCE_P} or the other sign): " + ", ".join(own.loc[~own["implicated"], "source"]))
    method = (f"{RATIO_METHOD} (gap and score sd), {bootstrap} document-bootstrap replicates of the filtered "
              f"corpus (cold SVD each)") if bootstrap >= 2 else "none (no --bootstrap)"
    src = docs["source"].to_numpy()
    in_slice = sl.weights > 0
    removed_table = pd.DataFrame([{"source": s, "documents_removed": int((mask & (src == s)).sum()),
                                   "documents": int((in_slice & (src == s)).sum()),
                                   "tokens_removed": int(docs["n_tokens"].to_numpy()[mask & (src == s)].sum())}
                                  for s in sorted(set(src[in_slice]))])
    if own is not None:
        removed_table = removed_table.merge(own, on="source")
    losses, falling, usefulness = loss_tables(ws, sl, test, mask, emb_before, emb_after, counts, settings, seed)
    return Plan(unit, goal, reached, message, [c[1] for c in chosen], removed, tokens, tokens / max(1, sl.n_tokens),
                base, predicted, verified, float(interval[0]), float(interval[1]), method,
                pd.DataFrame(steps, columns=["step", "round", "removed", "tokens", "predicted_effect",
                                             "predicted_gap"]),
                pd.DataFrame(rounds), removed_table, losses, falling, usefulness)
