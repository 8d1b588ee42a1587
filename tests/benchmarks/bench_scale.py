#!/usr/bin/env python3
"""Every user step at a realistic corpus size, timed side by side with its naive alternative.

    .venv/bin/python tests/benchmarks/bench_scale.py --tokens 20000000            # the normal case
    .venv/bin/python tests/benchmarks/bench_scale.py --tokens 2000000 --skip word2vec

Generates a news-like corpus (``gen_realistic_corpus.py``: invented words, five invented
outlets, seven decades, a planted test and a control), then runs each step as a user
would, one command in a fresh process, and prints wall time and peak memory (of that
process and its children) beside the targets of the scale work:

    ingest <= 30 s; one probe's PMI row <= 2 s; PPMI-SVD of the whole corpus <= 60 s;
    all 7 decade models <= 3 min; measure with intervals on 13 slices <= 10 min;
    word2vec one epoch (reported); trace with 5 verification retrains (reported)

Where a step has a naive alternative in the library, both are timed in the same run and
their ratio printed (one probe row: the counter over every pair versus the probe's
windows only; ``tracer pmi``'s table: every pair counted, the probe's windows, the cached
counts). ``--only NAME`` runs the ingest and the named steps or comparisons only, e.g.

    .venv/bin/python tests/benchmarks/bench_scale.py --tokens 2000000 --only pmi --repeats 5
    .venv/bin/python tests/benchmarks/bench_scale.py --tokens 2000000 --only ingest-jobs --repeats 3

(``ingest-jobs``: ingest with one and two worker processes, wall and CPU seconds; with
``--baseline DIR`` also the ``tracer`` package in DIR, side by side:

    git archive main tracer | tar -x -C /tmp/base
    .venv/bin/python tests/benchmarks/bench_scale.py --tokens 2000000 --only ingest-jobs --baseline /tmp/base
). A step that runs past ``--step-timeout`` is stopped and reported as such,
so the benchmark always finishes. Nothing here is a pass/fail test: read the ratios.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
PY = sys.executable
TRACER = str(Path(PY).with_name("tracer"))

# a child that times one command and reports its children's peak memory
_TIMER = """
import json, resource, subprocess, sys, time
t = time.perf_counter()
try:
    rc = subprocess.run(sys.argv[2:], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, timeout=float(sys.argv[1])).returncode
except subprocess.TimeoutExpired:
    rc = "timeout"
print(json.dumps({"seconds": time.perf_counter() - t, "rc": rc,
                  "peak_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024}))
"""

_PROBE_ROW = """
import sys, time, numpy as np
from tracer.corpus.workspace import Workspace
from tracer.core.counting import CountSettings
ws = Workspace(sys.argv[1]); word = sys.argv[3]
w = np.ones(ws.n_documents)
t = time.perf_counter()
if sys.argv[2] == "rows":
    from tracer.provenance.probe_rows import probe_rows
    probe_rows(ws, w, CountSettings(), [word])
else:
    from tracer.provenance.counts import count_slice
    count_slice(ws, w, CountSettings())
print(time.perf_counter() - t)
"""

# tracer pmi's table, one way per process: "windows" (the probe's windows, what the command does
# on a cache miss), "full" (every pair counted, then the marginals: what it did before) or "cached"
# (the slices' counts read from the cache, filled untimed first)
_PMI_TABLE = """
import sys, time, numpy as np, tempfile
from tracer.analysis.pmi_table import pmi_table
from tracer.core.counting import CountSettings
from tracer.core.pmi import Marginals
from tracer.corpus.slices import resolve_slices
from tracer.provenance.cache import open_workspace
from tracer.provenance.counts import count_slice
mode, word, ctx = sys.argv[2], sys.argv[3], sys.argv[4].split(",")
ws = open_workspace(sys.argv[1], cache=mode == "cached")
if mode == "cached":
    ws.cache.folder = __import__("pathlib").Path(tempfile.mkdtemp())
slices = resolve_slices(ws, by=sys.argv[5:], picks=["all"])
if mode == "cached":
    for sl in slices:
        count_slice(ws, sl.weights, CountSettings(), slice_name=sl.name)
t = time.perf_counter()
if mode == "full":
    for sl in slices:
        c = count_slice(ws, sl.weights, CountSettings(), slice_name=sl.name)
        m = Marginals.of(c.matrix, 0.75)
        i = c.vocab.index.get(word)
        cells = [c.matrix[i, c.vocab.index[x]] for x in ctx if i is not None and x in c.vocab.index]
else:
    pmi_table(ws, word, ctx, slices, CountSettings())
import resource
print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, time.perf_counter() - t)
"""


# one ingest in this process: wall time, CPU of the ingesting process and of its workers, and
# what it stored (corpus hash, the token file's and the documents table's digests) for the identity check
_INGEST = """
import hashlib, json, resource, sqlite3, sys, time
from pathlib import Path
from tracer.corpus.ingest import ingest
cpu = lambda who: (lambda r: r.ru_utime + r.ru_stime)(resource.getrusage(who))
before = cpu(resource.RUSAGE_SELF)  # the imports above are not the ingest's
t = time.perf_counter()
ingest(sys.argv[1], [sys.argv[2]], jobs=int(sys.argv[3]))
wall = time.perf_counter() - t
me, kids = cpu(resource.RUSAGE_SELF) - before, cpu(resource.RUSAGE_CHILDREN)
store = Path(sys.argv[1]) / Path(sys.argv[1], "CURRENT").read_text().strip()
with sqlite3.connect(store / "corpus.sqlite") as con:
    rows = hashlib.sha256(repr(con.execute("SELECT * FROM documents ORDER BY doc_index").fetchall()).encode())
stored = [json.loads((store / "manifest.json").read_text())["corpus_hash"], rows.hexdigest()] + [
    hashlib.sha256((store / f).read_bytes()).hexdigest() for f in ("tokens.u32", "vocab.tsv", "doc_offsets.i64")]
print(hashlib.sha256(" ".join(stored).encode()).hexdigest()[:16], wall, me, kids)
"""


def timed(cmd: list[str], timeout: float) -> dict:
    out = subprocess.run([PY, "-c", _TIMER, str(timeout), *cmd], capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--tokens", type=int, default=20_000_000)
    ap.add_argument("--cache", type=Path, default=HERE.parents[1] / "bench-data")
    ap.add_argument("--step-timeout", type=float, default=1800.0)
    ap.add_argument("--skip", action="append", default=[], help="a step to leave out (repeatable)")
    ap.add_argument("--only", action="append", default=[], help="run only the steps named so (repeatable; "
                    "ingest always runs)")
    ap.add_argument("--repeats", type=int, default=3, help="rounds of the side-by-side comparisons")
    ap.add_argument("--baseline", type=Path, help="ingest-jobs: a folder holding another version's tracer "
                    "package, timed beside this one")
    args = ap.parse_args()

    data = args.cache / f"realistic-{args.tokens}"
    if not (data / "corpus.jsonl.gz").is_file():
        t = time.perf_counter()
        subprocess.run([PY, str(HERE / "gen_realistic_corpus.py"), "--outdir", str(data), "--tokens", str(args.tokens)],
                       check=True, stdout=subprocess.DEVNULL)
        print(f"generated {args.tokens:,} tokens in {time.perf_counter() - t:.0f} s")
    meta = json.loads((data / "meta.json").read_text(encoding="utf-8"))
    tests = data / "tests.toml"
    probe = "binmeth" if "binmeth" in tests.read_text(encoding="utf-8") else None
    ws = data / f"ws-{os.getpid()}"
    steps = [
        ("ingest", [TRACER, "ingest", str(data / "corpus.jsonl.gz"), "-w", str(ws)], 30),
        ("pmi (one probe)", [TRACER, "pmi", "-w", str(ws), probe or "the", "--with", "bresar"], 2),
        ("train ppmi-svd (all)", [TRACER, "train", "-w", str(ws), "--model", "ppmi-svd"], 60),
        ("train ppmi-svd by decade", [TRACER, "train", "-w", str(ws), "--model", "ppmi-svd", "--by", "time:10y"], 180),
        ("word2vec, 1 epoch", [TRACER, "train", "-w", str(ws), "--model", "word2vec", "--epochs", "1"], None),
        ("measure, 13 slices", [TRACER, "measure", "-w", str(ws), "--tests", str(tests), "--slice", "all",
                                "--by", "time:10y", "--by", "source"], 600),
        ("trace --verify 5", [TRACER, "trace", "-w", str(ws), "--tests", str(tests), "--test", "gazette_planted",
                              "--slice", "all", "--verify", "5"], None),
    ]
    print(f"corpus: {meta['tokens']:,} tokens, {meta['documents']:,} documents, {meta['vocab']:,} Zipf types; "
          f"2 cores; each step one command in a fresh process\n")
    print(f"{'step':28} {'seconds':>9} {'peak MB':>9} {'target s':>9}  note")
    for name, cmd, target in steps:
        if any(s in name for s in args.skip) or (args.only and name != "ingest"
                                                  and not any(name.startswith(s) for s in args.only)):
            continue
        r = timed(cmd, args.step_timeout)
        note = "" if r["rc"] == 0 else f"exit {r['rc']}"
        print(f"{name:28} {r['seconds']:9.1f} {r['peak_mb']:9.0f} {target if target else '-':>9}  {note}", flush=True)
        if name == "ingest" and r["rc"] != 0:
            sys.exit("ingest failed; nothing else can run")
    if "ingest-jobs" in args.only:
        compare_ingest_jobs(data, meta["tokens"], args.repeats, args.baseline)
    if probe and "pmi" not in args.skip and (not args.only or "pmi" in args.only):
        compare_pmi_tables(ws, probe, args.repeats)
        full = float(subprocess.run([PY, "-c", _PROBE_ROW, str(ws), "full", probe], capture_output=True,
                                    text=True, check=True).stdout.split()[-1])
        rows = float(subprocess.run([PY, "-c", _PROBE_ROW, str(ws), "rows", probe], capture_output=True,
                                    text=True, check=True).stdout.split()[-1])
        print(f"\none probe's row, library call after loading: counting every pair {full:.2f} s, "
              f"the probe's windows only {rows:.2f} s ({full / rows:.1f}x)")


def compare_ingest_jobs(data: Path, tokens: int, repeats: int, baseline: Path | None = None) -> None:
    """ingest with jobs 1 and 2, interleaved, each into a new workspace in a fresh process. Besides
    the wall time, the CPU seconds of the ingesting process (its part cannot be shared out) and of
    its workers: on a machine with a core free per worker the wall time nears the larger of the
    ingesting process's CPU and the workers' CPU divided by the jobs. With ``baseline`` (the
    ``tracer`` package of another checkout, e.g. ``git archive main tracer | tar -x -C DIR``) the
    same ingests run on that code too, interleaved with these, and every stored corpus (corpus hash,
    documents table, tokens, vocabulary, offsets) must be identical across versions and jobs."""
    versions = {"now": None} if baseline is None else {"before": baseline, "now": None}
    runs = {(v, j): [] for v in versions for j in (1, 2)}
    digests = set()
    for r in range(repeats):
        for v, jobs in runs:
            ws = data / f"ws-jobs-{os.getpid()}-{r}-{v}-{jobs}"
            env = dict(os.environ)
            if versions[v] is not None:
                env["PYTHONPATH"] = str(versions[v])
            # run outside any checkout, so that the package comes from PYTHONPATH or the installed one
            out = subprocess.run([PY, "-c", _INGEST, str(ws), str(data / "corpus.jsonl.gz"), str(jobs)],
                                 capture_output=True, text=True, check=True, env=env, cwd=data)
            subprocess.run(["rm", "-rf", str(ws)], check=True)
            digest, *values = out.stdout.split()[-4:]
            digests.add(digest)
            runs[v, jobs].append(tuple(map(float, values)))
    med = {}
    for (v, jobs), x in runs.items():
        wall, me, kids = med[v, jobs] = tuple(sorted(y[k] for y in x)[len(x) // 2] for k in range(3))
        print(f"ingest {v:6} --jobs {jobs}: {wall:5.2f} s wall ({tokens / wall / 1e6:.2f}M tokens/s), CPU s: "
              f"ingesting process {me:.2f} (imports excluded), workers {kids:.2f} (medians of {repeats}; walls "
              f"{' '.join(f'{y[0]:.2f}' for y in x)})")
    for v in versions:
        print(f"ingest {v}: wall jobs 1 / jobs 2 = {med[v, 1][0] / med[v, 2][0]:.2f}x")
    if baseline is not None:
        for jobs in (1, 2):
            print(f"ingest --jobs {jobs}: wall before / now = {med['before', jobs][0] / med['now', jobs][0]:.2f}x, "
                  f"ingesting process CPU before / now = {med['before', jobs][1] / med['now', jobs][1]:.2f}x")
    print(f"stored corpora identical across {'versions and ' if baseline else ''}jobs: {len(digests) == 1} "
          f"(load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores)")


def compare_pmi_tables(ws: Path, probe: str, repeats: int) -> None:
    """tracer pmi's table three ways, interleaved, each in a fresh process (loading not timed)."""
    for by in ([], ["time:10y"]):
        times = {m: [] for m in ("full", "windows", "cached")}
        peak = {}
        for _ in range(repeats):
            for mode in times:
                out = subprocess.run([PY, "-c", _PMI_TABLE, str(ws), mode, probe, "bresar,kimklal,kazai", *by],
                                     capture_output=True, text=True, check=True)
                mb, seconds = map(float, out.stdout.split()[-2:])
                times[mode].append(seconds)
                peak[mode] = max(peak.get(mode, 0), mb)
        med = {m: sorted(v)[len(v) // 2] for m, v in times.items()}
        print(f"pmi table, slices all{' + ' + by[0] if by else ''}: counting every pair {med['full']:.2f} s, "
              f"probe windows {med['windows']:.2f} s ({med['full'] / med['windows']:.1f}x), "
              f"cached counts {med['cached']:.2f} s ({med['full'] / med['cached']:.1f}x); "
              f"peak MB full {peak['full']:.0f}, windows {peak['windows']:.0f} (cached: counted first, untimed); "
              f"medians of {repeats}: " + ", ".join(f"{m} {' '.join(f'{x:.2f}' for x in v)}" for m, v in times.items()))


if __name__ == "__main__":
    main()
