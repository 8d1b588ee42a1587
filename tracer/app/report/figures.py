"""Every figure of the report (and the correlate scatter of ``tracer correlate --plot``).

A figure function takes a run's table and returns a :class:`Chart` (PNG bytes, a file-name
part and a text alternative) or None when the table lacks what the figure needs (a period or
section that was not measured has no such columns). Figures are drawn with mathtext off:
a source or test name such as ``$x$`` is drawn as written, never parsed as a formula.
"""

from __future__ import annotations

import base64
import dataclasses
import functools
import io
import re
from pathlib import Path

import numpy as np
import pandas as pd

# Labels from the corpus (source names, test names, document ids) are drawn as plain text.
PLAIN_TEXT = {"text.parse_math": False, "text.usetex": False}
BLUE, LIGHT_BLUE, ORANGE, RED, GREY = "#1f5f8b", "#8fb3cc", "#d08b2c", "#b5523b", "#888888"
LABEL_CHARS = 40


@dataclasses.dataclass(frozen=True)
class Chart:
    """One drawn figure: ``png`` bytes, ``slug`` for its file name, ``alt`` for its text alternative."""

    slug: str
    alt: str
    png: bytes

    @property
    def src(self) -> str:
        """The PNG as a data URI, so the report needs no other file."""
        return "data:image/png;base64," + base64.b64encode(self.png).decode("ascii")


def _plt():
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()[:60] or "figure"


def _label(value) -> str:
    text = str(value).replace("time=", "")
    return text if len(text) <= LABEL_CHARS else text[:LABEL_CHARS - 1] + "\u2026"


def _has(df: pd.DataFrame | None, *columns: str) -> bool:
    return df is not None and len(df) > 0 and all(c in df.columns for c in columns)


def _numbers(series: pd.Series) -> np.ndarray:
    return pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)


def drawn(alt_of):
    """Decorator: run the drawing function with mathtext off and return its figure as a Chart.

    ``alt_of(*args)`` gives the text alternative; the drawing function returns a matplotlib
    figure, or None when there is nothing to draw.
    """
    def wrap(draw):
        @functools.wraps(draw)
        def chart(*args) -> Chart | None:
            plt = _plt()
            with plt.rc_context(PLAIN_TEXT):  # text objects read the setting when made and when drawn
                fig = draw(plt, *args)
                if fig is None:
                    return None
                buf = io.BytesIO()
                fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
                plt.close(fig)
            alt = alt_of(*args)
            return Chart(_slug(alt), alt, buf.getvalue())
        return chart
    return wrap


@drawn(lambda periods: "Tokens per period and source")
def corpus_chart(plt, periods: pd.DataFrame):
    """Stacked bars: tokens of each source in each period (``corpus_periods`` table)."""
    if not _has(periods, "period", "source", "tokens"):
        return None
    pivot = periods.pivot_table(index="period", columns="source", values="tokens", aggfunc="sum").fillna(0)
    fig, ax = plt.subplots(figsize=(8, 2.8))
    bottom = np.zeros(len(pivot))
    for s in pivot.columns:
        ax.bar(range(len(pivot)), pivot[s], bottom=bottom, label=_label(s))
        bottom += pivot[s].to_numpy()
    ax.set_xticks(range(len(pivot)), [_label(p) for p in pivot.index], rotation=30, fontsize=8)
    ax.set_ylabel("tokens")
    ax.legend(fontsize=7, ncol=6, loc="upper center", bbox_to_anchor=(0.5, -0.3), frameon=False)
    ax.set_title("Tokens per period and source", fontsize=10)
    return fig


@drawn(lambda rows, test: f"Effect sizes of {test}")
def effects_chart(plt, rows: pd.DataFrame, test: str):
    """Forest plot of one test: effect size d with its bootstrap interval, one line per slice.

    Labels name the slice only; the model is in the title (one model) or the colour (several).
    """
    if not _has(rows, "effect_size", "slice"):
        return None
    d = rows[np.isfinite(_numbers(rows["effect_size"]))]
    if len(d) == 0:
        return None
    models = list(dict.fromkeys(d["model"])) if "model" in d.columns else [""]
    fig, ax = plt.subplots(figsize=(8, 0.24 * len(d) + 1.1))
    y = np.arange(len(d))
    es = _numbers(d["effect_size"])
    lo = np.nan_to_num(es - _numbers(d["ci_low"]), nan=0).clip(0) if "ci_low" in d.columns else np.zeros(len(d))
    hi = np.nan_to_num(_numbers(d["ci_high"]) - es, nan=0).clip(0) if "ci_high" in d.columns else np.zeros(len(d))
    for m, color in zip(models, [BLUE, ORANGE, RED, GREY]):
        at = (d["model"] == m).to_numpy() if "model" in d.columns else np.ones(len(d), bool)
        ax.errorbar(es[at], y[at], xerr=[lo[at], hi[at]], fmt="o", color=color, ecolor=LIGHT_BLUE, capsize=2,
                    label=_label(m) if len(models) > 1 else None)
    ax.set_yticks(y, [_label(s) for s in d["slice"]], fontsize=7)
    ax.invert_yaxis()
    ax.axvline(0, color=GREY, lw=0.7)
    ax.set_xlim(-2.1, 2.1)
    ax.set_xlabel("effect size d (bootstrap interval)", fontsize=8)
    if len(models) > 1:
        ax.legend(fontsize=7)
    ax.set_title(_label(test) + (f" ({_label(models[0])})" if len(models) == 1 and models[0] else ""), fontsize=10)
    return fig


@drawn(lambda sources, test: f"Source contributions of {test}")
def sources_chart(plt, sources: pd.DataFrame, test: str):
    """Horizontal bars: the estimated change of the gap if each source were removed."""
    if not _has(sources, "source", "contribution_gap"):
        return None
    v = np.nan_to_num(_numbers(sources["contribution_gap"]))
    fig, ax = plt.subplots(figsize=(7, 0.28 * len(sources) + 1.0))
    ax.barh(range(len(v)), v, color=[RED if x < 0 else BLUE for x in v])
    ax.set_yticks(range(len(v)), [_label(s) for s in sources["source"]], fontsize=8)
    ax.axvline(0, color=GREY, lw=0.7)
    ax.invert_yaxis()
    ax.set_xlabel("estimated change of the gap if the source were removed", fontsize=8)
    ax.set_title(_label(test), fontsize=10)
    return fig


def _agreement(ver: pd.DataFrame) -> str:
    parts = []
    for col, name, fmt in (("spearman_rho", "Spearman rho", "{:.2f}"), ("sign_agreement", "signs agree", "{:.0%}")):
        if col in ver.columns and np.isfinite(_numbers(ver[col])[0]):
            parts.append(f"{name} {fmt.format(_numbers(ver[col])[0])}")
    return ", ".join(parts)


@drawn(lambda ver, test: f"Verification of {test}")
def verification_chart(plt, ver: pd.DataFrame, test: str):
    """Paired bars per retrain: the estimated and the retrained change of the gap.

    Bars in the same order and of the same sign show that the estimate ranks the sources as
    retraining does; the title states Spearman's rho and the share of agreeing signs.
    """
    if not _has(ver, "removed", "predicted", "actual"):
        return None
    est, act = np.nan_to_num(_numbers(ver["predicted"])), np.nan_to_num(_numbers(ver["actual"]))
    y = np.arange(len(ver))
    fig, ax = plt.subplots(figsize=(7, 0.36 * len(ver) + 1.2))
    ax.barh(y - 0.18, est, height=0.36, color=LIGHT_BLUE, label="estimated")
    ax.barh(y + 0.18, act, height=0.36, color=BLUE, label="retrained")
    ax.set_yticks(y, [_label(r) for r in ver["removed"]], fontsize=8)
    ax.invert_yaxis()
    ax.axvline(0, color=GREY, lw=0.7)
    ax.set_xlabel("change of the gap when removed", fontsize=8)
    ax.legend(fontsize=7, loc="best")
    agreement = _agreement(ver)
    ax.set_title(f"{_label(test)}: {agreement} over {len(ver)} retrains" if agreement else _label(test), fontsize=10)
    return fig


@drawn(lambda periods, test: f"Trajectory of {test}")
def trajectory_chart(plt, periods: pd.DataFrame, test: str):
    """The gap per measured period, with its bootstrap band where every period has one."""
    if not _has(periods, "period", "gap"):
        return None
    gap = _numbers(periods["gap"])
    p = periods[np.isfinite(gap)]
    if len(p) == 0:
        return None
    fig, ax = plt.subplots(figsize=(5.6, 2.8))
    x = np.arange(len(p))
    ax.plot(x, _numbers(p["gap"]), "o-", color=BLUE, label="gap")
    if _has(p, "gap_ci_low", "gap_ci_high"):
        lo, hi = _numbers(p["gap_ci_low"]), _numbers(p["gap_ci_high"])
        if np.isfinite(lo).all() and np.isfinite(hi).all():
            ax.fill_between(x, lo, hi, alpha=0.2, color=BLUE, label="bootstrap interval")
    ax.set_xticks(x, [_label(s) for s in p["period"]], rotation=30, fontsize=8)
    ax.axhline(0, color=GREY, lw=0.7)
    ax.set_ylabel("gap (mean association x - y)", fontsize=8)
    ax.legend(fontsize=7)
    ax.set_title(f"{_label(test)}: trajectory", fontsize=10)
    return fig


@drawn(lambda changes, test: f"Decomposition of {test}")
def decomposition_chart(plt, changes: pd.DataFrame, test: str):
    """Bars per change between periods: the part due to the mix of sources and the part within them."""
    if not _has(changes, "from", "to", "mix_part", "within_part"):
        return None
    fig, ax = plt.subplots(figsize=(5.6, 2.8))
    x = np.arange(len(changes))
    ax.bar(x - 0.2, np.nan_to_num(_numbers(changes["mix_part"])), width=0.4, label="mix of sources", color=ORANGE)
    ax.bar(x + 0.2, np.nan_to_num(_numbers(changes["within_part"])), width=0.4, label="within sources", color=BLUE)
    ax.set_xticks(x, [f"{_label(a)}\n-> {_label(b)}" for a, b in zip(changes["from"], changes["to"])], fontsize=6)
    ax.axhline(0, color=GREY, lw=0.7)
    ax.legend(fontsize=7)
    ax.set_title(f"{_label(test)}: decomposition of each change", fontsize=10)
    return fig


def _scatter_figure(plt, points: pd.DataFrame, column: str):
    """One panel per model, slice and view: each word's score against the table's value, labelled."""
    groups = list(points.groupby(["model", "slice", "view"], sort=False))
    cols = min(3, len(groups)) or 1
    rows = -(-len(groups) // cols) or 1
    fig, axes = plt.subplots(rows, cols, figsize=(4.2 * cols, 3.6 * rows), squeeze=False)
    for ax, ((model, sl, view), g) in zip(axes.flat, groups):
        ax.scatter(g["value"], g["score"], s=18, color="#2a6f97")
        for _, p in g.iterrows():
            ax.annotate(_label(p["word"]), (p["value"], p["score"]), fontsize=7, xytext=(3, 2),
                        textcoords="offset points")
        ax.set_title(f"{_label(model)}, {_label(sl)}", fontsize=9)
        ax.set_xlabel(_label(column), fontsize=8)
        ax.set_ylabel("score (cosine)" if view == "embedding" else "PMI log odds ratio", fontsize=8)
        ax.axhline(0, color="#999", lw=0.6)
    for ax in list(axes.flat)[len(groups):]:
        ax.axis("off")
    fig.tight_layout()
    return fig


@drawn(lambda points, column, name: f"Correlation of {name} with {column}")
def correlation_chart(plt, points: pd.DataFrame, column: str, name: str):
    """The report's copy of the correlate scatter (``points``: model, slice, view, word, value, score)."""
    if not _has(points, "model", "slice", "view", "word", "value", "score"):
        return None
    return _scatter_figure(plt, points, column)


def scatter_plot(points: pd.DataFrame, column: str, path: str | Path) -> None:
    """Write the correlate scatter of ``points`` to ``path`` (PNG), for ``tracer correlate --plot``."""
    plt = _plt()
    with plt.rc_context(PLAIN_TEXT):
        fig = _scatter_figure(plt, points, column)
        fig.savefig(path, dpi=110)
        plt.close(fig)
