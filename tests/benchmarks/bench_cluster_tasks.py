#!/usr/bin/env python3
"""Bootstrap replicates and verification retrains on a dask.distributed cluster of 1 and of 2 workers.

    .venv/bin/python tests/benchmarks/bench_cluster_tasks.py [--replicates 6] [--verify 3] [--repeats 2]
    .venv/bin/python tests/benchmarks/bench_cluster_tasks.py --corpus other.jsonl.gz --tests other_tests.toml --test NAME

Two LocalClusters (worker processes, one thread each) are started side by side, one with a single
worker and one with two; the workspace is opened with each one's scheduler, so the replicates'
counts (by document partitions) and SVDs and the verification's retrains all run on the cluster.
Each arm gets one untimed warm-up (the workers import the package and compile the counting
kernels), then the arms are timed in turn, ``--repeats`` times. The table gives the median wall
time of ``measure`` with ``--replicates`` bootstrap replicates of one slice and of ``trace`` with
``--verify K`` (K sources + 3 document sets retrained), and the 1-worker time over the 2-worker
time; every run's tables are checked equal to those of the local path in this process: exactly
below 5,000 words, to rounding (rtol 1e-6) above, where the workers' BLAS runs one thread (the
largest difference is printed).
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]


def main():
    from distributed import LocalCluster

    from tracer.analysis.measure import MeasureSettings, measure
    from tracer.analysis.trace import TraceSettings, trace
    from tracer.core.counting import CountSettings
    from tracer.core.ppmi_svd import ONE_BLAS_THREAD_BELOW, PpmiSvdSettings
    from tracer.provenance.counts import count_slice
    from tracer.corpus.ingest import ingest
    from tracer.corpus.slices import slice_from_spec
    from tracer.provenance.cache import open_workspace
    from tracer.provenance.specs import load_tests

    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--replicates", type=int, default=6)
    ap.add_argument("--verify", type=int, default=3)
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--slice", default="all")
    ap.add_argument("--dim", type=int, default=100)
    ap.add_argument("--corpus", type=Path, default=ROOT / "corpora_demo" / "archive.jsonl.gz")
    ap.add_argument("--tests", type=Path, default=ROOT / "configs" / "demo_tests.toml")
    ap.add_argument("--test", default="tribune_mix", help="the test traced")
    args = ap.parse_args()
    tests = load_tests(args.tests)
    counts, svd = CountSettings(window=5, min_count=5), PpmiSvdSettings(dim=args.dim)

    def run_measure(ws):
        sl = slice_from_spec(ws, args.slice)
        return measure(ws, tests, "ppmi-svd", [sl], counts, svd, MeasureSettings(bootstrap=args.replicates))

    def run_trace(ws):
        sl = slice_from_spec(ws, args.slice)
        return trace(ws, tests[args.test], "ppmi-svd", sl, counts, svd, TraceSettings(verify=args.verify))

    # below ONE_BLAS_THREAD_BELOW words the SVD runs one BLAS thread everywhere, so the cluster's
    # tables equal the local ones bit for bit; above it a worker runs one thread and this process
    # the library's own number, and the tables agree to rounding (tracer.provenance.cluster)
    n_words = None
    largest = {"measure": 0.0, "trace": 0.0}

    def same(a, b, kind):
        pairs = ([(getattr(a, p), getattr(b, p)) for p in ("summary", "replicates")] if kind == "measure"
                 else [(a.verification.rows, b.verification.rows)])
        for x, y in pairs:
            pd.testing.assert_frame_equal(x, y, check_exact=n_words < ONE_BLAS_THREAD_BELOW, rtol=1e-6, atol=1e-9)
            num = x.select_dtypes("number").columns
            largest[kind] = max(largest[kind], float(np.nanmax(np.abs(x[num].to_numpy(float) - y[num].to_numpy(float)),
                                                               initial=0.0)))

    runs = {"measure": run_measure, "trace": run_trace}
    with tempfile.TemporaryDirectory() as tmp:
        ingest(Path(tmp) / "ws", [args.corpus])
        path = Path(tmp) / "ws"
        local = {kind: fn(open_workspace(path)) for kind, fn in runs.items()}
        ws = open_workspace(path)
        n_words = len(count_slice(ws, slice_from_spec(ws, args.slice).weights, counts).vocab)
        with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=":0") as one, \
                LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as two:
            arms = {"1 worker": one.scheduler_address, "2 workers": two.scheduler_address}
            for address in arms.values():  # warm-up, untimed
                for fn in runs.values():
                    fn(open_workspace(path, scheduler=address))
            seconds = {(arm, kind): [] for arm in arms for kind in runs}
            for _ in range(args.repeats):
                for kind, fn in runs.items():
                    for arm, address in arms.items():
                        start = time.perf_counter()
                        result = fn(open_workspace(path, scheduler=address))
                        seconds[arm, kind].append(time.perf_counter() - start)
                        same(local[kind], result, kind)
    agreement = ("tables equal to the local path's in every run" if n_words < ONE_BLAS_THREAD_BELOW else
                 f"tables equal to the local path's to rounding (largest difference: measure "
                 f"{largest['measure']:.1e}, trace {largest['trace']:.1e}; {n_words} words, above "
                 f"{ONE_BLAS_THREAD_BELOW}, where the workers' BLAS runs one thread and this process more)")
    print(f"corpus {args.corpus.name}, slice {args.slice}, {n_words} words, dim {args.dim}; median of "
          f"{args.repeats} runs; {agreement}")
    print(f"{'step':<44} {'1 worker s':>11} {'2 workers s':>12} {'1 / 2':>7}")
    labels = {"measure": f"measure, {args.replicates} bootstrap replicates",
              "trace": f"trace {args.test}, verify {args.verify} ({args.verify + 3} retrains)"}
    for kind in runs:
        a, b = (statistics.median(seconds[arm, kind]) for arm in arms)
        print(f"{labels[kind]:<44} {a:>11.2f} {b:>12.2f} {a / b:>7.2f}")


if __name__ == "__main__":
    main()
