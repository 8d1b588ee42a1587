#!/usr/bin/env python3
"""Trace benchmark: attribution for one test versus leave-one-source-out retraining, side by side.

    .venv/bin/python tests/benchmarks/bench_trace.py [--test gazette_outlet] [--slice all] [--repeats 3]
    .venv/bin/python tests/benchmarks/bench_trace.py --zipf-tokens 2000000 --max-vocab 20000 --repeats 1

On the demo archive: (a) scoring every document for one test (the linear influence of
tier 2: one pass over the probe words' positions, one over the tokens), (b) the whole
``trace`` (sources exact, 200 documents re-ranked exactly, passages, first-order table),
(c) retraining PPMI-SVD without each source in turn and re-measuring. All start from the
slice's counts and model, which every approach needs (trace reads them from the
workspace cache, as it does inside ``tracer run``). Scoring is timed once cold (the first
call of a round, after the last round's retrains; the headline figure) and warm (three
calls right after it, as when ``tracer run`` traces several tests of one slice): a step
of a few milliseconds moves with the state of the caches. The "per round" column gives
the lowest and highest ratio of single rounds: this machine's timings move by 2x. Also prints
how well the source estimates agree with the retrained changes, and what scoring every
document by retraining would cost at the measured rate (an extrapolation, marked as one).

The demo's vocabulary (about 2,800 words) is small beside a real archive's, so a retrain
there costs about a second. ``--zipf-tokens N`` repeats the comparison on a workspace made from the
first N tokens of the Zipf corpus of reference/gen_zipf_corpus.py (five invented sources, documents dealt
round-robin; word sets of mid-frequency words), where the SVD dominates a retrain as it
does on real corpora. The agreement figure means little there (nothing is planted).
``--corpus FILE --tests FILE --test NAME`` runs it on another corpus, such as the news-like one
of gen_realistic_corpus.py, whose planted test gives the agreement figure a signal to follow:

    .venv/bin/python tests/benchmarks/bench_trace.py --corpus bench-data/realistic-2000000/corpus.jsonl.gz \
        --tests bench-data/realistic-2000000/tests.toml --test gazette_planted --repeats 1
"""

from __future__ import annotations

import argparse
import gc
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]


def main():
    from scipy import stats

    from tracer.core.association import weat
    from tracer.analysis.influence import Attribution
    from tracer.core.counting import CountSettings
    from tracer.provenance.counts import count_slice
    from tracer.corpus.ingest import ingest
    from tracer.corpus.slices import Slice, slice_from_spec
    from tracer.corpus.workspace import Workspace
    from tracer.provenance.cache import open_workspace
    from tracer.core.ppmi_svd import PpmiSvdSettings
    from tracer.provenance.models import embedding_from_counts, train_embedding
    from tracer.provenance.specs import load_tests
    from tracer.analysis.trace import TraceSettings, trace

    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--test", default="gazette_outlet")
    ap.add_argument("--slice", default="all")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--zipf-tokens", type=int, default=0)
    ap.add_argument("--max-vocab", type=int, default=None)
    ap.add_argument("--dim", type=int, default=PpmiSvdSettings().dim)
    ap.add_argument("--corpus", type=Path, help="another corpus (e.g. gen_realistic_corpus.py's corpus.jsonl.gz), "
                    "with --tests and --test")
    ap.add_argument("--tests", type=Path, help="the tests file of --corpus")
    args = ap.parse_args()
    if (args.corpus is None) != (args.tests is None):
        ap.error("--corpus and --tests go together")
    with tempfile.TemporaryDirectory() as tmp:
        if args.zipf_tokens:
            from tracer.core.association import AssociationTest
            corpus = zipf_corpus(Path(tmp), args.zipf_tokens)
            words = [f"w{i}" for i in range(100, 132)]
            test = AssociationTest("zipf", tuple(words[:6]), tuple(words[6:12]), tuple(words[12:22]),
                                   tuple(words[22:32]), ())
        elif args.corpus:
            corpus = args.corpus
            test = load_tests(args.tests)[args.test]
        else:
            corpus = ROOT / "corpora_demo" / "archive.jsonl.gz"
            test = load_tests(ROOT / "configs" / "demo_tests.toml")[args.test]
        t_ingest = time.perf_counter()
        ingest(Path(tmp) / "ws", [corpus])
        t_ingest = time.perf_counter() - t_ingest
        ws = Workspace(Path(tmp) / "ws")
        # trace reads the slice's counts and model from the workspace cache, as it does inside
        # ``tracer run``; the retrains use a workspace without the cache, so each one really retrains
        cached = open_workspace(Path(tmp) / "ws", cache=True)
        sl = slice_from_spec(ws, args.slice)
        settings = PpmiSvdSettings(dim=args.dim)
        counts = CountSettings(max_vocab=args.max_vocab)
        c = count_slice(cached, sl.weights, counts)
        emb = embedding_from_counts(cached, sl, c, settings)
        src = ws.documents["source"].to_numpy()
        sources = sorted(set(src[sl.weights > 0]))
        times = {"score": [], "warm": [], "trace": [], "retrain": []}

        def score_once():
            attr = Attribution(ws, sl.weights, c, emb, test, alpha=settings.alpha, shift=settings.shift,
                               eig_power=settings.eig_power)
            attr.linear("gap")

        # round 0 is a warm-up (compiled kernels loaded, caches filled) and is not timed
        for rep in range(args.repeats + 1):
            gc.collect()  # a collection left over from the last round would land in whichever step runs next
            t0 = time.perf_counter()
            score_once()
            t1 = time.perf_counter()
            warm = []
            for _ in range(3):  # right after the cold call: caches hold the tokens and the code
                tw = time.perf_counter()
                score_once()
                warm.append(time.perf_counter() - tw)
            t1w = time.perf_counter()
            result = trace(cached, test, "ppmi-svd", sl, counts, settings, TraceSettings())
            t2 = time.perf_counter()
            actual = {}
            for s in sources:
                w = sl.weights * (src != s)
                e = train_embedding(ws, Slice("x", w, int((w > 0).sum()), 0), "ppmi-svd", counts, settings, save=False)
                actual[s] = weat(e.unit_vectors, e.index, test, with_p=False).gap
            t3 = time.perf_counter()
            if rep > 0:
                times["score"].append(t1 - t0)
                times["warm"].append(statistics.median(warm))
                times["trace"].append(t2 - t1w)
                times["retrain"].append(t3 - t2)
    base = weat(emb.unit_vectors, emb.index, test, with_p=False).gap
    pred = result.sources.set_index("source")["contribution_gap"]
    p = np.array([pred[s] for s in sources])
    a = np.array([actual[s] - base for s in sources])
    med = {k: statistics.median(v) for k, v in times.items()}
    n_docs = int((sl.weights > 0).sum())
    what = (f"Zipf corpus, {args.zipf_tokens:,} tokens" if args.zipf_tokens
            else f"{args.corpus}, test {args.test}" if args.corpus else f"demo archive, test {args.test}")
    print(f"\n{what}, slice {args.slice}: {n_docs} documents, {len(sources)} sources, {len(c.vocab)} words, "
          f"dim {args.dim}; "
          f"median of {args.repeats} rounds after one warm-up round (ingest took {t_ingest:.1f} s)\n")
    print(f"{'step':52s} {'seconds':>8s} {'retrain / step':>15s} {'per round':>16s}")
    for key, label in (("score", "score every document (tier 2)"),
                       ("warm", "  the same, warm (median of 3 calls right after)"),
                       ("trace", "whole trace (tiers 2 and 3, passages, first order)"),
                       ("retrain", f"retrain without each source ({len(sources)} models)")):
        per_round = [r / x for r, x in zip(times["retrain"], times[key])]
        print(f"{label:52s} {med[key]:8.3f} {med['retrain'] / med[key]:15.1f} "
              f"{min(per_round):7.1f} - {max(per_round):6.1f}")
    per_model = med["retrain"] / len(sources)
    print(f"\nextrapolation, not measured: retraining without each of the {n_docs} documents would take about "
          f"{per_model * n_docs:.0f} s, {per_model * n_docs / med['score']:.0f}x the scoring step")
    print("target: scoring every document >= 100x faster than retraining without each source, with r >= 0.9")
    print(f"sources, estimated vs retrained change of the gap: Pearson r {stats.pearsonr(p, a).statistic:.3f}, "
          f"sign agreement {np.mean(np.sign(p) == np.sign(a)):.2f}")
    share = result.sources.set_index("source")["token_share"]
    width = max(12, *map(len, sources))
    print(f"\n{'source':{width}s} {'tokens':>7s} {'estimated':>10s} {'retrained':>10s}   (the slice's gap {base:.3f})")
    for s, pi, ai in zip(sources, p, a):
        print(f"{s:{width}s} {share[s]:7.1%} {pi:+10.3f} {ai:+10.3f}")


def zipf_corpus(folder: Path, n_tokens: int) -> Path:
    """The first ``n_tokens`` of the Zipf corpus of reference/gen_zipf_corpus.py as JSONL, documents dealt to five sources."""
    import json
    import subprocess
    import sys
    data = ROOT / "bench-data" / "zipf-20000000"
    if not (data / "tokens.npy").is_file():
        subprocess.run([sys.executable, str(Path(__file__).resolve().parent / "reference" / "gen_zipf_corpus.py"), "--outdir",
                        str(data)], check=True, stdout=subprocess.DEVNULL)
    tokens = np.load(data / "tokens.npy", mmap_mode="r")
    offsets = np.load(data / "doc_offsets.npy")
    offsets = np.append(offsets[offsets < n_tokens], n_tokens)
    path = folder / "zipf.jsonl"
    with open(path, "w", encoding="utf-8") as f:
        for d, (a, b) in enumerate(zip(offsets[:-1], offsets[1:])):
            f.write(json.dumps({"id": f"z{d}", "source": f"source-{d % 5}",
                                "text": " ".join(f"w{i}" for i in tokens[a:b])}) + "\n")
    return path


if __name__ == "__main__":
    main()
