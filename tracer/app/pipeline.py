"""``tracer run``: one experiment file, from corpus to stored results and an HTML report.

Each run is stored in ``WORKSPACE/runs/RUN_ID/`` (see :mod:`tracer.provenance.runs`):

    experiment.toml     the experiment file as run
    run.json            run id, run key, status, parts not measured, hashes, versions, seeds, timings, the command
    tables/NAME.csv     every result table (and NAME.json); ``not_measured`` lists what failed and why
    report.html         the report (built from the stored tables only)
    figures/NN-*.png    the report's figures as files

Words, tests, slices and periods are checked before the heavy work, so a typing
mistake stops the run at once with one error. A part that cannot be measured on
the data (a slice too small, a period without the words) fails alone: its reason
goes into the tables and run.json, and the run is stored with status ``partial``.
A run with the same key (experiment, tests file, inputs, corpus, settings,
versions) that is complete is not recomputed: the stored run is returned.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import shutil
import time
from pathlib import Path
from typing import Callable

import pandas as pd

from tracer.analysis.measure import MeasureSettings, SUMMARY_COLUMNS, common_words, measure
from tracer.app.output import csv_text, plain_values, to_records
from tracer.core.association import AssociationTest
from tracer.corpus.ingest import ingest
from tracer.corpus.lock import workspace_lock
from tracer.corpus.slices import Slice, resolve_slices, slice_from_spec, slices_by
from tracer.errors import InputError, SliceError, TracerError
from tracer.provenance.cache import open_workspace
from tracer.provenance.experiment import Experiment, experiment_summary
from tracer.provenance.runs import (RUNS_DIR, RunFolder, RunResult, checkpoint, clean_abandoned, file_sha256,
                                    find_run, reusable_run, run_key, table_stem)
from tracer.provenance.specs import load_tests, normalized_tests, select_tests
from tracer.files import write_atomic
from tracer.versions import package_versions

__all__ = ["RUNS_DIR", "RunResult", "run_experiment", "find_run", "check_experiment"]

# What measuring a part can raise on data it cannot measure (a slice without enough words, a
# period too small, a numeric routine that does not converge). Anything else is a bug and stops the run.
PART_ERRORS = (TracerError, ValueError, LookupError, ArithmeticError, RuntimeError)


@dataclasses.dataclass(frozen=True)
class RunPlan:
    """What a run will do, checked before any heavy work."""

    tests: dict[str, AssociationTest]
    slices: list[Slice]
    trace_tests: dict[str, AssociationTest]
    trace_slice: Slice | None
    drift_tests: dict[str, AssociationTest]
    periods: list[Slice]


class _Parts:
    """Tables of a run and the parts that could not be measured, with their reasons."""

    def __init__(self, say: Callable[[str], None]):
        self.say = say
        self.tables: dict[str, pd.DataFrame] = {}
        self.not_measured: list[dict] = []
        self.timings: dict[str, float] = {}

    def attempt(self, part: str, name: str, fn: Callable, errors: tuple = PART_ERRORS):
        """``fn()``, or None with the failure recorded when it raises one of ``errors``."""
        t0 = time.perf_counter()
        try:
            return fn()
        except errors as e:
            reason = f"{type(e).__name__}: {e}"
            self.not_measured.append({"part": part, "name": name, "reason": reason})
            self.say(f"not measured: {part} {name}: {reason}")
            return None
        finally:
            self.timings[f"{part} {name}"] = time.perf_counter() - t0


def check_experiment(exp: Experiment, ws) -> RunPlan:
    """Check words, tests, slices and periods of an experiment on a workspace; one clear error if wrong."""
    tests = load_tests(exp.tests_file)
    trace_tests = select_tests(tests, list(exp.trace_tests), exp.tests_file) if exp.trace_tests else {}
    drift_tests = select_tests(tests, list(exp.drift_tests), exp.tests_file) if exp.drift_tests else {}
    for name, test in drift_tests.items():
        if not test.two_target:
            raise InputError(f"{exp.path}: drift.tests lists {name!r}, a one-target test; drift takes two-target tests")
    slices = resolve_slices(ws, exp.measure_by, exp.measure_slices)
    trace_slice = slice_from_spec(ws, exp.trace_slice) if trace_tests else None
    periods: list[Slice] = []
    if drift_tests or exp.drift_words:
        try:
            periods = slices_by(ws, exp.drift_by)
        except SliceError as e:
            raise InputError(f"{exp.path}: drift.by: {e}") from None
        if len(periods) < 2:
            raise InputError(f"{exp.path}: drift.by = {exp.drift_by!r} gives {len(periods)} period; drift needs "
                             "two or more (a shorter period, e.g. time:5y)")
    counts = ws.vocab.counts
    index = ws.vocab.index
    rare = [w for w in exp.drift_words if w not in index or counts[index[w]] < exp.counts.min_count]
    if rare:
        raise InputError(f"{exp.path}: drift.words: {', '.join(map(repr, rare))} occur fewer than min_count = "
                         f"{exp.counts.min_count} times in the whole corpus, so in no period; remove them")
    return RunPlan(tests, slices, trace_tests, trace_slice, drift_tests, periods)


def _key(exp: Experiment, input_hashes: list[str], ws) -> tuple[str, dict]:
    files = {"tests": file_sha256(exp.tests_file), **{f"input {i}": h for i, h in enumerate(input_hashes)}}
    settings = {k: v for k, v in experiment_summary(exp).items() if k != "path"}
    return run_key(exp.text, files, ws.corpus_hash, settings, package_versions()), files


def run_experiment(exp: Experiment, *, progress: bool = False, say: Callable[[str], None] = lambda s: None,
                   command: str = "") -> RunResult:
    """Ingest (if needed), check, measure, trace, drift; store every table; render the report.

    Holds the workspace's write lock throughout, so a second writer waits.
    """
    with workspace_lock(exp.workspace, command=command or f"run {exp.path}", say=say):
        return _run_locked(exp, progress=progress, say=say, command=command)


def _run_locked(exp: Experiment, *, progress: bool, say: Callable[[str], None], command: str) -> RunResult:
    say(f"ingesting into {exp.workspace}")
    summary = ingest(exp.workspace, exp.inputs, fields=exp.fields, tokenizer=exp.tokenizer, progress=progress)
    # counts and models of unchanged slices are reused
    ws = open_workspace(exp.workspace, cache=True, scheduler=exp.scheduler)
    plan = check_experiment(exp, ws)
    key, files = _key(exp, [i.sha256 for i in summary.inputs], ws)
    runs = ws.path / RUNS_DIR
    for gone in clean_abandoned(runs):
        say(f"removed {gone.name}, left by a run that did not finish")
    done = reusable_run(runs, key)
    if done is not None:
        say(f"nothing changed since run {done.run_id}; reusing it")
        return done
    if exp.word2vec.workers > 1 and "word2vec" in exp.models:
        say(f"word2vec on {exp.word2vec.workers} workers: its vectors are not reproducible (use workers = 1)")
    started = time.perf_counter()
    folder = RunFolder(runs, key)
    checkpoint("started")
    try:
        parts = _Parts(say)
        _analyses(exp, ws, plan, parts, progress)
        checkpoint("measured")
        status = _store(exp, ws, folder, parts, key, files, command, started)
        final = folder.publish()  # the run appears whole or not at all
    except BaseException:
        folder.discard()
        raise
    removed, freed = ws.cache.prune(ws.corpus_hash)
    if removed:
        say(f"cache: removed {removed} entries of other corpora, versions or over the size limit ({freed >> 20} MB)")
    return RunResult(folder.run_id, final, False, status, tuple(parts.not_measured))


def _analyses(exp: Experiment, ws, plan: RunPlan, parts: _Parts, progress: bool) -> None:
    from tracer.analysis.drift import word_drift
    parts.tables["sources"] = ws.sources_table()
    parts.tables["corpus_periods"] = _corpus_periods(ws, plan.periods or exp.drift_by)
    _measure(exp, ws, plan, parts, progress)
    for name, test in plan.trace_tests.items():
        parts.say(f"tracing {name} in slice {exp.trace_slice} (verifying {exp.trace_verify})")
        parts.attempt("trace", name, lambda: _trace(exp, ws, name, test, plan.trace_slice, parts, progress))
    if plan.drift_tests:
        _drift(exp, ws, plan, parts, progress)
    if exp.drift_words:
        made = parts.attempt("drift words", ", ".join(exp.drift_words),
                             lambda: word_drift(ws, list(exp.drift_words), plan.periods, exp.counts, exp.ppmi_svd))
        if made is not None:
            parts.tables["word_change"], parts.tables["word_neighbours"] = made[0], made[1]


def _measure(exp: Experiment, ws, plan: RunPlan, parts: _Parts, progress: bool) -> None:
    """Measure slice by slice (the results do not depend on it); a failing slice is retried test by test."""
    summaries, words = [], []
    shared = None if exp.per_slice_words or len(plan.slices) < 2 else _shared_words(ws, plan, exp.counts)
    for model in exp.models:
        parts.say(f"measuring {len(plan.tests)} tests with {model} on {len(plan.slices)} slices")
        ms = MeasureSettings(bootstrap=exp.bootstrap if model == "ppmi-svd" else 0,
                             seeds=exp.word2vec_seeds if model == "word2vec" else 1, seed=exp.seed,
                             min_words=exp.min_words, alpha=exp.ppmi_svd.alpha, per_slice_words=exp.per_slice_words)
        settings = exp.ppmi_svd if model == "ppmi-svd" else exp.word2vec

        def one(tests, sl):
            return measure(ws, tests, model, [sl], exp.counts, settings, ms, shared_words=shared, progress=progress)

        for sl in plan.slices:
            r = parts.attempt("measure", f"{model} {sl.name}", lambda: one(plan.tests, sl))
            if r is not None:
                summaries.append(r.summary)
                words.append(r.words)
                continue
            slice_reason = parts.not_measured[-1]["reason"]
            for name, test in plan.tests.items():
                alone = parts.attempt("measure", f"{model} {sl.name} {name}",
                                      lambda: one({name: test}, sl)) if len(plan.tests) > 1 else None
                if alone is not None:
                    summaries.append(alone.summary)
                    words.append(alone.words)
                else:
                    reason = parts.not_measured[-1]["reason"] if len(plan.tests) > 1 else slice_reason
                    summaries.append(_not_measured_row(test, model, sl, reason))
    parts.tables["measure"] = pd.concat(summaries, ignore_index=True)
    parts.tables["measure_words"] = pd.concat(words, ignore_index=True) if words else pd.DataFrame()


def _shared_words(ws, plan: RunPlan, counts) -> set[str]:
    """The test words known in every slice the run compares (what ``measure`` keeps by default).

    A slice without any word at the minimum count restricts nothing: it is reported as not
    measured on its own.
    """
    tests = normalized_tests(plan.tests, ws)
    known = {w for t in tests.values() for w in t.all_words}
    for sl in plan.slices:
        try:
            known &= common_words(ws, tests, [sl], counts)
        except SliceError:
            continue
    return known


def _not_measured_row(test: AssociationTest, model: str, sl: Slice, reason: str) -> pd.DataFrame:
    row = {"test": test.name, "kind": "two-target" if test.two_target else "one-target", "model": model,
           "slice": sl.name, "measured": False, "reason": reason, "slice_tokens": sl.n_tokens}
    return pd.DataFrame([row], columns=SUMMARY_COLUMNS)


def _trace(exp, ws, name, test, sl, parts: _Parts, progress) -> None:
    from tracer.analysis.trace import TraceSettings, trace
    tr = trace(ws, test, "ppmi-svd", sl, exp.counts, exp.ppmi_svd,
               TraceSettings(verify=exp.trace_verify, top=exp.trace_top, rank_by=exp.trace_rank_by, seed=exp.seed),
               progress=progress)
    for part in ("sources", "documents", "passages", "first_order"):
        parts.tables[f"trace_{name}_{part}"] = getattr(tr, part)
    if tr.verification is not None:
        v = tr.verification
        parts.tables[f"trace_{name}_verification"] = v.rows.assign(
            pearson_r=v.pearson_r, spearman_rho=v.spearman_rho, sign_agreement=v.sign_agreement,
            pearson_r_without_largest=v.pearson_r_without_largest, confirmed=v.confirmed, headline=v.headline())


def _drift(exp, ws, plan: RunPlan, parts: _Parts, progress) -> None:
    """Drift of all tests at once (they share the periods' models); a failure is retried test by test."""
    from tracer.analysis.drift import drift_tests
    parts.say(f"drift of {', '.join(plan.drift_tests)} by {exp.drift_by}")
    ms = MeasureSettings(bootstrap=exp.drift_bootstrap, seed=exp.seed, min_words=exp.min_words,
                         alpha=exp.ppmi_svd.alpha, per_slice_words=exp.drift_per_slice_words)

    def run(tests):
        return drift_tests(ws, tests, "ppmi-svd", plan.periods, exp.counts, exp.ppmi_svd, ms, progress=progress)

    drifts = parts.attempt("drift", ", ".join(plan.drift_tests), lambda: run(plan.drift_tests))
    if drifts is None and len(plan.drift_tests) > 1:
        drifts = {}
        for name, test in plan.drift_tests.items():
            drifts.update(parts.attempt("drift", name, lambda: run({name: test})) or {})
    for name, d in (drifts or {}).items():
        if d.changes.empty:  # the trend and the decomposition need two measured periods
            short = d.periods[~d.periods["measured"].astype(bool)]
            why = "; ".join(f"{p}: {r}" for p, r in zip(short["period"], short["reason"]))
            parts.not_measured.append({"part": "drift", "name": name, "reason": "fewer than two periods could be "
                                       f"measured, so no change between periods ({why})"})
        parts.tables[f"drift_{name}_periods"] = d.periods
        parts.tables[f"drift_{name}_trend"] = pd.DataFrame([d.trend])
        parts.tables[f"drift_{name}_changes"] = d.changes
        parts.tables[f"drift_{name}_sources"] = d.source_parts


def _store(exp: Experiment, ws, folder: RunFolder, parts: _Parts, key: str, files: dict, command: str,
           started: float) -> str:
    """Write tables, experiment, run.json and report into the temporary folder; return the status."""
    from tracer.app.report.html import write_report
    parts.tables["not_measured"] = pd.DataFrame(parts.not_measured, columns=["part", "name", "reason"])
    stems = {name: table_stem(name) for name in parts.tables}
    for name, df in parts.tables.items():
        (folder.tmp / "tables" / f"{stems[name]}.csv").write_text(csv_text(df), encoding="utf-8")
        (folder.tmp / "tables" / f"{stems[name]}.json").write_text(
            json.dumps(to_records(df), ensure_ascii=False, indent=1), encoding="utf-8")
    checkpoint("tables")
    shutil.copyfile(exp.path, folder.tmp / "experiment.toml")
    info = {"run_id": folder.run_id, "run_key": key, "experiment_hash": exp.hash, "corpus_hash": ws.corpus_hash,
            "files_sha256": files, "experiment": experiment_summary(exp), "manifest": ws.manifest,
            "versions": package_versions(),
            "seeds": {"measure": exp.seed, "ppmi_svd": exp.ppmi_svd.seed, "word2vec": exp.word2vec.seed},
            "word2vec_reproducible": exp.word2vec.workers == 1 or "word2vec" not in exp.models,
            "command": command or f"tracer run {exp.path}", "timings_s": parts.timings,
            "cache": {"hits": ws.cache.hits, "misses": ws.cache.misses}, "tables": stems}

    def write_info():
        status = "partial" if parts.not_measured else "complete"
        info.update(status=status, not_measured=parts.not_measured, seconds=time.perf_counter() - started,
                    finished_at=dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"))
        write_atomic(folder.tmp / "run.json", json.dumps(plain_values(info), indent=1, ensure_ascii=False))
        return status

    status = write_info()
    checkpoint("run-json")
    # the report is drawn from the tables already written: whatever breaks in it, the results are kept
    parts.attempt("report", "report.html",
                  lambda: write_report(folder.tmp, folder.tmp / "report.html", figures_dir=folder.tmp / "figures"),
                  errors=(Exception,))
    if len(parts.not_measured) > len(parts.tables["not_measured"]):  # the report failed: say so in the run too
        failed = pd.DataFrame(parts.not_measured, columns=["part", "name", "reason"])
        (folder.tmp / "tables" / "not_measured.csv").write_text(csv_text(failed), encoding="utf-8")
        (folder.tmp / "tables" / "not_measured.json").write_text(
            json.dumps(to_records(failed), ensure_ascii=False, indent=1), encoding="utf-8")
        status = write_info()
    checkpoint("report")
    return status


def _corpus_periods(ws, periods: list[Slice] | str) -> pd.DataFrame:
    """Tokens per source and period (the periods, or a grouping to make them), for the corpus chart."""
    if isinstance(periods, str):
        try:
            periods = slices_by(ws, periods)
        except SliceError:  # a corpus without times: one period
            periods = [slice_from_spec(ws, "all")]
    src = ws.documents["source"].to_numpy()
    n_tok = ws.documents["n_tokens"].to_numpy()
    rows = [{"period": p.name, "source": s, "tokens": int(n_tok[(p.weights > 0) & (src == s)].sum())}
            for p in periods for s in sorted(set(src))]
    return pd.DataFrame(rows)
