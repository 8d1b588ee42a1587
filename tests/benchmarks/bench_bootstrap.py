#!/usr/bin/env python3
"""Bootstrap benchmark: PPMI-SVD replicates warm-started from the full-data subspace versus from scratch.

    .venv/bin/python tests/benchmarks/bench_bootstrap.py [--replicates 20] [--slice all] [--dim 100]
    .venv/bin/python tests/benchmarks/bench_bootstrap.py --zipf-tokens 4000000 --zipf-vocab 10000 --replicates 3

Both arms get the same resampled document weights and the same counts; the table
shows the time of the SVD step (and of the whole replicate), their ratio, and the
largest difference in effect size between the arms over every two-target test of
configs/demo_tests.toml. The demo's vocabulary is small (about 2,800 words), where
ARPACK is already fast; ``--zipf-tokens`` adds a larger vocabulary from the
Zipf corpus (no word lists there, so the table gives the largest relative error
of the singular values instead of the effect size).
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]


def main():
    from tracer.core.association import unit_rows, weat
    from tracer.core.counting import CountSettings
    from tracer.provenance.counts import count_slice
    from tracer.corpus.ingest import ingest
    from tracer.corpus.slices import slice_from_spec
    from tracer.corpus.workspace import Workspace
    from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors, ppmi_svd_vectors_warm
    from tracer.analysis.measure import _bootstrap_weights
    from tracer.provenance.specs import load_tests

    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--replicates", type=int, default=20)
    ap.add_argument("--slice", default="all")
    ap.add_argument("--dim", type=int, default=100)
    ap.add_argument("--zipf-tokens", type=int, default=0)
    ap.add_argument("--zipf-vocab", type=int, default=10_000)
    args = ap.parse_args()
    if args.zipf_tokens:
        return zipf(args)
    tests = [t for t in load_tests(ROOT / "configs" / "demo_tests.toml").values() if t.two_target]
    with tempfile.TemporaryDirectory() as tmp:
        ingest(Path(tmp) / "ws", [ROOT / "corpora_demo" / "archive.jsonl.gz"])
        ws = Workspace(Path(tmp) / "ws")
        sl = slice_from_spec(ws, args.slice)
        settings = PpmiSvdSettings(dim=args.dim)
        full = count_slice(ws, sl.weights, CountSettings())
        _, extras = ppmi_svd_vectors(full.matrix, settings)
        start = extras["context_vectors"].astype(np.float64)
        rng = np.random.default_rng(0)
        t = {"count": 0.0, "warm": 0.0, "cold": 0.0}
        worst = 0.0
        for _ in range(args.replicates):
            t0 = time.perf_counter()
            rc = count_slice(ws, _bootstrap_weights(sl, rng), CountSettings(), vocab=full.vocab)
            t1 = time.perf_counter()
            warm = ppmi_svd_vectors_warm(rc.matrix, settings, start)
            t2 = time.perf_counter()
            cold, _ = ppmi_svd_vectors(rc.matrix, settings)
            t3 = time.perf_counter()
            t["count"] += t1 - t0
            t["warm"] += t2 - t1
            t["cold"] += t3 - t2
            index = full.vocab.index
            for test in tests:
                dw = weat(unit_rows(warm), index, test, with_p=False).effect_size
                dc = weat(unit_rows(cold), index, test, with_p=False).effect_size
                worst = max(worst, abs(dw - dc))
    n = args.replicates
    print(f"\nslice {args.slice}: {len(full.vocab)} words, dim {args.dim}, {n} replicates (same weights in both arms)\n")
    print(f"{'arm':34s} {'SVD s/rep':>10s} {'whole s/rep':>12s}")
    print(f"{'warm start (subspace iteration)':34s} {t['warm'] / n:10.3f} {(t['warm'] + t['count']) / n:12.3f}")
    print(f"{'from scratch (ARPACK)':34s} {t['cold'] / n:10.3f} {(t['cold'] + t['count']) / n:12.3f}")
    print(f"\nspeed-up of the SVD step: {t['cold'] / t['warm']:.2f}x; of a whole replicate: "
          f"{(t['cold'] + t['count']) / (t['warm'] + t['count']):.2f}x")
    print(f"largest |d(warm) - d(scratch)| over {len(tests)} tests x {n} replicates: {worst:.4f}")


def zipf(args):
    import subprocess
    import sys

    from tracer.core.counting import CountSettings, build_vocab, count_matrix
    from tracer.core.ppmi_svd import truncated_svd, warm_truncated_svd
    from tracer.core.pmi import ppmi_matrix

    data = ROOT / "bench-data" / f"zipf-{args.zipf_tokens}"
    if not (data / "tokens.npy").is_file():
        subprocess.run([sys.executable, str(Path(__file__).resolve().parent / "reference" / "gen_zipf_corpus.py"), "--outdir",
                        str(data), "--tokens", str(args.zipf_tokens)], check=True, stdout=subprocess.DEVNULL)
    tokens = np.load(data / "tokens.npy")
    offsets = np.append(np.load(data / "doc_offsets.npy"), len(tokens))
    s = CountSettings(min_count=1, max_vocab=args.zipf_vocab)
    ones = np.ones(len(offsets) - 1)
    vocab = build_vocab(tokens, offsets, ones, [""] * (int(tokens.max()) + 1), s)
    m = ppmi_matrix(count_matrix(tokens, offsets, ones, vocab, int(tokens.max()) + 1, s))
    start = truncated_svd(m, args.dim)[2].T
    rng = np.random.default_rng(0)
    tw = tc = 0.0
    worst = 0.0
    for _ in range(args.replicates):
        w = rng.multinomial(len(ones), np.full(len(ones), 1 / len(ones))).astype(float)
        mb = ppmi_matrix(count_matrix(tokens, offsets, w, vocab, int(tokens.max()) + 1, s))
        t0 = time.perf_counter()
        _, sw, _ = warm_truncated_svd(mb, args.dim, start)
        t1 = time.perf_counter()
        _, sc, _ = truncated_svd(mb, args.dim)
        t2 = time.perf_counter()
        tw, tc = tw + t1 - t0, tc + t2 - t1
        worst = max(worst, float(np.max(np.abs(sw - sc) / sc)))
    n = args.replicates
    print(f"\nZipf corpus: {args.zipf_tokens:,} tokens, {len(vocab):,} words, dim {args.dim}, {n} replicates")
    print(f"SVD per replicate: warm start {tw / n:.2f} s, from scratch (ARPACK) {tc / n:.2f} s, "
          f"speed-up {tc / tw:.2f}x; largest relative singular-value difference {worst:.4f}")
    print("(a random Zipf corpus has a flat spectrum, the hardest case for subspace iteration)")


if __name__ == "__main__":
    main()
