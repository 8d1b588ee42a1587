#!/usr/bin/env python3
"""Coverage benchmark: how often the 95% measure intervals cover the value they speak about.

    .venv/bin/python tests/benchmarks/bench_coverage.py [--corpora 80] [--docs 150] [--replicates 20]

Draws many small corpora from tests/analysis/coverage_corpus.py and measures the planted
test with document-bootstrap intervals on each. Two targets are reported, for d and for
the gap: the value expected at this corpus size (mean over the corpora, each left out of
its own target; what a document-bootstrap interval is about), and the value on one corpus
20 times larger from the same generator (which also includes how embedding statistics move
with corpus size, something no resampling of one corpus can see). A second column gives the
coverage of the linear (infinitesimal-jackknife) interval of
:mod:`tracer.analysis.linear_interval` on the same corpora, with no retraining, and a third that
of a delete-one jackknife interval (exact re-rank without each document, subspace fixed; a
diagnostic from tests/benchmarks/bench_linear_interval.py, not offered by the tool).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "analysis"))


def main():
    from coverage_corpus import COUNTS, POPULATION_FACTOR, SVD, TEST, workspace
    from test_coverage import coverage, simulate

    from tracer.analysis.measure import measure
    from tracer.corpus.slices import slice_from_spec

    ap = argparse.ArgumentParser()
    ap.add_argument("--corpora", type=int, default=80)
    ap.add_argument("--docs", type=int, default=150)
    ap.add_argument("--replicates", type=int, default=20)
    args = ap.parse_args()
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        big = workspace(root / "big", 10_000, args.docs * POPULATION_FACTOR)
        pop = measure(big, {"planted": TEST}, "ppmi-svd", [slice_from_spec(big, "all")], COUNTS, SVD).summary.iloc[0]
        rows = simulate(root, args.corpora, args.docs, args.replicates)
        rows = np.column_stack([rows, [linear_row(root / f"c{k}" / "ws") for k in range(len(rows))]])
    n = len(rows)
    for name, col, big_value in (("d", 0, pop.effect_size), ("gap", 3, pop.gap)):
        big_cov = np.mean((rows[:, col + 1] <= big_value) & (big_value <= rows[:, col + 2]))
        se = np.sqrt(0.95 * 0.05 / n)
        print(f"{name:4s} coverage of the same-size value {coverage(rows, col):.3f} (binomial se {se:.3f}); "
              f"of the {POPULATION_FACTOR}x corpus value {big_cov:.3f}; mean estimate {rows[:, col].mean():.4f}, "
              f"sd over corpora {rows[:, col].std(ddof=1):.4f}, mean half-width "
              f"{np.mean(rows[:, col + 2] - rows[:, col + 1]) / 2:.4f}, {POPULATION_FACTOR}x value {big_value:.4f}")
        for label, low in (("linear", 8 if name == "d" else 10), ("delete-one", 12 if name == "d" else 14)):
            _other_interval(rows, name, col, label, low, big_value)
    print(f"{n} corpora of {args.docs} documents, {args.replicates} replicates each: {time.perf_counter() - t0:.0f} s")


def _other_interval(rows, name, col, label, low, big_value):
    """Coverage and width of an interval in columns ``low``, ``low + 1`` beside the bootstrap's."""
    from coverage_corpus import POPULATION_FACTOR
    from test_coverage import coverage

    big_lin = np.mean((rows[:, low] <= big_value) & (big_value <= rows[:, low + 1]))
    print(f"{name:4s} {label} interval: coverage of the same-size value {coverage(rows, col, low=low):.3f}; of the "
          f"{POPULATION_FACTOR}x corpus value {big_lin:.3f}; mean half-width "
          f"{np.mean(rows[:, low + 1] - rows[:, low]) / 2:.4f}")
    ratio = (rows[:, low + 1] - rows[:, low]) / (rows[:, col + 2] - rows[:, col + 1])
    print(f"{name:4s} {label} / bootstrap width per corpus: median {np.median(ratio):.2f}, 10th-90th percentile "
          f"{np.percentile(ratio, 10):.2f}-{np.percentile(ratio, 90):.2f}")


def linear_row(folder: Path) -> tuple[float, ...]:
    """(d low, d high, gap low, gap high) of the linear interval of the planted test on a corpus, then
    the same of the delete-one jackknife interval."""
    from coverage_corpus import COUNTS, SVD, TEST

    from tracer.analysis.influence import Attribution
    from tracer.analysis.linear_interval import linear_intervals
    from tracer.corpus.slices import slice_from_spec
    from tracer.corpus.workspace import Workspace
    from tracer.provenance.counts import count_slice
    from tracer.provenance.models import embedding_from_counts
    from tracer.provenance.specs import normalized_test

    ws = Workspace(folder)
    sl = slice_from_spec(ws, "all")
    c = count_slice(ws, sl.weights, COUNTS)
    emb = embedding_from_counts(ws, sl, c, SVD)
    from bench_linear_interval import delete_one_se

    attr = Attribution(ws, sl.weights, c, emb, normalized_test(TEST, ws), alpha=SVD.alpha, shift=SVD.shift,
                       eig_power=SVD.eig_power)
    lin = linear_intervals(attr)
    gap_se, d_se = delete_one_se(attr)
    half_gap, half_d = 1.959963984540054 * gap_se, 1.959963984540054 * d_se
    base = attr.base
    return (lin.d.low, lin.d.high, lin.gap.low, lin.gap.high, base.effect_size - half_d, base.effect_size + half_d,
            base.gap - half_gap, base.gap + half_gap)


if __name__ == "__main__":
    main()
