#!/usr/bin/env python3
"""Linear (infinitesimal-jackknife) standard errors against retrained-bootstrap ones.

    .venv/bin/python tests/benchmarks/bench_linear_interval.py [--replicates 20] [--corpora 3]

For every test and slice: the se of the gap and of d from the linear pass
(:func:`tracer.analysis.linear_interval.linear_intervals`) and from ``--replicates``
document-bootstrap retrains (measure's: gap sd, delta method for d), and their ratio
(linear / bootstrap). Cases: the demo archive (window 5, min count 5, dim 100 as
configs/demo.toml) on the slices all, source=Gazette, source=Tribune, and ``--corpora``
corpora of the coverage simulation (tests/analysis/coverage_corpus.py).
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
ROOT = HERE.parents[1]


def fixed_subspace_se(attr, replicates, rng) -> tuple[float, float]:
    """se of the gap and d over document resamples with the SVD subspace held fixed: the probe rows of
    the PPMI recomputed exactly from the resampled counts (Attribution's exact tier) and projected on
    the full-data subspace. Between the linear pass (first order, fixed subspace) and retraining (all
    orders, subspace moving) it tells which of the two omissions makes the difference."""
    from tracer.analysis.measure import bootstrap_weights

    n_probe, n_docs = len(attr.probe_ids), attr.ws.n_documents
    sl = type("S", (), {"weights": attr.weights})
    gaps, ds = [], []
    for _ in range(replicates):
        m = np.divide(bootstrap_weights(sl, rng), attr.weights, out=np.zeros(n_docs), where=attr.weights > 0)
        left = np.where(attr.weights > 0, 1.0 - m, 0.0)      # the share of each document taken away
        removed = np.stack([left @ attr.document_probe_counts[k * n_docs:(k + 1) * n_docs] for k in range(n_probe)])
        e = attr._effects_without(removed[None], (left @ attr.document_row_sums)[None])[0]
        gaps.append(e.gap)
        ds.append(e.effect_size)
    return float(np.std(gaps, ddof=1)), float(np.std(ds, ddof=1))


def delete_one_se(attr) -> tuple[float, float]:
    """The jackknife se (``sqrt((n - 1) / n sum (T_(i) - mean T_(.))^2)``, Efron and Tibshirani 1993,
    ch. 11) of the gap and d from the exact re-rank without each document, subspace fixed."""
    members = np.flatnonzero(attr.weights > 0)
    effects = attr.exact_each(members)
    n = len(members)
    out = []
    for which in ("gap", "effect_size"):
        t = np.array([getattr(e, which) for e in effects])
        out.append(float(np.sqrt((n - 1) / n * np.sum((t - t.mean()) ** 2))))
    return out[0], out[1]


def compare(ws, tests, slices, counts, svd, replicates, seed=0, jackknife=False):
    """Rows (test, slice, linear gap se, bootstrap gap se, linear d se, bootstrap d se, fixed-subspace
    gap se, fixed-subspace d se)."""
    from tracer.analysis.influence import Attribution
    from tracer.analysis.linear_interval import linear_intervals
    from tracer.analysis.measure import MeasureSettings, measure
    from tracer.core.intervals import ratio_interval
    from tracer.provenance.counts import count_slice
    from tracer.provenance.models import embedding_from_counts
    from tracer.provenance.specs import normalized_tests

    # each slice's own words, the ones Attribution keeps
    tests = normalized_tests(tests, ws)
    res = measure(ws, tests, "ppmi-svd", slices, counts, svd,
                  MeasureSettings(bootstrap=replicates, seed=seed, per_slice_words=True))
    out = []
    for sl in slices:
        c = count_slice(ws, sl.weights, counts, slice_name=sl.name)
        emb = embedding_from_counts(ws, sl, c, svd)
        for name, test in tests.items():
            row = res.summary[(res.summary.test == name) & (res.summary.slice == sl.name)]
            if row.empty or not bool(row.measured.iloc[0]) or not test.two_target:
                continue
            r = row.iloc[0]
            reps = res.replicates[(res.replicates.test == name) & (res.replicates.slice == sl.name)]
            d_boot = ratio_interval(r.effect_size, r.gap, r.gap / r.effect_size, reps.gap, reps.score_sd).se
            attr = Attribution(ws, sl.weights, c, emb, test, alpha=svd.alpha, shift=svd.shift, eig_power=svd.eig_power)
            lin = linear_intervals(attr)
            fixed = fixed_subspace_se(attr, replicates, np.random.default_rng(seed))
            jack = delete_one_se(attr) if jackknife else (np.nan, np.nan)
            out.append((name, sl.name, lin.gap.se, float(r.gap_se), lin.d.se, d_boot, *fixed, *jack))
    return out


def main():
    from coverage_corpus import COUNTS, SVD, TEST, workspace

    from tracer.core.counting import CountSettings
    from tracer.core.ppmi_svd import PpmiSvdSettings
    from tracer.corpus.ingest import ingest
    from tracer.corpus.slices import slice_from_spec
    from tracer.corpus.workspace import Workspace
    from tracer.provenance.specs import load_tests

    ap = argparse.ArgumentParser()
    ap.add_argument("--replicates", type=int, default=20)
    ap.add_argument("--corpora", type=int, default=3)
    ap.add_argument("--no-demo", action="store_true")
    ap.add_argument("--jackknife", action="store_true", help="also the delete-one jackknife (one re-rank a document)")
    args = ap.parse_args()
    t0 = time.perf_counter()
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        if not args.no_demo:
            ingest(root / "demo", [ROOT / "corpora_demo" / "archive.jsonl.gz"])
            ws = Workspace(root / "demo")
            tests = load_tests(ROOT / "configs" / "demo_tests.toml")
            slices = [slice_from_spec(ws, s) for s in ("all", "source=Gazette", "source=Tribune")]
            rows += [("demo", *r) for r in compare(ws, tests, slices, CountSettings(window=5, min_count=5),
                                                   PpmiSvdSettings(dim=100), args.replicates,
                                                   jackknife=args.jackknife)]
        for k in range(args.corpora):
            ws = workspace(root / f"c{k}", k, 150)
            rows += [(f"sim{k}", *r) for r in compare(ws, {"planted": TEST}, [slice_from_spec(ws, "all")], COUNTS,
                                                      SVD, args.replicates, seed=k,
                                                      jackknife=args.jackknife)]
    print(f"{'case':6s} {'test':16s} {'slice':16s} {'gap lin':>9s} {'gap boot':>9s} {'ratio':>6s} "
          f"{'d lin':>7s} {'d boot':>7s} {'ratio':>6s} {'gap fix':>9s} {'d fix':>7s}")
    for case, name, sl, gl, gb, dl, db, gf, df, _, _ in rows:
        print(f"{case:6s} {name:16s} {sl:16s} {gl:9.5f} {gb:9.5f} {gl / gb:6.2f} {dl:7.4f} {db:7.4f} {dl / db:6.2f} "
              f"{gf:9.5f} {df:7.4f}")
    g = np.array([r[3] / r[4] for r in rows])
    d = np.array([r[5] / r[6] for r in rows])
    gf = np.array([r[7] / r[4] for r in rows])
    df = np.array([r[8] / r[6] for r in rows])
    print(f"fixed-subspace resample se / bootstrap se: gap median {np.median(gf):.2f} (range {gf.min():.2f}-"
          f"{gf.max():.2f}), d median {np.median(df):.2f} (range {df.min():.2f}-{df.max():.2f})")
    if args.jackknife:
        gj = np.array([r[9] / r[4] for r in rows])
        dj = np.array([r[10] / r[6] for r in rows])
        print(f"delete-one jackknife se / bootstrap se: gap median {np.median(gj):.2f} (range {gj.min():.2f}-"
              f"{gj.max():.2f}), d median {np.median(dj):.2f} (range {dj.min():.2f}-{dj.max():.2f})")
    print(f"se ratio linear/bootstrap over {len(rows)} cases: gap median {np.median(g):.2f} "
          f"(range {g.min():.2f}-{g.max():.2f}), d median {np.median(d):.2f} (range {d.min():.2f}-{d.max():.2f}); "
          f"{args.replicates} replicates (relative se of a bootstrap se about "
          f"{1 / np.sqrt(2 * (args.replicates - 1)):.0%}); {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
