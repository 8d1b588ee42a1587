"""Correlate single-word association scores with a numeric column the user supplies."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from tracer.core.association import AssociationTest, association_scores, unit_rows
from tracer.core.embedding import Embedding
from tracer.core.intervals import min_replicates_for_percentiles, percentile_interval
from tracer.errors import InputError
from tracer.provenance.tables import WordValues


def single_word_scores(emb: Embedding, words: list[str], test: AssociationTest) -> pd.Series:
    """s(w, A, B) of each known word towards the test's two attribute sets (NaN if unknown)."""
    a = [emb.index[w] for w in test.attributes_a if w in emb]
    b = [emb.index[w] for w in test.attributes_b if w in emb]
    if not a or not b:
        raise InputError(f"test {test.name}: no attribute word of one set is in the vocabulary "
                         f"of {emb.card.get('model')} slice {emb.card.get('slice')}")
    known = [w for w in dict.fromkeys(words) if w in emb]
    scores = association_scores(unit_rows(emb.vectors), np.array([emb.index[w] for w in known], dtype=np.int64),
                                np.array(a, dtype=np.int64), np.array(b, dtype=np.int64))
    by_word = dict(zip(known, scores.tolist()))
    return pd.Series({w: by_word.get(w, np.nan) for w in words})


def correlation_with_intervals(x: np.ndarray, y: np.ndarray, n_boot: int, rng: np.random.Generator) -> dict:
    """Pearson r and Spearman rho with their p-values and percentile intervals over words resampled
    (NaN below :func:`tracer.core.intervals.min_replicates_for_percentiles` usable resamples)."""
    n = len(x)
    pr = stats.pearsonr(x, y)
    sr = stats.spearmanr(x, y)
    boot_p, boot_s = [], []
    for _ in range(n_boot):
        i = rng.integers(0, n, n)
        if np.ptp(x[i]) == 0 or np.ptp(y[i]) == 0:
            continue  # a resample of one repeated word has no correlation
        boot_p.append(stats.pearsonr(x[i], y[i]).statistic)
        boot_s.append(stats.spearmanr(x[i], y[i]).statistic)
    def ci(v):
        return percentile_interval(v) if len(v) >= min_replicates_for_percentiles() else (np.nan, np.nan)
    return {"pearson_r": float(pr.statistic), "pearson_p": float(pr.pvalue),
            "pearson_ci_low": ci(boot_p)[0], "pearson_ci_high": ci(boot_p)[1],
            "spearman_rho": float(sr.statistic), "spearman_p": float(sr.pvalue),
            "spearman_ci_low": ci(boot_s)[0], "spearman_ci_high": ci(boot_s)[1], "n_bootstrap": len(boot_p)}


def correlate(models: list[tuple[Embedding, object]], test: AssociationTest, table: WordValues, *,
              n_boot: int = 1000, seed: int = 0) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Correlations of word scores with the table's column, per model and slice, in two views.

    Parameters
    ----------
    models : list of (Embedding, Counts or None)
        Each embedding with the co-occurrence counts of its slice; with counts, the
        first-order view (the PMI log odds ratio towards the attribute sets, see
        :func:`tracer.analysis.measure.log_odds_ratio`) is correlated too.

    Returns
    -------
    summary : DataFrame
        model, slice, view ("embedding" or "pmi"), column, n_words, words_missing, pearson_r,
        pearson_p, pearson_ci_low, pearson_ci_high, spearman_rho, spearman_p, spearman_ci_low,
        spearman_ci_high, n_bootstrap.
    points : DataFrame
        model, slice, view, word, value, score.
    """
    from tracer.analysis.measure import log_odds_ratio

    rng = np.random.default_rng(seed)
    rows, points = [], []
    for emb, counts in models:
        views = {"embedding": single_word_scores(emb, table.words, test)}
        if counts is not None:
            a = [w for w in test.attributes_a if w in counts.vocab.index]
            b = [w for w in test.attributes_b if w in counts.vocab.index]
            views["pmi"] = pd.Series({w: log_odds_ratio(counts, w, a, b)["log_odds_ratio"]
                                      if w in counts.vocab.index and a and b else np.nan for w in table.words})
        model, sl = emb.card.get("model"), emb.card.get("slice")
        for view, scores in views.items():
            known = scores.notna().to_numpy()
            base = {"model": model, "slice": sl, "view": view, "column": table.column, "n_words": int(known.sum()),
                    "words_missing": [w for w, k in zip(table.words, known) if not k]}
            if known.sum() < 3:
                rows.append(base)
                continue
            x = scores.to_numpy()[known]
            rows.append({**base, **correlation_with_intervals(x, table.values[known], n_boot, rng)})
            points.extend({"model": model, "slice": sl, "view": view, "word": w, "value": v, "score": sc}
                          for w, v, sc, k in zip(table.words, table.values, scores.to_numpy(), known) if k)
    return pd.DataFrame(rows), pd.DataFrame(points, columns=["model", "slice", "view", "word", "value", "score"])
