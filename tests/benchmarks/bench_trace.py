#!/usr/bin/env python3
"""Trace benchmark: attribution for one test versus leave-one-source-out retraining, side by side.

    .venv/bin/python tests/benchmarks/bench_trace.py [--test gazette_outlet] [--slice all] [--repeats 3]

On the demo archive: (a) scoring every document for one test (the linear influence of
tier 2: one pass over the probe words' positions, one over the tokens), (b) the whole
``trace`` (sources exact, 200 documents re-ranked exactly, passages, first-order table),
(c) retraining PPMI-SVD without each source in turn and re-measuring. Both start from the
slice's counts and model, which every approach needs. Also prints how well the source
estimates agree with the retrained changes, and what scoring every document by retraining
would cost at the measured rate (an extrapolation, marked as one).
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]


def main():
    from scipy import stats

    from tracer.associate import weat
    from tracer.attribute import Attribution
    from tracer.cooccur import CountSettings, count_slice
    from tracer.corpus.ingest import ingest
    from tracer.corpus.slices import Slice, slice_from_spec
    from tracer.corpus.workspace import Workspace
    from tracer.embed.ppmi_svd import PpmiSvdSettings
    from tracer.embed.train import embedding_from_counts, train_embedding
    from tracer.tests_file import load_tests
    from tracer.trace import TraceSettings, trace

    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--test", default="gazette_outlet")
    ap.add_argument("--slice", default="all")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    test = load_tests(ROOT / "configs" / "demo_tests.toml")[args.test]
    with tempfile.TemporaryDirectory() as tmp:
        ingest(Path(tmp) / "ws", [ROOT / "corpora_demo" / "archive.jsonl.gz"])
        ws = Workspace(Path(tmp) / "ws")
        sl = slice_from_spec(ws, args.slice)
        settings = PpmiSvdSettings()
        counts = CountSettings()
        c = count_slice(ws, sl.weights, counts)
        emb = embedding_from_counts(ws, sl, c, settings)
        src = ws.documents["source"].to_numpy()
        sources = sorted(set(src[sl.weights > 0]))
        times = {"score": [], "trace": [], "retrain": []}
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            attr = Attribution(ws, sl.weights, c, emb, test, alpha=settings.alpha, shift=settings.shift,
                               eig_power=settings.eig_power)
            attr.linear("gap")
            t1 = time.perf_counter()
            result = trace(ws, test, "ppmi-svd", sl, counts, settings, TraceSettings())
            t2 = time.perf_counter()
            actual = {}
            for s in sources:
                w = sl.weights * (src != s)
                e = train_embedding(ws, Slice("x", w, int((w > 0).sum()), 0), "ppmi-svd", counts, settings, save=False)
                actual[s] = weat(e.unit_vectors, e.index, test, with_p=False).gap
            t3 = time.perf_counter()
            times["score"].append(t1 - t0)
            times["trace"].append(t2 - t1)
            times["retrain"].append(t3 - t2)
    base = weat(emb.unit_vectors, emb.index, test, with_p=False).gap
    pred = result.sources.set_index("source")["contribution_gap"]
    p = np.array([pred[s] for s in sources])
    a = np.array([actual[s] - base for s in sources])
    med = {k: statistics.median(v) for k, v in times.items()}
    n_docs = int((sl.weights > 0).sum())
    print(f"\ndemo archive, test {args.test}, slice {args.slice}: {n_docs} documents, {len(sources)} sources; "
          f"median of {args.repeats}\n")
    print(f"{'step':52s} {'seconds':>8s} {'retrain / step':>15s}")
    print(f"{'score every document (tier 2)':52s} {med['score']:8.3f} {med['retrain'] / med['score']:15.1f}")
    print(f"{'whole trace (tiers 2 and 3, passages, first order)':52s} {med['trace']:8.3f} "
          f"{med['retrain'] / med['trace']:15.1f}")
    print(f"{'retrain without each source (' + str(len(sources)) + ' models)':52s} {med['retrain']:8.3f} {1.0:15.1f}")
    per_model = med["retrain"] / len(sources)
    print(f"\nextrapolation, not measured: retraining without each of the {n_docs} documents would take about "
          f"{per_model * n_docs:.0f} s, {per_model * n_docs / med['score']:.0f}x the scoring step")
    print(f"sources, estimated vs retrained change of the gap: Pearson r {stats.pearsonr(p, a).statistic:.3f}, "
          f"sign agreement {np.mean(np.sign(p) == np.sign(a)):.2f}")


if __name__ == "__main__":
    main()
