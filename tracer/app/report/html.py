"""The report: one self-contained HTML file (styles and figures inline), built from a run's tables.

Every string from the corpus is escaped by the template engine (autoescape); figures are
PNG images embedded as data URIs, so the file opens in any browser without a network.
"""

from __future__ import annotations

import base64
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
from jinja2 import Environment, FileSystemLoader, select_autoescape
from markupsafe import Markup, escape

from tracer.files import write_atomic

TEMPLATES = Path(__file__).resolve().parent / "templates"
CAUTIONS = [
    "An association in an embedding is not proof of discrimination by anyone: it says which words the "
    "corpus puts near each other, not why, and not what any person intended.",
    "Word lists encode choices. Other reasonable lists can give other answers; the per-word tables show "
    "which words carry a result.",
    "Small corpora and small slices give unstable numbers; read the intervals, and the warnings beside them.",
    "Consequential decisions about people, publications or data belong with qualified reviewers and the "
    "applicable law, not with a score.",
]


def _plt():
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
    _plt().close(fig)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _table(df: pd.DataFrame, columns=None, digits: int = 4, limit: int | None = None) -> Markup:
    """An HTML table with every cell escaped."""
    if df is None or len(df) == 0:
        return Markup("<p class='empty'>(no rows)</p>")
    df = df[columns] if columns else df
    if limit:
        df = df.head(limit)
    head = "".join(f"<th>{escape(str(c))}</th>" for c in df.columns)
    rows = []
    for rec in df.itertuples(index=False):
        cells = []
        for v in rec:
            if isinstance(v, float):
                text = "" if np.isnan(v) else f"{v:.{digits}g}" if abs(v) >= 1e4 or (v and abs(v) < 1e-3) else f"{v:.{digits}f}"
                cells.append(f"<td class='num'>{escape(text)}</td>")
            else:
                cells.append(f"<td>{escape('' if v is None else str(v))}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return Markup(f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>")


def _marked(text) -> Markup:
    """A passage with its two probe words in <mark>; the text itself is escaped first."""
    safe = str(escape("" if text is None else str(text)))
    return Markup(safe.replace("[[", "<mark>").replace("]]", "</mark>"))


def _load(run_dir: Path, name: str) -> pd.DataFrame | None:
    p = run_dir / "tables" / f"{name}.json"
    if not p.is_file():
        return None
    return pd.DataFrame(json.loads(p.read_text(encoding="utf-8")))


def _corpus_figure(periods: pd.DataFrame) -> str:
    plt = _plt()
    pivot = periods.pivot_table(index="period", columns="source", values="tokens", aggfunc="sum").fillna(0)
    fig, ax = plt.subplots(figsize=(8, 3.2))
    bottom = np.zeros(len(pivot))
    for s in pivot.columns:
        ax.bar(range(len(pivot)), pivot[s], bottom=bottom, label=str(s))
        bottom += pivot[s].to_numpy()
    ax.set_xticks(range(len(pivot)), [p.replace("time=", "") for p in pivot.index], rotation=30, fontsize=8)
    ax.set_ylabel("tokens")
    ax.legend(fontsize=7, ncol=6, loc="upper center", bbox_to_anchor=(0.5, -0.28), frameon=False)
    ax.set_title("Tokens per period and source", fontsize=10)
    return _png(fig)


def _effects_figure(measure: pd.DataFrame, test: str) -> str | None:
    plt = _plt()
    d = measure[(measure["test"] == test) & measure["measured"].astype(bool)]
    d = d[d["effect_size"].notna()]
    if len(d) == 0:
        return None
    fig, ax = plt.subplots(figsize=(8, 0.28 * len(d) + 1.2))
    y = np.arange(len(d))
    lo = (d["effect_size"] - d["ci_low"]).clip(lower=0).fillna(0)
    hi = (d["ci_high"] - d["effect_size"]).clip(lower=0).fillna(0)
    ax.errorbar(d["effect_size"], y, xerr=[lo, hi], fmt="o", color="#1f5f8b", ecolor="#8fb3cc", capsize=2)
    ax.set_yticks(y, [f"{m} {s}" for m, s in zip(d["model"], d["slice"])], fontsize=7)
    ax.axvline(0, color="#888", lw=0.7)
    ax.set_xlim(-2.1, 2.1)
    ax.set_xlabel("effect size d (bootstrap interval)")
    ax.set_title(f"{test}", fontsize=10)
    return _png(fig)


def _bar_figure(df: pd.DataFrame, label: str, value: str, title: str) -> str:
    plt = _plt()
    fig, ax = plt.subplots(figsize=(7, 0.3 * len(df) + 1.2))
    colors = ["#b5523b" if v < 0 else "#3b7fb5" for v in df[value]]
    ax.barh(range(len(df)), df[value], color=colors)
    ax.set_yticks(range(len(df)), [str(v) for v in df[label]], fontsize=8)
    ax.axvline(0, color="#888", lw=0.7)
    ax.invert_yaxis()
    ax.set_title(title, fontsize=10)
    return _png(fig)


def _trajectory_figure(periods: pd.DataFrame, test: str) -> str:
    plt = _plt()
    p = periods[periods["measured"].astype(bool)]
    fig, ax = plt.subplots(figsize=(7, 3))
    x = np.arange(len(p))
    ax.plot(x, p["gap"], "o-", color="#1f5f8b", label="gap")
    if p["gap_ci_low"].notna().all():
        ax.fill_between(x, p["gap_ci_low"].astype(float), p["gap_ci_high"].astype(float), alpha=0.2, color="#1f5f8b",
                        label="bootstrap interval")
    ax.set_xticks(x, [s.replace("time=", "") for s in p["period"]], rotation=30, fontsize=8)
    ax.axhline(0, color="#888", lw=0.7)
    ax.set_ylabel("gap (mean association x - y)")
    ax.legend(fontsize=7)
    ax.set_title(f"{test}: trajectory", fontsize=10)
    return _png(fig)


def _decomposition_figure(changes: pd.DataFrame, test: str) -> str:
    plt = _plt()
    fig, ax = plt.subplots(figsize=(7, 3))
    x = np.arange(len(changes))
    ax.bar(x - 0.2, changes["mix_part"], width=0.4, label="mix of sources", color="#d08b2c")
    ax.bar(x + 0.2, changes["within_part"], width=0.4, label="within sources", color="#3b7fb5")
    ax.set_xticks(x, [f"{a.replace('time=', '')}\n-> {b.replace('time=', '')}" for a, b in
                      zip(changes["from"], changes["to"])], fontsize=6)
    ax.axhline(0, color="#888", lw=0.7)
    ax.legend(fontsize=7)
    ax.set_title(f"{test}: decomposition of each change", fontsize=10)
    return _png(fig)


def _verification_figure(v: pd.DataFrame, test: str) -> str:
    plt = _plt()
    fig, ax = plt.subplots(figsize=(4.2, 4))
    ax.scatter(v["predicted"], v["actual"], color="#1f5f8b")
    lim = float(np.nanmax(np.abs(np.concatenate([v["predicted"], v["actual"]])))) * 1.1 or 1.0
    ax.plot([-lim, lim], [-lim, lim], color="#888", lw=0.7)
    ax.set_xlabel("predicted change")
    ax.set_ylabel("retrained change")
    ax.set_title(f"{test}: rho = {v['spearman_rho'].iloc[0]:.2f}, r = {v['pearson_r'].iloc[0]:.2f}", fontsize=10)
    return _png(fig)


def build_report(run_dir: str | Path) -> str:
    """The report of a stored run, as HTML text."""
    run_dir = Path(run_dir)
    info = json.loads((run_dir / "run.json").read_text(encoding="utf-8"))
    exp = info["experiment"]
    measure = _load(run_dir, "measure")
    sources = _load(run_dir, "sources")
    periods = _load(run_dir, "corpus_periods")
    tests = []
    for name in dict.fromkeys(measure["test"]):
        rows = measure[measure["test"] == name]
        tests.append({"name": name, "figure": _effects_figure(measure, name),
                      "table": _table(rows, ["model", "slice", "measured", "effect_size", "ci_low", "ci_high",
                                             "p_value", "p_method", "gap", "pmi_effect_size", "mean_score",
                                             "n_targets_x", "n_targets_y", "n_attributes_a", "n_attributes_b",
                                             "reason", "warning"])})
    traces = []
    for name in exp.get("trace_tests", []):
        src = _load(run_dir, f"trace_{name}_sources")
        docs = _load(run_dir, f"trace_{name}_documents")
        pas = _load(run_dir, f"trace_{name}_passages")
        ver = _load(run_dir, f"trace_{name}_verification")
        traces.append({
            "name": name,
            "figure": _bar_figure(src, "source", "contribution_gap", f"{name}: change of the gap if removed"),
            "sources": _table(src), "documents": _table(docs, limit=20),
            "passages": [{"doc_id": r["doc_id"], "source": r["source"], "time": r["time"], "start": r["start"],
                          "end": r["end"], "html": _marked(r["marked"])} for r in (pas.to_dict("records") if pas is not None else [])][:30],
            "verification": _table(ver) if ver is not None else None,
            "verification_figure": _verification_figure(ver, name) if ver is not None else None,
            "agreement": ver.iloc[0].reindex(["pearson_r", "spearman_rho", "sign_agreement", "headline"]).to_dict() if ver is not None else None,
        })
    drifts = []
    for name in exp.get("drift_tests", []):
        per = _load(run_dir, f"drift_{name}_periods")
        ch = _load(run_dir, f"drift_{name}_changes")
        tr = _load(run_dir, f"drift_{name}_trend")
        drifts.append({"name": name, "trajectory": _trajectory_figure(per, name),
                       "decomposition": _decomposition_figure(ch, name), "periods": _table(per),
                       "changes": _table(ch), "trend": _table(tr)})
    env = Environment(loader=FileSystemLoader(TEMPLATES), autoescape=select_autoescape(["html", "j2"]))
    manifest = info["manifest"]
    return env.get_template("report.html.j2").render(
        info=info, exp=exp, manifest=manifest, cautions=CAUTIONS,
        corpus={"documents": manifest["n_documents"], "tokens": manifest["n_tokens"], "types": manifest["n_types"],
                "sources": _table(sources), "figure": _corpus_figure(periods) if periods is not None and len(periods) else None},
        tests=tests, traces=traces, drifts=drifts,
        experiment_text=(run_dir / "experiment.toml").read_text(encoding="utf-8"),
        versions=info["versions"])


def write_report(run_dir: str | Path, out: str | Path) -> Path:
    write_atomic(Path(out), build_report(run_dir))
    return Path(out)


def save_figures(report_html: str, folder: str | Path) -> list[Path]:
    """Write every figure embedded in a report as a PNG file (named after its alt text)."""
    import re
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for n, (alt, data) in enumerate(re.findall(r'<img alt="([^"]*)" src="data:image/png;base64,([^"]+)"',
                                               report_html), start=1):
        slug = re.sub(r"[^A-Za-z0-9]+", "-", alt).strip("-").lower()[:60] or "figure"
        path = folder / f"{n:02d}-{slug}.png"
        path.write_bytes(base64.b64decode(data))
        out.append(path)
    return out
