"""Measure association tests per model and slice, with intervals that reflect the corpus.

For every test, model and slice: the WEAT effect size and its permutation
p-value with its Benjamini-Hochberg q-value over all tests and slices of the call,
the same test on PMI rows (first order, no embedding), a document bootstrap
interval (documents resampled as weights, models retrained; the interval is the
bootstrap standard-error one of :mod:`tracer.core.intervals`, centred on the
estimate), and for word2vec the spread across seeds. Across several slices every
test uses the words known in every slice (``per_slice_words`` keeps each slice's own). Per word: the association score, RIPA, and
the PMI log odds ratio with its analytic interval. Leave-one-word-out effect
sizes show which words carry a result.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import logging
from typing import Callable

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from tracer.core.association import (DEFAULT_EXACT_BUDGET, DEFAULT_MIN_WORDS, DEFAULT_PERMUTATIONS, STD_CONVENTION,
                        association_scores, effect_size, permutation_p_value, ripa_direction, score_sd, unit_rows, weat,
                        word_sets)
from tracer.core.counting import CountSettings, Counts, build_vocab
from tracer.core.intervals import METHOD, RATIO_METHOD, bootstrap_interval, q_values, ratio_interval
from tracer.provenance.counts import count_slice
from tracer.corpus.slices import Slice
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import embedding_from_counts, start_replicate_vectors, start_word2vec, train_embedding
from tracer.core.embedding import Embedding
from tracer.core.word2vec import Word2VecSettings
from tracer.errors import SettingError
from tracer.core.pmi import ppmi_matrix
from tracer.core.association import AssociationTest
from tracer.provenance.specs import normalized_tests

log = logging.getLogger(__name__)

SMALL_SLICE_TOKENS = 100_000
Z95 = 1.959963984540054  # standard normal 97.5% quantile


@dataclasses.dataclass(frozen=True)
class MeasureSettings:
    """How tests are measured (see the module docstring)."""

    min_words: int = DEFAULT_MIN_WORDS
    bootstrap: int = 0
    seeds: int = 1
    permutations: int = DEFAULT_PERMUTATIONS
    exact_budget: int = DEFAULT_EXACT_BUDGET
    seed: int = 0
    alpha: float = 0.75
    per_slice_words: bool = False

    def __post_init__(self):
        for name in ("min_words", "seeds"):
            if getattr(self, name) < 1:
                raise SettingError(f"{name} must be >= 1; got {getattr(self, name)}")
        if self.bootstrap < 0:
            raise SettingError(f"bootstrap must be >= 0; got {self.bootstrap}")


@dataclasses.dataclass(frozen=True)
class MeasureResult:
    """Four tables; see :func:`measure` for their columns."""

    summary: pd.DataFrame
    words: pd.DataFrame
    leave_one_out: pd.DataFrame
    replicates: pd.DataFrame


def _pmi_scores(c: Counts, ppmi, rows_t, rows_a, rows_b) -> np.ndarray:
    """First-order association: mean PPMI with the a words minus mean PPMI with the b words."""
    sub = ppmi[rows_t]
    return (np.asarray(sub[:, rows_a].sum(axis=1)).ravel() / len(rows_a)
            - np.asarray(sub[:, rows_b].sum(axis=1)).ravel() / len(rows_b))


def log_odds_ratio(c: Counts, word: str, a_words: list[str], b_words: list[str]) -> dict:
    """PMI difference of ``word`` towards the pooled a and b words, as a log odds ratio.

    Table: [C(w, A), C(w, B); C(A) - C(w, A), C(B) - C(w, B)] with C(A) the summed
    marginals of the a words. log OR = log(n11 n22 / (n12 n21)); the Woolf interval
    uses SE = sqrt(sum 1/n); a zero cell adds 0.5 to every cell (Haldane-Anscombe).
    """
    idx = c.vocab.index
    i = idx[word]
    ra = [idx[w] for w in a_words]
    rb = [idx[w] for w in b_words]
    row = c.matrix[[i]]
    n11 = float(row[:, ra].sum())
    n12 = float(row[:, rb].sum())
    n21 = float(c.row_sums[ra].sum()) - n11
    n22 = float(c.row_sums[rb].sum()) - n12
    cells = np.array([n11, n12, n21, n22])
    corrected = bool((cells == 0).any())
    if corrected:
        cells = cells + 0.5
    lor = float(np.log(cells[0] * cells[3] / (cells[1] * cells[2])))
    se = float(np.sqrt((1.0 / cells).sum()))
    return {"count_a": n11, "count_b": n12, "log_odds_ratio": lor, "lor_ci_low": lor - Z95 * se,
            "lor_ci_high": lor + Z95 * se, "lor_zero_cell_corrected": corrected}


def _stream(seed: int, *names: str) -> np.random.Generator:
    """A random stream of its own for each named step (a slice's bootstrap, a test's permutations in a
    slice), so that adding a test or a slice leaves every other result as it was."""
    keys = [int.from_bytes(hashlib.sha256(n.encode("utf-8")).digest()[:8], "little") for n in names]
    return np.random.default_rng([seed, *keys])


def bootstrap_weights(sl: Slice, rng: np.random.Generator) -> np.ndarray:
    """Multinomial resample of the slice's documents: how often each is drawn, times its weight."""
    members = np.flatnonzero(sl.weights > 0)
    w = np.zeros_like(sl.weights)
    w[members] = rng.multinomial(len(members), np.full(len(members), 1.0 / len(members))) * sl.weights[members]
    return w


def common_words(ws, tests: dict[str, AssociationTest], slices: list[Slice], counts: CountSettings) -> set[str]:
    """The words of the tests known (at the count settings' minimum count) in every slice."""
    wanted = {w for t in tests.values() for w in t.all_words}
    known = set(wanted)
    for sl in slices:
        vocab = build_vocab(ws.tokens, ws.doc_offsets, sl.weights, ws.vocab.words, counts)
        known &= set(vocab.words)
    return known


def restricted(test: AssociationTest, keep: set[str]) -> AssociationTest:
    """The test with only the words in ``keep`` (word pairs kept when both words are)."""
    def only(ws):
        return tuple(w for w in ws if w in keep) if ws is not None else None
    return dataclasses.replace(test, targets_x=only(test.targets_x), targets_y=only(test.targets_y),
                               attributes_a=only(test.attributes_a), attributes_b=only(test.attributes_b),
                               attribute_pairs=tuple((a, b) for a, b in test.attribute_pairs if a in keep and b in keep))


def bootstrap_stream(seed: int, slice_name: str) -> np.random.Generator:
    """The random stream of a slice's bootstrap resamples (drift redraws the same resamples)."""
    return _stream(seed, "bootstrap", slice_name)


def measure(ws, tests: dict[str, AssociationTest], model: str, slices: list[Slice],
            counts: CountSettings = CountSettings(), model_settings=None,
            settings: MeasureSettings = MeasureSettings(), *, vectors: Embedding | None = None,
            shared_words: set[str] | None = None, progress: bool = False) -> MeasureResult:
    """Measure every test on every slice with one model, and on ``vectors`` trained elsewhere if given.

    With more than one slice (and ``settings.per_slice_words`` off) each test keeps only the
    words known in every slice, so that all slices compare the same word sets. A caller that
    measures the slices it compares one call at a time (``tracer run``) passes those words as
    ``shared_words`` (:func:`common_words` over all of them); they are used in place of this
    call's own common words unless ``settings.per_slice_words``.

    Returns
    -------
    MeasureResult
        ``summary``: one row per test, model and slice with test, kind, model, slice, measured,
        reason, effect_size, gap (mean s over x minus over y, undivided), statistic, p_value,
        q_value (Benjamini-Hochberg over every p-value of the call), p_method, n_partitions,
        ci_low, ci_high, gap_ci_low, gap_ci_high, gap_se, replicate_shift (mean replicate gap
        minus the gap: how far the replicates run low), interval_method, n_bootstrap, seeds,
        effect_size_seed_sd, pmi_effect_size, pmi_p_value, mean_score (one-target tests),
        n_targets_x, n_targets_y, n_attributes_a, n_attributes_b, dropped_words (not known in
        this slice), not_in_every_slice (known here, left out because another slice lacks
        them), word_sets ("common" or "per slice"), slice_tokens, warning, std_convention.
        ``words``: one row per target word: test, model, slice, word, set, score, ripa, pmi_score,
        count_a, count_b, log_odds_ratio, lor_ci_low, lor_ci_high, lor_zero_cell_corrected.
        ``leave_one_out``: test, model, slice, left_out, set, effect_size, change.
        ``replicates``: the bootstrap distribution itself: test, model, slice, replicate, effect_size, gap,
        score_sd (population sd of the target words' scores: d = gap / score_sd).
    """
    if model_settings is None:
        model_settings = PpmiSvdSettings() if model == "ppmi-svd" else Word2VecSettings()
    tests = normalized_tests(tests, ws)
    compared = len(slices) + (vectors is not None)
    common = None
    if not settings.per_slice_words and (shared_words is not None or compared > 1):
        common = set(shared_words) if shared_words is not None else common_words(ws, tests, slices, counts)
        if vectors is not None:
            common &= set(vectors.index)
    used = {n: restricted(t, common) for n, t in tests.items()} if common is not None else dict(tests)
    rows, word_rows, loo_rows, rep_rows = [], [], [], []
    # trained models slice by slice, then the outside vectors if given: side by side in one table
    for sl in list(slices) + ([None] if vectors is not None else []):
        slice_name = sl.name if sl is not None else "external"
        c = count_slice(ws, sl.weights, counts, slice_name=sl.name) if sl is not None else None
        # the replicates start first: their SVDs run on the pool beside the estimate's
        finish = _bootstrap(ws, sl, c, used, model, counts, model_settings, settings,
                            bootstrap_stream(settings.seed, sl.name), progress) \
            if sl is not None and settings.bootstrap > 0 else None
        embs = _embeddings(ws, sl, c, model, counts, model_settings, settings) if sl is not None else [vectors]
        model_name = model if sl is not None else "external"
        boot = finish(embs[0]) if finish is not None else {}
        ppmi = ppmi_matrix(c.matrix, alpha=settings.alpha).tocsr() if c is not None else None
        for name, (ds, gaps, sds) in boot.items():
            rep_rows.extend({"test": name, "model": model, "slice": slice_name, "replicate": k, "effect_size": d,
                             "gap": g, "score_sd": v} for k, (d, g, v) in enumerate(zip(ds, gaps, sds)))
        warning = ""
        if sl is not None and sl.n_tokens < SMALL_SLICE_TOKENS:
            warning = (f"slice {sl.name} has {sl.n_tokens} tokens, fewer than {SMALL_SLICE_TOKENS}: embeddings of so little "
                       "text are unstable; read the interval, not the point estimate")
        known = set(embs[0].index) & (set(c.vocab.index) if c is not None else set(embs[0].index))
        for name, test in used.items():
            base, wsets, reason = _row_base(test, tests[name], known, common, settings.min_words)
            base.update({"model": model_name, "slice": slice_name, "slice_tokens": sl.n_tokens if sl else None,
                         "warning": warning, "seeds": len(embs)})
            if reason:
                rows.append({**base, "measured": False, "reason": reason})
                continue
            one = _measure_one(test, wsets, embs, c, ppmi, boot.get(test.name), settings,
                               _stream(settings.seed, "permutations", slice_name, test.name))
            note = one.pop("interval_note", "")
            rows.append({**base, "warning": "; ".join(filter(None, [warning, note, _p_floor_note(one)])),
                         "measured": True, "reason": "", **one})
            word_rows.extend({"test": test.name, "model": model_name, "slice": slice_name, **r}
                             for r in _word_table(test, wsets, embs[0], c, ppmi))
            loo_rows.extend({"test": test.name, "model": model_name, "slice": slice_name, **r}
                            for r in _leave_one_out(test, wsets, embs, rows[-1]))
    summary = pd.DataFrame(rows, columns=SUMMARY_COLUMNS)
    summary["q_value"] = q_values(summary["p_value"].to_numpy(dtype=float))
    return MeasureResult(summary, pd.DataFrame(word_rows, columns=WORD_COLUMNS),
                         pd.DataFrame(loo_rows, columns=LOO_COLUMNS),
                         pd.DataFrame(rep_rows, columns=REPLICATE_COLUMNS))


def _row_base(test, original, known, common, min_words) -> tuple[dict, object, str | None]:
    """The columns of a summary row that do not need a model: kind, word counts, the words dropped
    and why; with the test's word sets in this slice and the reason it cannot be measured, if any."""
    base = {"test": test.name, "kind": "two-target" if test.two_target else "one-target",
            "std_convention": STD_CONVENTION, "word_sets": "common" if common is not None else "per slice",
            "dropped_words": [w for w in original.all_words if w not in known],
            "not_in_every_slice": [w for w in original.all_words if w in known and common is not None
                                   and w not in common]}
    wsets = word_sets(test, known)
    base.update(n_targets_x=len(wsets.x), n_targets_y=len(wsets.y) if test.two_target else None,
                n_attributes_a=len(wsets.a), n_attributes_b=len(wsets.b))
    reason = wsets.reason_not_measured(test.two_target, min_words)
    if reason and common is not None and not word_sets(original, known).reason_not_measured(test.two_target,
                                                                                            min_words):
        reason += " once the words missing from another slice are left out (see --per-slice-words)"
    return base, wsets, reason


def _p_floor_note(one: dict) -> str:
    """Says so when an exact permutation p is the smallest its partitions allow."""
    if one.get("p_method") == "exact" and one["p_value"] <= (1 + 1e-9) / one["n_partitions"]:
        return (f"p = 1/{one['n_partitions']} is the smallest the exact permutation test can give with these "
                "target sets")
    return ""


SUMMARY_COLUMNS = ["test", "kind", "model", "slice", "measured", "reason", "effect_size", "gap", "statistic",
                   "p_value", "q_value", "p_method", "n_partitions", "ci_low", "ci_high", "gap_ci_low", "gap_ci_high",
                   "gap_se", "replicate_shift", "interval_method", "n_bootstrap", "seeds", "effect_size_seed_sd", "pmi_effect_size", "pmi_p_value", "mean_score",
                   "n_targets_x", "n_targets_y", "n_attributes_a", "n_attributes_b", "dropped_words",
                   "not_in_every_slice", "word_sets", "slice_tokens", "warning", "std_convention"]
WORD_COLUMNS = ["test", "model", "slice", "word", "set", "score", "ripa", "pmi_score", "count_a", "count_b",
                "log_odds_ratio", "lor_ci_low", "lor_ci_high", "lor_zero_cell_corrected"]
LOO_COLUMNS = ["test", "model", "slice", "left_out", "set", "effect_size", "change"]
REPLICATE_COLUMNS = ["test", "model", "slice", "replicate", "effect_size", "gap", "score_sd"]
# the gap has the plain bootstrap standard-error interval; d = gap / score sd has the delta method's
INTERVAL_METHOD = f"gap: {METHOD}; d: {RATIO_METHOD} (gap and score sd)"


def _embeddings(ws, sl, c, model, counts, model_settings, settings) -> list[Embedding]:
    if model == "ppmi-svd":
        return [embedding_from_counts(ws, sl, c, model_settings)]
    return [train_embedding(ws, sl, model, counts, dataclasses.replace(model_settings, seed=model_settings.seed + k),
                            save=False) for k in range(settings.seeds)]


def _rows(index, words):
    return np.array([index[w] for w in words], dtype=np.int64)


def _measure_one(test, wsets, embs, c, ppmi, boot, settings, rng) -> dict:
    out: dict = {}
    if test.two_target:
        results = [weat(unit_rows(e.vectors), e.index, test, rng=rng, exact_budget=settings.exact_budget,
                        n_resamples=settings.permutations) for e in embs]
        ds = np.array([r.effect_size for r in results])
        out.update(effect_size=float(ds.mean()), gap=float(np.mean([r.gap for r in results])),
                   score_sd=float(np.mean([score_sd(r) for r in results])),
                   statistic=float(np.mean([r.statistic for r in results])),
                   # with several seeds the largest p-value is reported (the cautious choice)
                   p_value=float(max(r.p_value for r in results)), p_method=results[0].p_method,
                   n_partitions=results[0].n_partitions,
                   effect_size_seed_sd=float(ds.std(ddof=1)) if len(ds) > 1 else None)
        if c is not None:
            idx = c.vocab.index
            px = _pmi_scores(c, ppmi, _rows(idx, wsets.x), _rows(idx, wsets.a), _rows(idx, wsets.b))
            py = _pmi_scores(c, ppmi, _rows(idx, wsets.y), _rows(idx, wsets.a), _rows(idx, wsets.b))
            perm = permutation_p_value(px, py, exact_budget=settings.exact_budget, n_resamples=settings.permutations,
                                       rng=rng)
            out.update(pmi_effect_size=effect_size(px, py), pmi_p_value=perm.p_value)
        if boot is not None:
            d, gap, sd = boot
            di = ratio_interval(out["effect_size"], out["gap"], out.pop("score_sd"), gap, sd)
            gi = bootstrap_interval(out["gap"], gap)
            # |d| cannot exceed n / sqrt(n_x n_y) (2 for equal sets): the symmetric interval stops there
            bound = (len(wsets.x) + len(wsets.y)) / np.sqrt(len(wsets.x) * len(wsets.y))
            out.update(ci_low=max(di.low, -bound), ci_high=min(di.high, bound), gap_ci_low=gi.low, gap_ci_high=gi.high, gap_se=gi.se,
                       replicate_shift=float(np.nanmean(gap)) - out["gap"], interval_method=INTERVAL_METHOD,
                       n_bootstrap=len(d), interval_note=gi.note)
        else:
            out.pop("score_sd")
            out.update(n_bootstrap=0)
    else:
        e = embs[0]
        scores = association_scores(unit_rows(e.vectors), _rows(e.index, wsets.x), _rows(e.index, wsets.a),
                                    _rows(e.index, wsets.b))
        out.update(mean_score=float(scores.mean()), n_bootstrap=0)
    return out


def _word_table(test, wsets, emb, c, ppmi) -> list[dict]:
    unit = unit_rows(emb.vectors)
    ra, rb = _rows(emb.index, wsets.a), _rows(emb.index, wsets.b)
    direction = ripa_direction(emb, test.attribute_pairs)
    out = []
    for set_name, words in (("x", wsets.x), ("y", wsets.y)):
        if not words:
            continue
        scores = association_scores(unit, _rows(emb.index, words), ra, rb)
        for k, w in enumerate(words):
            row = {"word": w, "set": set_name, "score": float(scores[k]),
                   "ripa": float(emb.vector(w).astype(np.float64) @ direction) if direction is not None else None}
            if c is not None:
                idx = c.vocab.index
                row["pmi_score"] = float(_pmi_scores(c, ppmi, _rows(idx, [w]), _rows(idx, wsets.a),
                                                     _rows(idx, wsets.b))[0])
                row.update(log_odds_ratio(c, w, wsets.a, wsets.b))
            out.append(row)
    return out


def _leave_one_out(test, wsets, embs, summary_row) -> list[dict]:
    """Effect size with each target or attribute word left out (two-target tests)."""
    if not test.two_target:
        return []
    out = []
    full = summary_row["effect_size"]
    units = [unit_rows(e.vectors) for e in embs]
    for set_name in ("x", "y", "a", "b"):
        words = getattr(wsets, set_name)
        if len(words) < 2:
            continue
        for w in words:
            sets = {k: [v for v in getattr(wsets, k) if not (k == set_name and v == w)] for k in ("x", "y", "a", "b")}
            ds = []
            for e, unit in zip(embs, units):
                rows = {k: _rows(e.index, v) for k, v in sets.items()}
                ds.append(effect_size(association_scores(unit, rows["x"], rows["a"], rows["b"]),
                                      association_scores(unit, rows["y"], rows["a"], rows["b"])))
            d = float(np.mean(ds))
            out.append({"left_out": w, "set": set_name, "effect_size": d, "change": d - full})
    return out


def _bootstrap(ws, sl, c, tests, model, counts, model_settings, settings, rng, progress) -> Callable[[Embedding], dict]:
    """Start the document-bootstrap replicates of a slice; returns ``finish(emb)``, which gives the
    effect sizes, gaps and score sds of every two-target test measurable with the model ``emb``.

    Every resample is drawn first, in order, so the results do not depend on how many workers
    decompose them. The replicates are handed to the replicate pool or the workspace's cluster at
    once (:func:`tracer.provenance.cluster.tasks_for`), PPMI-SVD ones counted here as they go, word2vec
    ones one task per seed; the model's words are its counts' words (the slice's vocabulary), so the
    tests measured are known before the model.
    """
    def measurable(known):
        return [t for t in tests.values()
                if t.two_target and word_sets(t, known).reason_not_measured(True, settings.min_words) is None]

    weights = [bootstrap_weights(sl, rng) for _ in range(settings.bootstrap)]
    bar = functools.partial(tqdm, desc=f"bootstrap {sl.name}", disable=not progress, leave=False)
    pending = None
    if model == "ppmi-svd" and measurable(set(c.vocab.index)):
        matrices = (count_slice(ws, w, counts, slice_name=sl.name, vocab=c.vocab).matrix for w in bar(weights))
        # the same exact truncated SVD as the full-data model (a warm-started subspace iteration
        # was tried and dropped: see tracer.provenance.models.start_replicate_vectors)
        pending = start_replicate_vectors(ws, matrices, model_settings, len(weights), c.matrix)
    elif model != "ppmi-svd" and measurable(set(c.vocab.index)):
        # word2vec on the slice's words (c.vocab), each replicate's seeds one task each, as
        # train_embedding(weights=w) trains them
        runs = [dataclasses.replace(model_settings, seed=model_settings.seed + k) for k in range(settings.seeds)]
        pending = start_word2vec(ws, [(w, c.vocab, s) for w in weights for s in runs], counts, bar)

    def finish(emb: Embedding) -> dict:
        two = measurable(set(emb.index) & set(c.vocab.index))
        if not two:
            return {}
        # the estimate's words are its counts' (PPMI-SVD) or the slice's, as the replicates' (word2vec)
        per, vectors = (1 if model == "ppmi-svd" else settings.seeds), pending()
        replicates = ([Embedding(emb.words, v, emb.card) for v in vectors[i:i + per]] for i in range(0, len(vectors), per))
        d, gaps, sds = ({t.name: [] for t in two} for _ in range(3))
        for reps in replicates:
            for t in two:
                rs = [weat(unit_rows(e.vectors), e.index, t, with_p=False) for e in reps]
                d[t.name].append(float(np.nanmean([r.effect_size for r in rs])))
                gaps[t.name].append(float(np.mean([r.gap for r in rs])))
                sds[t.name].append(float(np.mean([score_sd(r) for r in rs])))
        return {name: (np.array(d[name]), np.array(gaps[name]), np.array(sds[name])) for name in d}
    return finish
