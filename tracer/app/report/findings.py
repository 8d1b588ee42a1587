"""The findings: one line per test, read off the run's tables, for the report's first screen.

Each line says the association in the headline slice (effect size d, its interval, p and q when
the measure table has them), the source(s) that carry it (from the trace), whether retraining
confirms the trace, and for drift whether the change lies in the mix of sources or within them.
Thresholds are stated beside each rule; a part that was not measured says so with its reason.
"""

from __future__ import annotations

import dataclasses
import math

import pandas as pd

from tracer.app.report.run_data import RunData
from tracer.app.report.tables import significant

# A source "carries" the association when removing it would take away at least this share of the gap.
CARRIER_SHARE = 0.25
# A second source is named beside the first when it takes away at least this fraction of what the first does.
SECOND_CARRIER = 0.5
# Retraining confirms an estimate when the signs agree and the retrained change is within a factor 2 of it.
CONFIRM_RATIO = (0.5, 2.0)
# The sources' ranking is confirmed when at least this share of the retrains agree in sign with the estimate.
RANK_SIGNS = 0.75
# A drift is "in the mix" ("within the sources") when the mix part is at least (at most) this share.
MIX_SHARES = (1 / 3, 2 / 3)


@dataclasses.dataclass
class Part:
    """One cell of a finding: its text, a verdict class for the eye, and the evidence it links to."""

    text: str
    verdict: str = ""  # "yes", "no", "mixed"; for drift "mix", "within", "both"; "none": not run; "" otherwise
    link: str | None = None


@dataclasses.dataclass
class Finding:
    test: str
    anchor: str
    association: Part
    source: Part
    verification: Part
    drift: Part


def anchor(kind: str, test: str) -> str:
    """An HTML id for a test's evidence (test names may hold any character)."""
    safe = "".join(c if c.isalnum() or c in "-_" else "-" for c in test)
    return f"{kind}-{safe}-{abs(hash_text(test)) % 10_000:04d}"


def hash_text(text: str) -> int:
    """A stable hash (Python's ``hash`` of a str changes from process to process)."""
    h = 0
    for ch in text:
        h = (h * 131 + ord(ch)) % 1_000_000_007
    return h


def _num(v) -> float:
    try:
        x = float(v)
    except (TypeError, ValueError):
        return math.nan
    return x


def headline_slice(rows: pd.DataFrame, preferred: str) -> pd.Series | None:
    """The row of ``rows`` (one test, one model) in the preferred slice, else ``all``, else the first."""
    if rows is None or len(rows) == 0:
        return None
    if "slice" in rows.columns:
        for name in (preferred, "all"):
            hit = rows[rows["slice"] == name]
            if len(hit):
                return hit.iloc[0]
    return rows.iloc[0]


def association_part(row: pd.Series | None, anchor_id: str) -> Part:
    if row is None:
        return Part("not measured", "", anchor_id)
    if "measured" in row and row["measured"] is not None and not bool(row["measured"]):
        return Part(f"not measured: {row.get('reason') or 'no reason recorded'}", "", anchor_id)
    d = _num(row.get("effect_size"))
    if not math.isfinite(d):
        score = _num(row.get("mean_score"))
        n = _num(row.get("n_targets_x"))
        words = f" over {int(n)} words" if math.isfinite(n) else ""
        text = f"mean score {significant(score, 2)}{words} (one target set)" if math.isfinite(score) else "no effect size"
        return Part(text, "", anchor_id)
    text = f"d {d:.2f}"
    lo, hi = _num(row.get("ci_low")), _num(row.get("ci_high"))
    crosses = False
    if math.isfinite(lo) and math.isfinite(hi):
        text += f" [{lo:.2f}, {hi:.2f}]"
        crosses = lo <= 0 <= hi
    for key, name in (("p_value", "p"), ("q_value", "q")):
        v = _num(row.get(key))
        if math.isfinite(v):
            text += f", {name} {significant(v, 2)}"
    if crosses:
        text += "; interval includes 0"
    return Part(text, "mixed" if crosses else "yes", anchor_id)


def carriers(sources: pd.DataFrame | None, gap: float) -> tuple[list[str], float]:
    """The sources that carry the gap (largest estimated reduction first) and the first one's share."""
    if sources is None or not {"source", "contribution_gap"} <= set(sources.columns) or not math.isfinite(gap) or not gap:
        return [], math.nan
    reduction = -pd.to_numeric(sources["contribution_gap"], errors="coerce").fillna(0) * math.copysign(1, gap)
    order = reduction.sort_values(ascending=False)
    if len(order) == 0 or order.iloc[0] <= 0:
        return [], 0.0
    share = float(order.iloc[0] / abs(gap))
    names = [str(sources["source"].loc[order.index[0]])]
    if len(order) > 1 and order.iloc[1] >= SECOND_CARRIER * order.iloc[0]:
        names.append(str(sources["source"].loc[order.index[1]]))
    return names, share


def source_part(run: RunData, test: str, gap: float, link: str) -> tuple[Part, list[str]]:
    if test not in run.tests_of("trace_tests"):
        return Part("not traced in this run", "none"), []
    sources = run.table(f"trace_{test}_sources")
    if sources is None or len(sources) == 0:
        reason = run.not_measured("trace", test) or "the run holds no trace table"
        return Part(f"not traced: {reason}", "", link), []
    names, share = carriers(sources, gap)
    if not names:
        return Part("no source reduces the gap when removed", "no", link), []
    if share < CARRIER_SHARE:
        return Part(f"spread over the sources (largest: {names[0]}, {share:.0%} of the gap)", "mixed", link), names
    change = _num(sources.set_index("source")["contribution_gap"].get(names[0]))
    text = f"{' and '.join(names)}: {change:+.3g} ({share:.0%} of the gap)"
    return Part(text, "yes", link), names


def verification_part(run: RunData, test: str, names: list[str], link: str) -> Part:
    ver = run.table(f"trace_{test}_verification")
    if not names:
        return Part("")
    if ver is None or not {"removed", "predicted", "actual"} <= set(ver.columns):
        return Part("not verified by retraining in this run", "", link)
    row = ver[ver["removed"] == f"source={names[0]}"]
    rho = _num(ver["spearman_rho"].iloc[0]) if "spearman_rho" in ver.columns else math.nan
    signs = _num(ver["sign_agreement"].iloc[0]) if "sign_agreement" in ver.columns else math.nan
    ranking = ""
    if math.isfinite(rho) and math.isfinite(signs):
        ranking = f"; rho {rho:.2f}, signs {signs:.0%}"
    if len(row) == 0:
        return Part(f"{names[0]} not retrained{ranking}", "", link)
    est, act = _num(row["predicted"].iloc[0]), _num(row["actual"].iloc[0])
    ratio = act / est if est else math.nan
    top_ok = math.isfinite(ratio) and CONFIRM_RATIO[0] <= ratio <= CONFIRM_RATIO[1]
    if "confirmed" in ver.columns and pd.notna(ver["confirmed"].iloc[0]):
        # the trace's own verdict (tracer.analysis.verification), so report and terminal agree
        rank_ok, known = bool(ver["confirmed"].iloc[0]), True
    else:  # runs stored before the verdict was recorded
        rank_ok, known = math.isfinite(signs) and signs >= RANK_SIGNS, math.isfinite(signs)
    if top_ok and (rank_ok or not known):
        verdict, word = "yes", "confirmed"
    elif top_ok:
        verdict, word = "mixed", "top source only"
    else:
        verdict, word = "no", "not confirmed"
    return Part(f"{word}: {act:+.3g} (est. {est:+.3g}){ranking}", verdict, link)


def overall_change(changes: pd.DataFrame | None) -> pd.Series | None:
    """The first-to-last change (the only one when two periods were measured), if any."""
    if changes is None or len(changes) == 0 or not {"mix_part", "within_part", "total"} <= set(changes.columns):
        return None
    if "overall" in changes.columns and changes["overall"].fillna(False).astype(bool).any():
        return changes[changes["overall"].fillna(False).astype(bool)].iloc[0]
    return changes.iloc[0] if len(changes) == 1 else None


def drift_part(run: RunData, test: str, link: str) -> Part:
    if test not in run.tests_of("drift_tests"):
        return Part("not followed over time in this run", "none")
    periods = run.table(f"drift_{test}_periods")
    if periods is None:
        reason = run.not_measured("drift", test) or "the run holds no drift table"
        return Part(f"not measured: {reason}", "", link)
    ch = overall_change(run.table(f"drift_{test}_changes"))
    if ch is None:
        measured = int(periods["measured"].fillna(False).astype(bool).sum()) if "measured" in periods.columns else 0
        return Part(f"not decomposed: {measured} of {len(periods)} periods measured, two or more needed", "", link)
    mix, within, total = _num(ch["mix_part"]), _num(ch["within_part"]), _num(ch["total"])
    share = _num(ch.get("mix_share"))
    if not math.isfinite(share):
        return Part(f"not split (the reweighted period was not measured): {total:+.3g}", "", link)
    if share >= MIX_SHARES[1]:
        where, verdict = "in the mix of sources", "mix"
    elif share <= MIX_SHARES[0]:
        where, verdict = "within the sources", "within"
    else:
        where, verdict = "both mix and sources", "both"
    return Part(f"{where}: mix {mix:+.2g}, within {within:+.2g} of {total:+.2g}", verdict, link)


def findings(run: RunData, model: str, preferred_slice: str) -> list[Finding]:
    """One finding per test of the run, in the order of the measure table (then traced, drifted)."""
    measure = run.table("measure")
    names: list[str] = []
    if measure is not None and "test" in measure.columns:
        names += list(dict.fromkeys(measure["test"]))
    names += [t for t in run.tests_of("trace_tests") + run.tests_of("drift_tests") if t not in names]
    out = []
    for test in names:
        rows = None
        if measure is not None and {"test", "model"} <= set(measure.columns):
            rows = measure[(measure["test"] == test) & (measure["model"] == model)]
        row = headline_slice(rows, preferred_slice)
        gap = _num(row.get("gap")) if row is not None else math.nan
        src, carried = source_part(run, test, gap, "#" + anchor("trace", test))
        out.append(Finding(test, anchor("finding", test), association_part(row, "#" + anchor("test", test)), src,
                           verification_part(run, test, carried, "#" + anchor("trace", test)),
                           drift_part(run, test, "#" + anchor("drift", test))))
    return out
