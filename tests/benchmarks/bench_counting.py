#!/usr/bin/env python3
"""Counting benchmark: tracer's counter beside the C reference, pure Python and gensim word2vec.

Run on demand (not part of the test suite):

    .venv/bin/python tests/benchmarks/bench_counting.py            # 20M tokens, 50k vocabulary, window 5
    .venv/bin/python tests/benchmarks/bench_counting.py --tokens 2000000 --repeats 3 --skip-word2vec

Everything is measured in one run, interleaved, each measurement in a fresh process
(so peak memory is that run's own); the table shows medians and the ratios the
targets speak of. Every measured process starts after a pause (``--pause``,
default 5 s): on these virtual machines memory a process frees goes back to the
host within about two seconds, and touching it again is then several times
slower than counting (a fresh 350 MB array takes about 1 s to fill, a reused one
0.03 s). Without the pause, whichever counter runs just after a large one gets
cheap memory, and the order of the rows decides the ratios. The corpus comes from
reference/gen_zipf_corpus.py beside this file and the C counter from reference/cooc_ref.c (built with
``cc`` into the cache folder: no other toolchain is needed).

Counting rules: the C reference skips out-of-vocabulary tokens in place, tracer
removes them before windowing. Speed is compared on the same corpus as is; the
counts are compared cell by cell (through the reference's checksum) on a copy of
the corpus with out-of-vocabulary tokens already removed, where both rules agree.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
REFERENCE = Path(__file__).resolve().parent / "reference"
PY = sys.executable


def ensure_inputs(cache: Path, n_tokens: int) -> tuple[Path, Path]:
    cache.mkdir(parents=True, exist_ok=True)
    data = cache / f"zipf-{n_tokens}"
    if not (data / "tokens.npy").is_file():
        subprocess.run([PY, str(REFERENCE / "gen_zipf_corpus.py"), "--outdir", str(data), "--tokens", str(n_tokens)],
                       check=True, stdout=subprocess.DEVNULL)
    binary = cache / "cooc_ref"
    if not binary.is_file():
        subprocess.run(["cc", "-O3", "-march=native", "-o", str(binary), str(REFERENCE / "cooc_ref.c")], check=True)
    return data, binary


# ---- one measurement per process ------------------------------------------------------------

def child_tracer(data: str, vocab_size: int, window: int, workers: int, symmetric: bool) -> dict:
    from tracer.core.counting import CountSettings, ModelVocab, build_vocab, count_matrix
    # loaded into memory first, as the C reference does before its clock starts
    tokens = np.load(Path(data) / "tokens.npy")
    offsets = np.append(np.load(Path(data) / "doc_offsets.npy"), len(tokens))
    n_full = int(tokens.max()) + 1
    s = CountSettings(window=window, min_count=1, max_vocab=vocab_size)
    # load the compiled kernels from numba's cache outside the clock (a one-time cost per process)
    tiny = ModelVocab(["a"], np.array([0]), np.array([2]))
    count_matrix(np.zeros(4, np.uint32), np.array([0, 4]), np.ones(1), tiny, 1, s, workers=workers)
    t0 = time.perf_counter()
    vocab = build_vocab(np.asarray(tokens), offsets, np.ones(len(offsets) - 1), [""] * n_full, s)
    t1 = time.perf_counter()
    m = count_matrix(tokens, offsets, np.ones(len(offsets) - 1), vocab, n_full, s, workers=workers,
                     symmetric=symmetric)
    t2 = time.perf_counter()
    cells, total = int(m.nnz), float(m.sum())
    del m
    # a second count in the same process, as when a command counts several slices or replicates:
    # memory the process has touched before is cheaper to touch again on these virtual machines
    again = count_matrix(tokens, offsets, np.ones(len(offsets) - 1), vocab, n_full, s, workers=workers,
                         symmetric=symmetric)
    t3 = time.perf_counter()  # (the result is freed after the clock, as the first one is)
    del again
    return {"t_vocab": t1 - t0, "t_count": t2 - t1, "t_again": t3 - t2, "cells": cells, "sum": total}


def child_python(data: str, vocab_size: int, window: int, prefix: int) -> dict:
    """A straightforward pure-Python counter (dict of pairs) on a prefix of the corpus."""
    from collections import Counter
    tokens = np.load(Path(data) / "tokens.npy", mmap_mode="r")[:prefix].tolist()
    offsets = [int(o) for o in np.load(Path(data) / "doc_offsets.npy") if o < prefix] + [prefix]
    t0 = time.perf_counter()
    freq = Counter(tokens)
    keep = {w for w, _ in sorted(freq.items(), key=lambda kv: (-kv[1], kv[0]))[:vocab_size]}
    pairs: Counter = Counter()
    for a, b in zip(offsets[:-1], offsets[1:]):
        doc = [t for t in tokens[a:b] if t in keep]
        for i, x in enumerate(doc):
            for y in doc[i + 1:i + 1 + window]:
                pairs[(x, y) if x < y else (y, x)] += 1
    return {"t_count": time.perf_counter() - t0, "tokens": prefix, "cells": len(pairs)}


def child_word2vec(data: str, vocab_size: int, window: int, workers: int) -> dict:
    """One epoch of gensim skip-gram over the same tokens (words spelled w<id>), vocabulary capped alike."""
    from gensim.models import Word2Vec
    tokens = np.load(Path(data) / "tokens.npy", mmap_mode="r")
    offsets = np.append(np.load(Path(data) / "doc_offsets.npy"), len(tokens))

    class Sentences:
        def __iter__(self):
            for a, b in zip(offsets[:-1], offsets[1:]):
                ids = tokens[a:b]
                for k in range(0, len(ids), 10_000):
                    yield [f"w{i}" for i in ids[k:k + 10_000]]

    model = Word2Vec(vector_size=100, window=window, min_count=1, max_final_vocab=vocab_size, sg=1,
                     negative=5, workers=workers, epochs=1, seed=1)
    model.build_vocab(Sentences())
    t0 = time.perf_counter()
    model.train(Sentences(), total_examples=model.corpus_count, epochs=1)
    return {"t_count": time.perf_counter() - t0}


PAUSE = [5.0]  # seconds; set from --pause


def run_child(kind: str, **kw) -> dict:
    time.sleep(PAUSE[0])
    code = (f"import json,resource,sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); import bench_counting as b; "
            f"r = b.child_{kind}(**{kw!r}); r['peak_rss_mb'] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss/1024; "
            f"print(json.dumps(r))")
    out = subprocess.run([PY, "-c", code], check=True, capture_output=True, text=True, cwd=ROOT)
    return json.loads(out.stdout.strip().splitlines()[-1])


def run_c(binary: Path, data: Path, vocab_size: int, window: int, out: Path | None = None) -> dict:
    time.sleep(PAUSE[0])
    cmd = [str(binary), str(data / "tokens.npy"), str(data / "doc_offsets.npy"), "--vocab", str(vocab_size),
           "--window", str(window), "--mode", "rows"] + (["--out", str(out)] if out else [])
    r = json.loads(subprocess.run(cmd, check=True, capture_output=True, text=True).stdout.strip())
    return r


# ---- the count check ------------------------------------------------------------------------

def compacted_copy(data: Path, vocab_size: int) -> Path:
    """The corpus with tokens outside the top-``vocab_size`` words removed (the rule tracer counts by)."""
    out = data.parent / f"{data.name}-compact{vocab_size}"
    if (out / "tokens.npy").is_file():
        return out
    tokens = np.load(data / "tokens.npy")
    offsets = np.append(np.load(data / "doc_offsets.npy"), len(tokens))
    counts = np.bincount(tokens)
    ids = np.arange(len(counts))
    order = np.lexsort((ids, -counts))[:vocab_size]
    keep = np.zeros(len(counts), bool)
    keep[order] = True
    mask = keep[tokens]
    new_off = np.concatenate([[0], np.cumsum(np.add.reduceat(mask, offsets[:-1]) * (np.diff(offsets) > 0))])
    out.mkdir(exist_ok=True)
    np.save(out / "tokens.npy", tokens[mask].astype(np.uint32))
    np.save(out / "doc_offsets.npy", new_off[:-1].astype(np.int64))
    return out


def check_counts(binary: Path, data: Path, vocab_size: int, window: int) -> dict:
    from tracer.core.counting import CountSettings, build_vocab, count_matrix
    compact = compacted_copy(data, vocab_size)
    ref = run_c(binary, compact, vocab_size, window)
    tokens = np.load(compact / "tokens.npy")
    offsets = np.append(np.load(compact / "doc_offsets.npy"), len(tokens))
    n_full = int(tokens.max()) + 1
    s = CountSettings(window=window, min_count=1, max_vocab=vocab_size)
    vocab = build_vocab(tokens, offsets, np.ones(len(offsets) - 1), [""] * n_full, s)
    upper = count_matrix(tokens, offsets, np.ones(len(offsets) - 1), vocab, n_full, s, symmetric=False).tocoo()
    keys = upper.row.astype(np.uint64) * np.uint64(len(vocab)) + upper.col.astype(np.uint64)
    counts = upper.data.astype(np.uint64)
    ours = {"cells": int(upper.nnz), "total": int(counts.sum()),
            "diag": int(counts[upper.row == upper.col].sum()),
            "checksum": int((counts * (keys % np.uint64(1000003) + np.uint64(1))).sum())}
    theirs = {k: ref[k] for k in ours}
    return {"same": ours == theirs, "tracer": ours, "reference": theirs}


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--tokens", type=int, default=20_000_000)
    ap.add_argument("--vocab", type=int, default=50_000)
    ap.add_argument("--window", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--python-prefix", type=int, default=1_000_000)
    ap.add_argument("--skip-word2vec", action="store_true")
    ap.add_argument("--pause", type=float, default=5.0, help="seconds of rest before each measured process")
    ap.add_argument("--cache", type=Path, default=ROOT / "bench-data")
    args = ap.parse_args()
    PAUSE[0] = args.pause
    data, binary = ensure_inputs(args.cache, args.tokens)
    kw = dict(data=str(data), vocab_size=args.vocab, window=args.window)
    run_child("tracer", workers=1, symmetric=False, **kw)  # compile and cache the kernels first

    runs: dict[str, list[dict]] = {}
    plan = [("C reference (rows, 1 core)", lambda: run_c(binary, data, args.vocab, args.window)),
            ("tracer, 1 core, upper cells", lambda: run_child("tracer", workers=1, symmetric=False, **kw)),
            ("tracer, 2 cores, upper cells", lambda: run_child("tracer", workers=2, symmetric=False, **kw)),
            ("tracer, 1 core, symmetric matrix", lambda: run_child("tracer", workers=1, symmetric=True, **kw)),
            ("tracer, 2 cores, symmetric matrix", lambda: run_child("tracer", workers=2, symmetric=True, **kw))]
    for _ in range(args.repeats):  # interleaved, so slow spells of a noisy machine hit every row
        for name, fn in plan:
            runs.setdefault(name, []).append(fn())
    py = run_child("python", prefix=min(args.python_prefix, args.tokens), **kw)
    w2v = None if args.skip_word2vec else run_child("word2vec", workers=2, **kw)

    c_time = statistics.median(r["t_count"] for r in runs[plan[0][0]])
    print(f"\ncorpus: {args.tokens:,} tokens, vocabulary {args.vocab:,}, window {args.window}; "
          f"median of {args.repeats} interleaved runs (counting phase; peak memory of the whole process)\n")
    print(f"{'counter':38s} {'seconds':>8s} {'Mtokens/s':>10s} {'vs C':>6s} {'peak MB':>8s}   "
          f"{'again s':>8s} {'vs C':>6s}")
    for name, _ in plan:
        t = statistics.median(r["t_count"] for r in runs[name])
        mem = max(r["peak_rss_mb"] for r in runs[name])
        again = ""
        if "t_again" in runs[name][0]:
            ta = statistics.median(r["t_again"] for r in runs[name])
            again = f"   {ta:8.2f} {c_time / ta:6.2f}"
        print(f"{name:38s} {t:8.2f} {args.tokens / t / 1e6:10.2f} {c_time / t:6.2f} {mem:8.0f}{again}")
    py_rate = py["tokens"] / py["t_count"]
    print(f"{'pure Python (1M-token prefix)':38s} {py['t_count']:8.2f} {py_rate / 1e6:10.2f} "
          f"{(args.tokens / c_time) and py_rate / (args.tokens / c_time):6.3f} {py['peak_rss_mb']:8.0f}")
    if w2v:
        print(f"{'gensim word2vec, 1 epoch, 2 workers':38s} {w2v['t_count']:8.2f} "
              f"{args.tokens / w2v['t_count'] / 1e6:10.2f} {c_time / w2v['t_count']:6.3f} {w2v['peak_rss_mb']:8.0f}")
    print("\n'vs C' is the throughput ratio to the C reference (higher is faster); 'again' is a second count "
          "in the same process.")
    print("targets: 1 core >= 0.5, 2 cores > 1.0, peak memory < 2000 MB")
    check = check_counts(binary, data, args.vocab, args.window)
    print(f"\ncounts equal to the C reference on the compacted corpus: {check['same']} "
          f"(cells {check['tracer']['cells']:,}, pairs {check['tracer']['total']:,})")
    if not check["same"]:
        print(json.dumps(check, indent=1))
        sys.exit(1)


if __name__ == "__main__":
    main()
