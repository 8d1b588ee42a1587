"""Coverage of the measure intervals, simulated: many small corpora from one generator.

The estimand a document-bootstrap interval speaks about is the value the same procedure gives
on another corpus of the same size from the same source; it is estimated by the mean over the
simulated corpora (each corpus left out of its own target). The bigger run, with the value on
a corpus 20 times larger beside it, is tests/benchmarks/bench_coverage.py.
"""

import numpy as np

from tracer.analysis.measure import MeasureSettings, bootstrap_weights, measure
from tracer.corpus.slices import slice_from_spec

from coverage_corpus import COUNTS, SVD, TEST, workspace

N_CORPORA, N_DOCS, REPLICATES = 30, 150, 20


def simulate(root, n_corpora: int, n_docs: int, replicates: int) -> np.ndarray:
    """Rows of (d, d low, d high, gap, gap low, gap high, 25th and 75th percentiles of the replicate d's),
    one per corpus, shape (n_corpora, 8)."""
    rows = []
    for k in range(n_corpora):
        ws = workspace(root / f"c{k}", k, n_docs)
        res = measure(ws, {"planted": TEST}, "ppmi-svd", [slice_from_spec(ws, "all")], COUNTS, SVD,
                      MeasureSettings(bootstrap=replicates, seed=k))
        r = res.summary.iloc[0]
        quartiles = np.percentile(res.replicates.effect_size, [25, 75])
        rows.append((r.effect_size, r.ci_low, r.ci_high, r.gap, r.gap_ci_low, r.gap_ci_high, *quartiles))
    return np.array(rows)


def coverage(rows: np.ndarray, col: int, low: int | None = None) -> float:
    """Share of corpora whose interval (columns ``low``, ``low + 1``; by default the two after ``col``)
    holds the leave-one-out mean of column ``col``."""
    n = len(rows)
    low = col + 1 if low is None else low
    target = (rows[:, col].sum() - rows[:, col]) / (n - 1)   # leave-one-out mean
    return float(np.mean((rows[:, low] <= target) & (target <= rows[:, low + 1])))


def test_bootstrap_weights_resample_the_documents(demo_ws):
    sl = slice_from_spec(demo_ws, "all")
    w = bootstrap_weights(sl, np.random.default_rng(0))
    n = int((sl.weights > 0).sum())
    # a multinomial resample keeps the total and leaves out about e^-1 of the documents
    assert w.sum() == n and abs(np.mean(w == 0) - np.exp(-1)) < 0.03 and w.max() >= 3


def test_the_95_percent_intervals_cover_in_simulation(tmp_path):
    rows = simulate(tmp_path, N_CORPORA, N_DOCS, REPLICATES)
    cov_d, cov_gap, cov_quartiles = coverage(rows, 0), coverage(rows, 3), coverage(rows, 0, low=6)
    print(f"coverage over {N_CORPORA} corpora: d {cov_d:.3f}, gap {cov_gap:.3f}, d's replicate quartiles "
          f"{cov_quartiles:.3f}")
    # a true 95% gives 25 or fewer of 30 with probability 1.6% (scipy.stats.binom.cdf(25, 30, 0.95)); the
    # seeds are fixed, so this is not flaky. The 25th-75th percentile range of the replicates (a 50%
    # interval) must fail the same bound: measured 0.63
    assert cov_d >= 26 / 30 and cov_gap >= 26 / 30, (cov_d, cov_gap)
    assert cov_quartiles < 26 / 30, cov_quartiles
    assert np.all(rows[:, 1] <= rows[:, 0]) and np.all(rows[:, 0] <= rows[:, 2])   # estimate inside
