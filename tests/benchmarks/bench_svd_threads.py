#!/usr/bin/env python3
"""The full model's ARPACK SVD with scipy's sparse products against the threaded ones, side by side.

    .venv/bin/python tests/benchmarks/bench_svd_threads.py --tokens 2000000 6000000
    .venv/bin/python tests/benchmarks/bench_svd_threads.py --tokens 6000000 --variants scipy t2

For each size, generates a news-like corpus (``gen_realistic_corpus.py``: invented words, Zipf
vocabulary, a planted test and a control) into ``--data`` unless it is there, ingests and counts
it (window 5, min count 5), then runs ``truncated_svd`` on the same PPMI matrix (dim 100) once per
variant named by ``--variants`` (default: all), compared with the first one run (put ``scipy`` first):

    scipy      scipy's single-threaded products on the CSR matrix (the old default)
    gram       the default: A^T A x in one pass over A (CsrOperator.gram); on a large matrix in 8
               fixed row blocks on the threads, with float32 values and ARPACK's Lanczos vectors
               in float32, BLAS on one thread (truncated_svd's fast path)
    gram64     the same with float64 values and Lanczos vectors
    gram1t     the default on 1 thread (what one replicate worker runs)
    gramblas1  the default with an explicit limit of 1 BLAS thread (now the default's own)
    t1, t2     A x and A^T y as separate row-parallel products (CsrOperator) on 1 and 2 threads
    f32        the operator on 2 threads with float32 values
    ncv3k      the operator on 2 threads with ARPACK's ncv = 3 dim (default: 2 dim + 1)
    t2blas1    the operator on 2 threads, ARPACK's dense (BLAS) work on 1 thread
    t1blas1    the operator on 1 thread, BLAS on 1 thread (what one replicate worker runs)

and prints wall time, the ratio to the first variant, the number of operator products, the 1-minute load
average at the start and end (the machine may be shared), whether u and s equal scipy's bit for
bit (else the largest differences), the time spent in the operator's products (scipy's own are not timed),
and the WEAT effect size d and gap of both tests with their differences from the first variant's
(the issue's tolerance: |delta d| <= 0.02; the tests hold the fast path to ``FAST_PATH_TOLERANCE``
of tracer.core.ppmi_svd, 5e-4 in d and 5e-5 in the gap).
Nothing here is a pass/fail test: read the figures.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from contextlib import nullcontext
from pathlib import Path

import numpy as np
from threadpoolctl import ThreadpoolController

HERE = Path(__file__).resolve().parent
SEP = {"products": "separate"}
VARIANTS = {"scipy": {"products": "scipy"}, "gram": {}, "t1": {**SEP, "threads": 1}, "t2": {**SEP, "threads": 2},
            "f32": {**SEP, "threads": 2, "values": np.float32}, "ncv3k": {**SEP, "threads": 2, "ncv": 3},
            "t2blas1": {**SEP, "threads": 2, "blas": 1}, "t1blas1": {**SEP, "threads": 1, "blas": 1},
            "gram64": {"values": np.float64}, "gram1t": {"threads": 1}, "gramblas1": {"blas": 1}}


def corpus(data: Path, tokens: int, vocab: int) -> Path:
    out = data / f"svd-{tokens}-{vocab}"
    if not (out / "meta.json").is_file():
        subprocess.run([sys.executable, str(HERE / "gen_realistic_corpus.py"), "--outdir", str(out),
                        "--tokens", str(tokens), "--vocab", str(vocab)], check=True, stdout=subprocess.DEVNULL)
    return out


def ppmi_of(out: Path):
    from tracer.core.counting import CountSettings
    from tracer.core.pmi import ppmi_matrix
    from tracer.corpus.ingest import ingest
    from tracer.corpus.workspace import Workspace
    from tracer.provenance.counts import count_slice
    if not (out / "ws").is_dir():
        ingest(out / "ws", [out / "corpus.jsonl.gz"], jobs=1)
    ws = Workspace(out / "ws")
    c = count_slice(ws, np.ones(ws.n_documents), CountSettings())
    return ppmi_matrix(c.matrix), c.vocab.index


def scores(u, s, index, tests):
    from tracer.core.association import unit_rows, weat
    unit = unit_rows(u * s ** 0.5)
    return {name: weat(unit, index, t, with_p=False) for name, t in tests.items()}


def run(m, dim: int, spec: dict):
    """truncated_svd with one variant's settings; also the number of operator products."""
    import tracer.core.ppmi_svd as ppmi_svd
    from scipy.sparse.linalg import LinearOperator

    from tracer.core.sparse_products import CsrOperator
    calls = [0, 0.0]

    class Counting(CsrOperator):  # counts and times A x, A^T y and A^T A x (one gram product counts 2)
        def __init__(self, matrix, threads=None, values=np.float64):
            super().__init__(matrix, threads=threads, values=spec.get("values", values))

        def _matvec(self, x):
            t = time.perf_counter()
            y = super()._matvec(x)
            calls[0], calls[1] = calls[0] + 1, calls[1] + time.perf_counter() - t
            return y

        def _rmatvec(self, x):
            t = time.perf_counter()
            y = super()._rmatvec(x)
            calls[0], calls[1] = calls[0] + 1, calls[1] + time.perf_counter() - t
            return y

        def gram(self):
            inner = super().gram()

            def matvec(x):
                t = time.perf_counter()
                y = inner.matvec(x)
                calls[0], calls[1] = calls[0] + 2, calls[1] + time.perf_counter() - t
                return y
            return LinearOperator(inner.shape, matvec=matvec, dtype=inner.dtype)

    ppmi_svd.CsrOperator = Counting
    try:
        ncv = spec["ncv"] * dim if "ncv" in spec else None
        limit = ThreadpoolController().limit(limits=spec["blas"], user_api="blas") if "blas" in spec else nullcontext()
        t = time.perf_counter()
        with limit:
            u, s, _ = ppmi_svd.truncated_svd(m, dim, threads=spec.get("threads"), ncv=ncv,
                                             products=spec.get("products", "gram"))
        return u, s, time.perf_counter() - t, calls
    finally:
        ppmi_svd.CsrOperator = CsrOperator


def main() -> None:
    from tracer.provenance.specs import load_tests
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--tokens", type=int, nargs="+", default=[2_000_000])
    ap.add_argument("--vocab", type=int, default=80_000, help="Zipf types of the generator")
    ap.add_argument("--data", type=Path, default=Path("bench-data"))
    ap.add_argument("--dim", type=int, default=100)
    ap.add_argument("--variants", nargs="+", default=list(VARIANTS), choices=list(VARIANTS))
    args = ap.parse_args()
    for tokens in args.tokens:
        out = corpus(args.data, tokens, args.vocab)
        m, index = ppmi_of(out)
        tests = load_tests(out / "tests.toml")
        print(f"\n{tokens:,} tokens: {m.shape[0]:,} words, {m.nnz:,} nonzeros, dim {args.dim}", flush=True)
        ref = None
        for name in args.variants:
            load0 = os.getloadavg()[0]
            u, s, secs, (calls, in_products) = run(m, args.dim, VARIANTS[name])
            got = scores(u, s, index, tests)
            if ref is None:
                ref = (u, s, secs, got)
            same = np.array_equal(u, ref[0]) and np.array_equal(s, ref[1])
            diff = "bit-identical" if same else (f"max|du*s| {np.abs(u * s - ref[0] * ref[1]).max():.1e} "
                                                 f"max rel ds {np.max(np.abs(s - ref[1]) / ref[1]):.1e}")
            line = "  ".join(f"{n}: d {r.effect_size:.4f} |dd| {abs(r.effect_size - ref[3][n].effect_size):.4f} "
                             f"gap {r.gap:.5f} |dgap| {abs(r.gap - ref[3][n].gap):.5f}" for n, r in got.items())
            print(f"  {name:6} {secs:7.1f} s  x{ref[2] / secs:4.2f}  {calls:5d} products {in_products:5.1f} s  "
                  f"load {load0:.1f}-{os.getloadavg()[0]:.1f}  {diff}  {line}", flush=True)


if __name__ == "__main__":
    main()
