"""``tracer run``: one experiment file, from corpus to stored results and an HTML report.

Each run is stored in ``WORKSPACE/runs/RUN_ID/``:

    experiment.toml     the experiment file as run
    run.json            run id, experiment and corpus hashes, versions, seeds, timings, the command
    tables/NAME.csv     every result table (and NAME.json)
    report.html         the report (built from the stored tables only)
    figures/NN-*.png    the report's figures as files

A run of an unchanged experiment file on an unchanged corpus is not recomputed: the
stored run is returned (``reused`` says so).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import os
import shutil
import time
from pathlib import Path
from typing import Callable

import pandas as pd

from tracer.provenance.experiment import Experiment, experiment_summary
from tracer.corpus.ingest import ingest
from tracer.versions import package_versions
from tracer.corpus.slices import resolve_slices, slice_from_spec, slices_by
from tracer.corpus.workspace import Workspace
from tracer.provenance.cache import open_workspace
from tracer.files import write_atomic
from tracer.errors import WorkspaceError
from tracer.analysis.measure import MeasureSettings, measure
from tracer.app.output import plain_values, to_records
from tracer.provenance.specs import load_tests, select_tests

RUNS_DIR = "runs"


@dataclasses.dataclass(frozen=True)
class RunResult:
    run_id: str
    folder: Path
    reused: bool


def run_experiment(exp: Experiment, *, progress: bool = False, say: Callable[[str], None] = lambda s: None,
                   command: str = "") -> RunResult:
    """Ingest (if needed), measure, trace, drift; store every table; render the report."""
    from tracer.analysis.drift import drift_tests, word_drift
    from tracer.app.report.html import save_figures, write_report
    from tracer.analysis.trace import TraceSettings, trace

    say(f"ingesting into {exp.workspace}")
    ingest(exp.workspace, exp.inputs, fields=exp.fields, tokenizer=exp.tokenizer, progress=progress)
    ws = open_workspace(exp.workspace, cache=True)  # counts and models of unchanged slices are reused
    runs = ws.path / RUNS_DIR
    for done in sorted(runs.glob("*/run.json")) if runs.is_dir() else []:
        info = json.loads(done.read_text(encoding="utf-8"))
        if info.get("experiment_hash") == exp.hash and info.get("corpus_hash") == ws.corpus_hash:
            say(f"nothing changed since run {info['run_id']}; reusing it")
            return RunResult(info["run_id"], done.parent, True)
    started = time.perf_counter()
    run_id = dt.datetime.now(dt.timezone.utc).strftime("%Y%m%dT%H%M%S") + "-" + exp.hash[:8]
    tmp = runs / f".tmp-{run_id}"
    if tmp.exists():
        shutil.rmtree(tmp)
    (tmp / "tables").mkdir(parents=True)
    tables: dict[str, pd.DataFrame] = {}
    timings: dict[str, float] = {}
    try:
        tests = load_tests(exp.tests_file)
        tables["sources"] = ws.sources_table()
        tables["corpus_periods"] = _corpus_periods(ws, exp.drift_by)
        slices = resolve_slices(ws, exp.measure_by, exp.measure_slices)
        summaries, words = [], []
        for model in exp.models:
            t0 = time.perf_counter()
            say(f"measuring {len(tests)} tests with {model} on {len(slices)} slices")
            ms = MeasureSettings(bootstrap=exp.bootstrap if model == "ppmi-svd" else 0,
                                 seeds=exp.word2vec_seeds if model == "word2vec" else 1, seed=exp.seed,
                                 min_words=exp.min_words, alpha=exp.ppmi_svd.alpha)
            settings = exp.ppmi_svd if model == "ppmi-svd" else exp.word2vec
            r = measure(ws, tests, model, slices, exp.counts, settings, ms, progress=progress)
            summaries.append(r.summary)
            words.append(r.words)
            timings[f"measure {model}"] = time.perf_counter() - t0
        tables["measure"] = pd.concat(summaries, ignore_index=True)
        tables["measure_words"] = pd.concat(words, ignore_index=True)
        for name, test in select_tests(tests, list(exp.trace_tests), exp.tests_file).items() if exp.trace_tests else []:
            t0 = time.perf_counter()
            say(f"tracing {name} in slice {exp.trace_slice} (verifying {exp.trace_verify})")
            tr = trace(ws, test, "ppmi-svd", slice_from_spec(ws, exp.trace_slice), exp.counts, exp.ppmi_svd,
                       TraceSettings(verify=exp.trace_verify, top=exp.trace_top, rank_by=exp.trace_rank_by,
                                     seed=exp.seed), progress=progress)
            for part in ("sources", "documents", "passages", "first_order"):
                tables[f"trace_{name}_{part}"] = getattr(tr, part)
            if tr.verification is not None:
                v = tr.verification
                tables[f"trace_{name}_verification"] = v.rows.assign(
                    pearson_r=v.pearson_r, spearman_rho=v.spearman_rho, sign_agreement=v.sign_agreement,
                    pearson_r_without_largest=v.pearson_r_without_largest, confirmed=v.confirmed,
                    headline=v.headline())
            timings[f"trace {name}"] = time.perf_counter() - t0
        if exp.drift_tests:
            chosen = select_tests(tests, list(exp.drift_tests), exp.tests_file)
            t0 = time.perf_counter()
            say(f"drift of {', '.join(chosen)} by {exp.drift_by}")
            drifts = drift_tests(ws, chosen, "ppmi-svd", slices_by(ws, exp.drift_by), exp.counts, exp.ppmi_svd,
                                 MeasureSettings(bootstrap=exp.drift_bootstrap, seed=exp.seed, min_words=exp.min_words,
                                                 alpha=exp.ppmi_svd.alpha), progress=progress)
            for name, d in drifts.items():
                tables[f"drift_{name}_periods"] = d.periods
                tables[f"drift_{name}_trend"] = pd.DataFrame([d.trend])
                tables[f"drift_{name}_changes"] = d.changes
                tables[f"drift_{name}_sources"] = d.source_parts
            timings["drift"] = time.perf_counter() - t0
        if exp.drift_words:
            change, near, _ = word_drift(ws, list(exp.drift_words), slices_by(ws, exp.drift_by), exp.counts,
                                         exp.ppmi_svd)
            tables["word_change"], tables["word_neighbours"] = change, near
        for name, df in tables.items():
            df.to_csv(tmp / "tables" / f"{name}.csv", index=False)
            (tmp / "tables" / f"{name}.json").write_text(json.dumps(to_records(df), ensure_ascii=False, indent=1),
                                                       encoding="utf-8")
        shutil.copyfile(exp.path, tmp / "experiment.toml")
        info = {"run_id": run_id, "experiment_hash": exp.hash, "corpus_hash": ws.corpus_hash,
                "experiment": experiment_summary(exp), "manifest": ws.manifest, "versions": package_versions(),
                "seeds": {"measure": exp.seed, "ppmi_svd": exp.ppmi_svd.seed, "word2vec": exp.word2vec.seed},
                "command": command or f"tracer run {exp.path}", "timings_s": timings,
                "cache": {"hits": ws.cache.hits, "misses": ws.cache.misses},
                "seconds": time.perf_counter() - started,
                "finished_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")}
        write_atomic(tmp / "run.json", json.dumps(plain_values(info), indent=1, ensure_ascii=False))
        report = write_report(tmp, tmp / "report.html")
        save_figures(report.read_text(encoding="utf-8"), tmp / "figures")
        os.replace(tmp, runs / run_id)  # the run appears whole or not at all
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return RunResult(run_id, runs / run_id, False)


def _corpus_periods(ws, by: str) -> pd.DataFrame:
    """Tokens per source and period, for the corpus chart."""
    rows = []
    try:
        periods = slices_by(ws, by)
    except Exception:  # a corpus without times: one period
        periods = [slice_from_spec(ws, "all")]
    src = ws.documents["source"].to_numpy()
    n_tok = ws.documents["n_tokens"].to_numpy()
    for p in periods:
        for s in sorted(set(src)):
            rows.append({"period": p.name, "source": s, "tokens": int(n_tok[(p.weights > 0) & (src == s)].sum())})
    return pd.DataFrame(rows)


def find_run(workspace: str | Path, run: str = "latest") -> Path:
    """A stored run's folder: its id, or "latest"."""
    runs = Path(workspace) / RUNS_DIR
    done = sorted(p.parent for p in runs.glob("*/run.json")) if runs.is_dir() else []
    if not done:
        raise WorkspaceError(f"no run stored in {workspace}; run  tracer run EXPERIMENT.toml  first")
    if run == "latest":
        return max(done, key=lambda p: json.loads((p / "run.json").read_text(encoding="utf-8"))["finished_at"])
    for p in done:
        if p.name == run:
            return p
    raise WorkspaceError(f"no run {run!r} in {workspace}; the runs are {', '.join(p.name for p in done)}")
