"""The report's corpus, association-test, correlate and experiment sections, as data for the template."""

from __future__ import annotations

import pandas as pd

from tracer.app.report import figures as fig
from tracer.app.report.findings import anchor
from tracer.app.report.run_data import RunData
from tracer.app.report.tables import Col, cell_text, key_values, make_table

CORPUS_COLS = [Col("source", "source"), Col("documents", "documents", "int"), Col("tokens", "tokens", "int"),
               Col("token_share", "token share", "pct"), Col("first_year", "first year", "year"),
               Col("last_year", "last year", "year")]
TWO_TARGET_COLS = [Col("model", "model"), Col("slice", "slice", "id"), Col("effect_size", "d", "d"),
                   Col(("ci_low", "ci_high"), "interval", "d"), Col("p_value", "p", "p"), Col("q_value", "q", "p"),
                   Col("gap", "gap", "g3"), Col("pmi_effect_size", "PMI d", "d"),
                   Col("n_targets_x", "targets x", "int"), Col("n_targets_y", "targets y", "int"),
                   Col("slice_tokens", "tokens", "int")]
ONE_TARGET_COLS = [Col("model", "model"), Col("slice", "slice", "id"), Col("mean_score", "mean score", "g3"),
                   Col("n_targets_x", "words", "int"), Col("slice_tokens", "tokens", "int")]
WORD_COLS = [Col("word", "word"), Col("score", "score", "g3"), Col("pmi_score", "PMI score", "g3"),
             Col("count_a", "with attributes a", "int"), Col("count_b", "with attributes b", "int"),
             Col("log_odds_ratio", "log odds ratio", "g3"), Col(("lor_ci_low", "lor_ci_high"), "interval", "g3")]
CORRELATE_COLS = [Col("model", "model"), Col("slice", "slice"), Col("view", "view"), Col("n_words", "words", "int"),
                  Col("pearson_r", "Pearson r", "d"), Col(("pearson_ci_low", "pearson_ci_high"), "interval", "d"),
                  Col("pearson_p", "p", "p"), Col("spearman_rho", "Spearman rho", "d"),
                  Col(("spearman_ci_low", "spearman_ci_high"), "interval", "d"), Col("spearman_p", "p", "p")]


def corpus_section(run: RunData, charts: list) -> dict:
    manifest = run.info.get("manifest") or {}
    chart = fig.corpus_chart(run.table("corpus_periods"))
    if chart is not None:
        charts.append(chart)
    return {"documents": cell_text(manifest.get("n_documents"), "int"),
            "tokens": cell_text(manifest.get("n_tokens"), "int"), "types": cell_text(manifest.get("n_types"), "int"),
            "sources": make_table(run.table("sources"), CORPUS_COLS), "figure": chart}


def _one_test(run: RunData, name: str, rows: pd.DataFrame, charts: list) -> dict:
    one_target = "kind" in rows.columns and (rows["kind"] == "one-target").all()
    cols = ONE_TARGET_COLS if one_target else TWO_TARGET_COLS
    if "model" in rows.columns and rows["model"].nunique() == 1:
        cols = [c for c in cols if c.key != "model"]
    chart = None if one_target else fig.effects_chart(rows, name)
    if chart is not None:
        charts.append(chart)
    words = None
    if one_target:
        w = run.table("measure_words")
        if w is not None and {"test", "slice"} <= set(w.columns):
            first = rows["slice"].iloc[0] if "all" not in set(rows["slice"]) else "all"
            words = make_table(w[(w["test"] == name) & (w["slice"] == first)], WORD_COLS)
    return {"name": name, "anchor": anchor("test", name), "figure": chart, "words": words,
            "models": list(dict.fromkeys(rows["model"])) if "model" in rows.columns else [],
            "table": make_table(rows, cols, notes=("warning", "dropped_words"),
                                unmeasured="mean_score" if one_target else "effect_size")}


def measure_section(run: RunData, charts: list) -> list[dict]:
    """One entry per test: its forest plot and its table of slices (warnings and reasons as footnotes)."""
    measure = run.table("measure")
    if measure is None or "test" not in measure.columns:
        return []
    return [_one_test(run, name, measure[measure["test"] == name], charts) for name in dict.fromkeys(measure["test"])]


def correlate_sections(run: RunData, charts: list) -> list[dict]:
    """The run's correlate results: tables ``correlate`` or ``correlate_NAME``, each with ``..._points``."""
    out = []
    for name in run.table_names():
        if not name.startswith("correlate") or name.endswith("_points"):
            continue
        summary, points = run.table(name), run.table(f"{name}_points")
        label = name[len("correlate_"):] if name.startswith("correlate_") else "correlate"
        column = str(summary["column"].iloc[0]) if summary is not None and "column" in summary.columns \
            and len(summary) else "value"
        chart = fig.correlation_chart(points, column, label) if points is not None else None
        if chart is not None:
            charts.append(chart)
        missing = summary.assign(warning=[f"not in the model: {', '.join(map(str, w))}" if isinstance(w, list) and w
                                          else "" for w in summary["words_missing"]]) \
            if summary is not None and "words_missing" in summary.columns else summary
        out.append({"name": label, "column": column, "figure": chart, "anchor": anchor("correlate", label),
                    "table": make_table(missing, CORRELATE_COLS)})
    return out


def _settings(d) -> str:
    if not isinstance(d, dict):
        return cell_text(d, "list") if isinstance(d, list) else ("" if d is None else str(d))
    return ", ".join(f"{k} {'none' if v is None else v}" for k, v in d.items())


def experiment_rows(run: RunData):
    """The experiment as it ran: resolved paths and the settings of each step (from run.json)."""
    e = run.experiment
    if not e:
        return None
    models = [str(m) for m in e.get("models") or []]
    pairs = [("experiment file", e.get("path")), ("workspace", e.get("workspace")),
             ("inputs", _settings(e.get("inputs"))), ("tests file", e.get("tests_file")),
             ("models", ", ".join(models)), ("counts", _settings(e.get("counts")))]
    if "ppmi-svd" in models:
        pairs.append(("PPMI-SVD", _settings(e.get("ppmi_svd"))))
    if "word2vec" in models:
        pairs.append(("word2vec", _settings(e.get("word2vec")) + f"; seeds {e.get('word2vec_seeds')}"))
    pairs.append(("measure", f"slices by {_settings(e.get('measure_by'))}; also {_settings(e.get('measure_slices'))}; "
                             f"bootstrap {e.get('bootstrap')}; seed {e.get('seed')}; min words {e.get('min_words')}"))
    if e.get("trace_tests"):
        pairs.append(("trace", f"{_settings(e.get('trace_tests'))} in slice {e.get('trace_slice')}; top "
                               f"{e.get('trace_top')}; verify {e.get('trace_verify')}; rank by {e.get('trace_rank_by')}"))
    if e.get("drift_tests") or e.get("drift_words"):
        pairs.append(("drift", f"{_settings(e.get('drift_tests'))} by {e.get('drift_by')}; bootstrap "
                               f"{e.get('drift_bootstrap')}" + (f"; words {_settings(e.get('drift_words'))}"
                                                               if e.get("drift_words") else "")))
    return key_values([(k, "" if v is None else str(v)) for k, v in pairs])
