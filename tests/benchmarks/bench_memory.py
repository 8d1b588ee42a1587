#!/usr/bin/env python3
"""The memory estimates of tracer.core.memory against the peak resident memory measured.

    .venv/bin/python tests/benchmarks/bench_memory.py --tokens 500000 --tokens 2000000

For each generated corpus (``gen_realistic_corpus.py``) and each heavy step, one fresh
process prepares the step's inputs, resets its peak resident size (``/proc/self/clear_refs``),
runs the step and reads the peak (``VmHWM``) of ``/proc/self/status``; the measured figure
is that peak less the resident size just before the step. The estimate is what the check
before the step compares with the memory available. The stated tolerance: the estimate
within 2x of the measured figure either way (a ratio in [0.5, 2]); above 1 is the safe side.
Linux only.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
PY = sys.executable

_STEP = """
import sys, numpy as np
from tracer.corpus.workspace import Workspace
from tracer.core import memory
from tracer.core.counting import CountSettings, build_vocab, count_matrix
from tracer.core.count_memory import count_size
from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors
from tracer.core.threads import ThreadPool, default_workers

def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key):
            return int(line.split()[1]) * 1024

ws, step = Workspace(sys.argv[1]), sys.argv[2]
s = CountSettings()
ones = np.ones(ws.n_documents)
vocab = build_vocab(ws.tokens, ws.doc_offsets, ones, ws.vocab.words, s)
n, workers = len(vocab), default_workers()
weights = ones if step != "count replicate" else np.random.default_rng(0).poisson(1.0, ws.n_documents).astype(float)
if step.startswith("count"):
    size = count_size(ws.tokens, ws.doc_offsets, weights, vocab.id_map(len(ws.vocab)), n, s, 25_000_000,
                      pool=ThreadPool(workers))
    estimate = size.peak(n, workers)
    run = lambda: count_matrix(ws.tokens, ws.doc_offsets, weights, vocab, len(ws.vocab), s, workers=workers)
else:
    c = count_matrix(ws.tokens, ws.doc_offsets, ones, vocab, len(ws.vocab), s, workers=workers)
    dim = 100
    estimate = memory.ppmi_svd_peak(n, c.nnz, dim)
    run = lambda: ppmi_svd_vectors(c, PpmiSvdSettings(dim=dim))
# the step's libraries loaded and its kernels compiled before the measurement
count_matrix(np.zeros(4, np.uint32), np.array([0, 4]), np.ones(1), vocab, len(ws.vocab), s)
open("/proc/self/clear_refs", "w").write("5")
before = status("VmRSS:")
result = run()
print(estimate, status("VmHWM:") - before)
"""

STEPS = ["count", "count replicate", "ppmi + svd"]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--tokens", type=int, action="append", help="corpus sizes (repeatable); default 500k and 2M")
    ap.add_argument("--cache", type=Path, default=HERE.parents[1] / "bench-data")
    args = ap.parse_args()
    print(f"{'tokens':>10} {'step':22} {'estimate MB':>12} {'measured MB':>12} {'ratio':>6}  within 2x")
    worst = []
    for tokens in args.tokens or [500_000, 2_000_000]:
        data = args.cache / f"realistic-{tokens}"
        if not (data / "corpus.jsonl.gz").is_file():
            subprocess.run([PY, str(HERE / "gen_realistic_corpus.py"), "--outdir", str(data), "--tokens", str(tokens)],
                           check=True, stdout=subprocess.DEVNULL)
        ws = data / "ws-memory"
        if not (ws / "CURRENT").is_file():
            subprocess.run([str(Path(PY).with_name("tracer")), "ingest", str(data / "corpus.jsonl.gz"), "-w", str(ws)],
                           check=True, capture_output=True)
        for step in STEPS:
            out = subprocess.run([PY, "-c", _STEP, str(ws), step], capture_output=True, text=True, check=True)
            estimate, measured = map(int, out.stdout.split()[-2:])
            ratio = estimate / max(measured, 1)
            worst.append(ratio)
            print(f"{tokens:>10,} {step:22} {estimate / 2 ** 20:12.1f} {measured / 2 ** 20:12.1f} {ratio:6.2f}  "
                  f"{'yes' if 0.5 <= ratio <= 2 else 'NO'}", flush=True)
    print(f"\nratios estimate/measured from {min(worst):.2f} to {max(worst):.2f}")


if __name__ == "__main__":
    main()
