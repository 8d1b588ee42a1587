"""The report: one self-contained HTML file (styles and figures inline), built from a run's tables.

The first screen holds the findings (one line per test, each linking to its evidence) and the
cautions; the evidence follows. Python prepares data (tables as :class:`~.tables.Table`,
figures as :class:`~.figures.Chart`); the jinja2 template writes every tag and escapes every
string from the corpus (autoescape). Figures are PNG data URIs, so the file opens in any browser
without a network; :func:`write_report` can also write them as files, from the charts themselves.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from jinja2 import ChainableUndefined, Environment, FileSystemLoader, select_autoescape

from tracer.app.report import figures as fig
from tracer.app.report.findings import anchor, findings
from tracer.app.report.run_data import RunData
from tracer.app.report.sections import (corpus_section, correlate_sections, experiment_rows, measure_section)
from tracer.app.report.tables import Col, make_table
from tracer.files import write_atomic

TEMPLATES = Path(__file__).resolve().parent / "templates"
CAUTIONS = [
    "An association is not proof of discrimination by anyone: it shows which words the corpus puts near "
    "each other, not why, and not what any person intended.",
    "Word lists encode choices: other reasonable lists can give other answers.",
    "Small corpora and small slices give unstable numbers: read the intervals and the notes.",
    "Consequential decisions about people, publications or data belong with qualified reviewers and the "
    "applicable law, not with a score.",
]
PASSAGES_SHOWN, DOCUMENTS_SHOWN = 12, 10

SOURCE_COLS = [Col("source", "source"), Col("documents", "documents", "int"), Col("tokens", "tokens", "int"),
               Col("token_share", "token share", "pct"), Col("contribution_gap", "gap change if removed", "g3"),
               Col("linear_estimate", "linear estimate", "g3"), Col("contribution", "d change if removed", "g3"),
               Col("contribution_per_million_tokens", "gap change per million tokens", "g3")]
DOCUMENT_COLS = [Col("rank", "rank", "int"), Col("doc_id", "document", "id"), Col("source", "source"),
                 Col("time", "time", "id"), Col("title", "title"), Col("tokens", "tokens", "int"),
                 Col("contribution_gap", "gap change if removed", "g3"), Col("pairs", "strongest pairs")]
VERIFY_COLS = [Col("removed", "removed"), Col("documents", "documents", "int"),
               Col("predicted", "estimated gap change", "g3"), Col("actual", "retrained gap change", "g3"),
               Col("predicted_linear", "linear estimate", "g3"),
               Col("predicted_effect_size", "estimated d change", "g3"),
               Col("actual_effect_size", "retrained d change", "g3"), Col("seed_spread", "seed spread", "g3")]
TREND_COLS = [Col("slope", "gap slope per decade", "g3"), Col(("slope_ci_low", "slope_ci_high"), "interval", "g3"),
              Col("p_value", "Kendall p", "p"), Col("tau", "Kendall tau", "d"),
              Col("periods_used", "periods used", "int")]
PERIOD_COLS = [Col("period", "period", "id"), Col("effect_size", "d", "d"), Col(("ci_low", "ci_high"), "interval", "d"),
               Col("gap", "gap", "g3"), Col(("gap_ci_low", "gap_ci_high"), "gap interval", "g3"),
               Col("change_significant", "change from previous outside its interval", "bool"),
               Col("tokens", "tokens", "int"), Col("documents", "documents", "int")]
CHANGE_COLS = [Col("from", "from", "id"), Col("to", "to", "id"), Col("total", "change of the gap", "g3"),
               Col("mix_part", "mix of sources", "g3"), Col("within_part", "within sources", "g3"),
               Col("mix_share", "mix share", "pct"), Col("reweighted_gap", "reweighted gap", "g3")]
WITHIN_COLS = [Col("source", "source"), Col("share_from", "share before", "pct"),
               Col("share_to", "share after", "pct"), Col("within_contribution", "change within the source", "g3")]


def _segments(text, start, marks) -> list[dict]:
    """A passage as text segments from its marks' character offsets (never from brackets in the
    text), each marked segment with its set; the template escapes every segment."""
    if not isinstance(text, str):
        return []
    if not isinstance(marks, list) or not isinstance(start, (int, float)) or pd.isna(start):
        return [{"text": text, "mark": False, "set": None}]
    out, at = [], 0
    for m in sorted((m for m in marks if isinstance(m, dict)), key=lambda m: m.get("start", 0)):
        a, b = int(m["start"]) - int(start), int(m["end"]) - int(start)
        if a < at or b > len(text) or a >= b:  # an offset outside the passage: show the text unmarked there
            continue
        if a > at:
            out.append({"text": text[at:a], "mark": False, "set": None})
        out.append({"text": text[a:b], "mark": True, "set": m.get("set")})
        at = b
    if at < len(text):
        out.append({"text": text[at:], "mark": False, "set": None})
    return out


def _passages(pas: pd.DataFrame | None) -> list[dict]:
    """Passages for the template: ids, evidence, the document's contribution, marked segments.
    Runs stored before marks had offsets (a ``marked`` column only) show their text unmarked."""
    if pas is None or len(pas) == 0:
        return []
    out = []
    for r in pas.to_dict(orient="records"):
        p = {k: (None if isinstance(r.get(k), float) and pd.isna(r.get(k)) else r.get(k))
             for k in ("passage_id", "doc_id", "source", "time", "start", "end", "evidence", "supporting",
                       "countering", "doc_rank", "doc_change", "note")}
        p["passage_id"] = p["passage_id"] or p["doc_id"]
        p["segments"] = _segments(r.get("text"), r.get("start"), r.get("marks"))
        out.append(p)
    return out


def _trace(run: RunData, name: str, charts: list) -> dict:
    src, ver = run.table(f"trace_{name}_sources"), run.table(f"trace_{name}_verification")
    out = {"name": name, "anchor": anchor("trace", name), "reason": None}
    if src is None or len(src) == 0:
        out["reason"] = run.not_measured("trace", name) or "the run holds no trace tables for this test"
        return out
    docs = run.table(f"trace_{name}_documents")
    passages = _passages(run.table(f"trace_{name}_passages"))
    out.update(figure=_chart(charts, fig.sources_chart(src, name)), sources=make_table(src, SOURCE_COLS),
               documents=make_table(docs, DOCUMENT_COLS, limit=DOCUMENTS_SHOWN, stored=f"trace_{name}_documents"),
               passages=passages[:PASSAGES_SHOWN], more_passages=passages[PASSAGES_SHOWN:],
               verification=make_table(ver, VERIFY_COLS),
               verification_figure=_chart(charts, fig.verification_chart(ver, name)),
               agreement=_agreement(ver))
    return out


def _agreement(ver: pd.DataFrame | None) -> dict | None:
    if ver is None or len(ver) == 0:
        return None
    first = ver.iloc[0]
    return {k: first.get(k) for k in ("pearson_r", "spearman_rho", "sign_agreement")
            if k in ver.columns and pd.notna(first.get(k))} | {"retrains": len(ver)}


def _drift(run: RunData, name: str, charts: list) -> dict:
    per, ch = run.table(f"drift_{name}_periods"), run.table(f"drift_{name}_changes")
    out = {"name": name, "anchor": anchor("drift", name), "reason": None}
    if per is None or len(per) == 0:
        out["reason"] = run.not_measured("drift", name) or "the run holds no drift tables for this test"
        return out
    within = run.table(f"drift_{name}_sources")
    overall = ch[ch["overall"].fillna(False).astype(bool)] if ch is not None and "overall" in ch.columns else None
    if within is not None and overall is not None and len(overall) and {"from", "to"} <= set(within.columns):
        o = overall.iloc[0]
        within = within[(within["from"] == o["from"]) & (within["to"] == o["to"])]
    else:
        within = None
    changes = ch.assign(sources_in_one_period=[_one_period_note(r) for r in ch.to_dict(orient="records")]) \
        if ch is not None and len(ch) else ch
    out.update(trajectory=_chart(charts, fig.trajectory_chart(per, name)),
               decomposition=_chart(charts, fig.decomposition_chart(ch, name)),
               trend=make_table(run.table(f"drift_{name}_trend"), TREND_COLS),
               periods=make_table(per, PERIOD_COLS, notes=("dropped_words",), unmeasured="effect_size"),
               changes=make_table(changes, CHANGE_COLS, notes=("sources_in_one_period",)),
               within=make_table(within, WITHIN_COLS),
               unmeasured=int((~per["measured"].fillna(False).astype(bool)).sum()) if "measured" in per.columns else 0,
               n_periods=len(per))
    return out


def _one_period_note(row: dict) -> str:
    only = [f"{s} ({row.get('from')})" for s in row.get("sources_only_in_from") or []]
    only += [f"{s} ({row.get('to')})" for s in row.get("sources_only_in_to") or []]
    return f"sources in one period only: {', '.join(only)}" if only else ""


def _chart(charts: list, chart: fig.Chart | None) -> fig.Chart | None:
    """Keep ``chart`` in the report's list (the order the figures appear in) and pass it on."""
    if chart is not None:
        charts.append(chart)
    return chart


def _headline(run: RunData) -> tuple[str, str]:
    """The model and the slice the findings read: PPMI-SVD if measured, the trace slice if measured."""
    measure = run.table("measure")
    models = list(dict.fromkeys(measure["model"])) if measure is not None and "model" in measure.columns else []
    model = "ppmi-svd" if "ppmi-svd" in models else (models[0] if models else "ppmi-svd")
    slices = set(measure["slice"]) if measure is not None and "slice" in measure.columns else set()
    preferred = str(run.experiment.get("trace_slice") or "all")
    return model, preferred if preferred in slices or not slices else ("all" if "all" in slices else sorted(slices)[0])


def environment() -> Environment:
    """The templates' environment: every string escaped (autoescape); a value a run lacks (a part
    not measured) renders empty instead of failing."""
    return Environment(loader=FileSystemLoader(TEMPLATES), autoescape=select_autoescape(["html", "j2"]),
                       trim_blocks=True, lstrip_blocks=True, undefined=ChainableUndefined)


def render_report(run_dir: str | Path) -> tuple[str, list[fig.Chart]]:
    """The report of a stored run as HTML text, and its figures in the order they appear."""
    run = RunData(run_dir)
    charts: list[fig.Chart] = []
    model, headline = _headline(run)
    corpus = corpus_section(run, charts)
    tests = measure_section(run, charts)
    traces = [_trace(run, name, charts) for name in run.tests_of("trace_tests")]
    drifts = [_drift(run, name, charts) for name in run.tests_of("drift_tests")]
    correlations = correlate_sections(run, charts)
    env = environment()
    info = run.info
    html = env.get_template("report.html.j2").render(
        info=info, exp=run.experiment, status=run.status, cautions=CAUTIONS, model=model, headline=headline,
        findings=findings(run, model, headline), corpus=corpus, tests=tests, traces=traces, drifts=drifts,
        correlations=correlations, experiment=experiment_rows(run), experiment_text=run.experiment_text(),
        has_q=run.table("measure") is not None and "q_value" in run.table("measure").columns,
        not_measured=[e for e in info.get("not_measured") or [] if isinstance(e, dict)],
        manifest=info.get("manifest") or {}, versions=info.get("versions") or {}, seeds=info.get("seeds") or {})
    return html, charts


def build_report(run_dir: str | Path) -> str:
    """The report of a stored run, as HTML text."""
    return render_report(run_dir)[0]


def write_report(run_dir: str | Path, out: str | Path, figures_dir: str | Path | None = None) -> Path:
    """Write the report of ``run_dir`` to ``out``; with ``figures_dir``, each figure as ``NN-name.png`` too."""
    html, charts = render_report(run_dir)
    write_atomic(Path(out), html)
    if figures_dir is not None:
        save_charts(charts, figures_dir)
    return Path(out)


def save_charts(charts: list[fig.Chart], folder: str | Path) -> list[Path]:
    """Write each chart as a PNG file named by its place in the report and its text alternative."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for n, chart in enumerate(charts, start=1):
        path = folder / f"{n:02d}-{chart.slug}.png"
        path.write_bytes(chart.png)
        out.append(path)
    return out
