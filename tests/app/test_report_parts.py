"""The report's parts without a pipeline run: cell formats, footnotes, findings rules, figures, a minimal run."""

import json
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats

from tracer.app.report import figures
from tracer.app.report.findings import carriers, drift_part, verification_part
from tracer.app.report.html import build_report, render_report
from tracer.app.report.run_data import RunData
from tracer.app.report.tables import Col, cell_text, make_table, significant


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=-1e5, max_value=1e5, allow_nan=False).filter(lambda v: abs(v) >= 1e-4))
def test_significant_digits_agree_with_pythons_g_format(v):
    # reference: Python's own "%.3g" rounds to 3 significant digits (the format spec mini-language)
    assert float(significant(v, 3)) == float(f"{v:.3g}")
    assert float(significant(v, 2)) == float(f"{v:.2g}")
    assert "e" not in significant(v, 3)


def test_counts_print_as_integers_and_effect_sizes_with_two_decimals():
    assert cell_text(6.0, "int") == "6" and cell_text(810661.0, "int") == "810,661"
    assert cell_text(1950.0, "year") == "1950"
    assert cell_text(1.966813, "d") == "1.97" and cell_text(-0.001, "d") == "0.00"
    assert cell_text(0.111922, "pct") == "11.2%"
    assert cell_text(float("nan"), "d") == "" and cell_text(None, "int") == "" and cell_text([], "list") == ""


def test_warnings_become_numbered_footnotes_in_a_notes_column():
    long = "the estimate lies outside its bootstrap interval: " + "a reason " * 20
    df = pd.DataFrame({"slice": ["all", "a", "b"], "effect_size": [1.0, 0.5, None], "n": [6.0, 6.0, 5.0],
                       "warning": [long, "", long], "measured": [True, True, False],
                       "reason": [None, None, "too few words"]})
    t = make_table(df, [Col("slice", "slice"), Col("effect_size", "d", "d"), Col("n", "n", "int")],
                   unmeasured="effect_size")
    assert t.head == ["slice", "d", "n", "notes"]
    assert t.notes == [long, "too few words"]  # each sentence once, below the table
    assert [r[-1].text for r in t.rows] == ["1", "", "1, 2"]
    assert [r[1].text for r in t.rows] == ["1.00", "0.50", "not measured"]
    assert [r[2].text for r in t.rows] == ["6", "6", "5"]
    assert all(long not in c.text for r in t.rows for c in r)


def test_a_column_the_table_lacks_or_leaves_empty_is_not_shown():
    df = pd.DataFrame({"slice": ["all"], "q_value": [None]})
    t = make_table(df, [Col("slice", "slice"), Col("p_value", "p", "p"), Col("q_value", "q", "p")])
    assert t.head == ["slice"]
    assert make_table(pd.DataFrame(), [Col("slice", "slice")]) is None


def test_carriers_are_the_sources_whose_removal_takes_the_gap_away():
    src = pd.DataFrame({"source": ["A", "B", "C", "D"], "contribution_gap": [-0.05, -0.20, 0.01, -0.12]})
    names, share = carriers(src, 0.25)
    assert names == ["B", "D"] and share == pytest.approx(0.8)  # D takes 0.12 >= half of B's 0.20
    names, _ = carriers(src.assign(contribution_gap=-src["contribution_gap"]), -0.25)  # a negative gap
    assert names == ["B", "D"]
    assert carriers(src.assign(contribution_gap=src["contribution_gap"].abs()), 0.25) == ([], 0.0)
    assert carriers(pd.DataFrame(), 0.25)[0] == [] and carriers(src, float("nan"))[0] == []


class _Run(RunData):
    """A RunData over tables held in memory."""

    def __init__(self, tables, experiment, info=None):
        self.info, self.experiment, self._tables = info or {}, experiment, tables

    def table(self, name):
        return self._tables.get(name)


def _verification(pred, act):
    rho = stats.spearmanr(pred, act).statistic  # reference: scipy's Spearman rank correlation
    signs = float(np.mean(np.sign(pred) == np.sign(act)))
    return pd.DataFrame({"removed": [f"source={s}" for s in "ABCD"], "predicted": pred, "actual": act,
                         "spearman_rho": rho, "sign_agreement": signs})


def test_retraining_confirms_within_a_factor_two_with_the_same_sign():
    exp = {"trace_tests": ["t"]}
    ok = _Run({"trace_t_verification": _verification([-0.2, 0.01, 0.02, 0.03], [-0.25, 0.01, 0.03, 0.02])}, exp)
    part = verification_part(ok, "t", ["A"], "#x")
    assert part.verdict == "yes" and part.text.startswith("confirmed: -0.25 (est. -0.2)")
    flipped = _Run({"trace_t_verification": _verification([-0.2, 0.01, 0.02, 0.03], [0.1, 0.01, 0.03, 0.02])}, exp)
    assert verification_part(flipped, "t", ["A"], "#x").verdict == "no"
    others = _Run({"trace_t_verification": _verification([-0.2, 0.01, 0.02, 0.03], [-0.2, -0.01, -0.03, -0.02])},
                  exp)
    part = verification_part(others, "t", ["A"], "#x")
    assert part.verdict == "mixed" and "signs 25%" in part.text


@pytest.mark.parametrize("mix, within, phrase", [(0.27, 0.08, "in the mix of sources"),
                                                 (-0.03, 0.084, "within the sources"),
                                                 (0.1, 0.1, "both mix and sources")])
def test_a_drift_is_placed_in_the_mix_or_within_the_sources(mix, within, phrase):
    changes = pd.DataFrame({"from": ["p1", "p1"], "to": ["p2", "p3"], "overall": [False, True],
                            "total": [0.0, mix + within], "mix_part": [0.0, mix], "within_part": [0.0, within],
                            "mix_share": [None, abs(mix) / (abs(mix) + abs(within))]})
    run = _Run({"drift_t_periods": pd.DataFrame({"period": ["p1", "p2", "p3"], "measured": [True] * 3}),
                "drift_t_changes": changes}, {"drift_tests": ["t"]})
    assert drift_part(run, "t", "#d").text.startswith(phrase)


def test_a_drift_without_changes_says_how_many_periods_were_measured():
    run = _Run({"drift_t_periods": pd.DataFrame({"period": ["p1", "p2"], "measured": [False, False]}),
                "drift_t_changes": pd.DataFrame()}, {"drift_tests": ["t"]})
    assert drift_part(run, "t", "#d").text.startswith("not decomposed: 0 of 2 periods")


@pytest.mark.parametrize("name", ["$\\frac{1}{$", "$x^2$ and $", "$$", "a\\$b$"])
def test_figure_labels_are_drawn_as_text_never_as_mathtext(name):
    # unbalanced or bad TeX makes matplotlib's mathtext parser raise; with parse_math off it is plain text
    src = pd.DataFrame({"source": [name, "Other"], "contribution_gap": [-0.2, 0.01]})
    assert figures.sources_chart(src, name).png[:4] == b"\x89PNG"
    rows = pd.DataFrame({"model": "ppmi-svd", "slice": [f"source={name}", "all"], "effect_size": [0.5, 1.0],
                         "ci_low": [0.1, 0.8], "ci_high": [0.9, 1.2]})
    assert figures.effects_chart(rows, name) is not None
    periods = pd.DataFrame({"period": ["a", "a"], "source": [name, "Other"], "tokens": [10, 20]})
    assert figures.corpus_chart(periods) is not None


def test_forest_plot_labels_name_the_slice_and_the_title_names_the_one_model():
    plt = figures._plt()
    rows = pd.DataFrame({"model": "ppmi-svd", "slice": ["all", "source=A"], "effect_size": [0.5, 1.0],
                         "ci_low": [0.1, 0.8], "ci_high": [0.9, 1.2]})
    with plt.rc_context(figures.PLAIN_TEXT):
        fig = figures.effects_chart.__wrapped__(plt, rows, "t")
        labels = [t.get_text() for t in fig.axes[0].get_yticklabels()]
        title = fig.axes[0].get_title()
    plt.close(fig)
    assert labels == ["all", "source=A"] and title == "t (ppmi-svd)"


def test_figures_need_their_columns_and_say_none_otherwise():
    empty = pd.DataFrame()
    assert figures.decomposition_chart(empty, "t") is None  # a drift with no measured change
    assert figures.decomposition_chart(pd.DataFrame({"from": ["a"], "to": ["b"]}), "t") is None
    assert figures.trajectory_chart(pd.DataFrame({"period": ["a"], "gap": [None]}), "t") is None
    assert figures.verification_chart(empty, "t") is None and figures.corpus_chart(None) is None


def _minimal_run(folder, tables: dict, info: dict | None = None):
    (folder / "tables").mkdir(parents=True)
    (folder / "run.json").write_text(json.dumps(info or {"run_id": "r1"}), encoding="utf-8")
    for name, records in tables.items():
        (folder / "tables" / f"{name}.json").write_text(json.dumps(records), encoding="utf-8")
    return folder


def test_a_run_with_almost_nothing_still_has_a_report(tmp_path):
    folder = _minimal_run(tmp_path / "run", {"measure": [{"test": "t", "model": "ppmi-svd", "slice": "all",
                                                          "measured": False, "reason": "no target word known"}]},
                          {"run_id": "r1", "experiment": {"trace_tests": ["t"], "drift_tests": ["t"]},
                           "not_measured": [{"part": "trace", "name": "t", "reason": "WordNotInVocabulary: zz"},
                                            {"part": "drift", "name": "t, u", "reason": "SettingError: periods"}]})
    html = build_report(folder)
    assert "not measured: no target word known" in html
    assert "not traced: WordNotInVocabulary: zz" in html and "SettingError: periods" in html
    assert "not proof of discrimination" in html and "qualified reviewers and the applicable law" in html


def test_correlate_results_appear_when_the_run_has_them(tmp_path):
    summary = [{"model": "ppmi-svd", "slice": "all", "view": "embedding", "column": "share", "n_words": 4,
                "words_missing": ["zz"], "pearson_r": 0.712, "pearson_p": 0.2, "pearson_ci_low": 0.1,
                "pearson_ci_high": 0.9, "spearman_rho": 0.8, "spearman_p": 0.2, "spearman_ci_low": 0.2,
                "spearman_ci_high": 1.0}]
    points = [{"model": "ppmi-svd", "slice": "all", "view": "embedding", "word": w, "value": v, "score": s}
              for w, v, s in (("a", 1, 0.1), ("b", 2, 0.3), ("c", 3, 0.2), ("d", 4, 0.5))]
    folder = _minimal_run(tmp_path / "run", {"correlate_jobs": summary, "correlate_jobs_points": points})
    html, charts = render_report(folder)
    assert 'id="correlate"' in html and "0.71" in html and "not in the model: zz" in html
    assert [c.alt for c in charts] == ["Correlation of jobs with share"]
    bare = _minimal_run(tmp_path / "bare", {})
    assert 'id="correlate"' not in build_report(bare)


def test_scatter_plot_writes_a_png_with_dollar_signs_in_words(tmp_path):
    points = pd.DataFrame({"model": "m", "slice": "all", "view": "embedding", "word": ["$a", "b$"],
                           "value": [1.0, 2.0], "score": [0.1, 0.2]})
    figures.scatter_plot(points, "share $", tmp_path / "s.png")
    assert (tmp_path / "s.png").read_bytes()[:4] == b"\x89PNG"


def test_tables_stored_under_another_file_name_are_found_through_run_json(tmp_path):
    # a test name that cannot be a file name is stored under a safe stem, named in run.json's "tables"
    name = "a/b $x$"
    sources = [{"source": "Gazette", "contribution_gap": -0.2}, {"source": "Other", "contribution_gap": 0.01}]
    measure = [{"test": name, "model": "ppmi-svd", "slice": "all", "measured": True, "effect_size": 1.2,
                "ci_low": 1.0, "ci_high": 1.4, "gap": 0.25}]
    folder = _minimal_run(tmp_path / "run", {"measure": measure, "trace-stem-1": sources},
                          {"run_id": "r1", "experiment": {"trace_tests": [name]},
                           "tables": {f"trace_{name}_sources": "trace-stem-1"}})
    html = build_report(folder)
    assert "Gazette: -0.2 (80% of the gap)" in html and "a/b $x$" in html


def test_the_report_follows_the_trace_verdict_when_the_run_recorded_it():
    # the trace's own rule (tracer.analysis.verification.CONFIRM) decides, so report and terminal agree:
    # signs 100% and the top source within a factor two, but the trace said "not confirmed"
    exp = {"trace_tests": ["t"]}
    table = _verification([-0.2, 0.01, 0.02, 0.03], [-0.25, 0.01, 0.03, 0.02])
    said_no = _Run({"trace_t_verification": table.assign(confirmed=False)}, exp)
    assert verification_part(said_no, "t", ["A"], "#x").verdict == "mixed"
    said_yes = _Run({"trace_t_verification": table.assign(confirmed=True)}, exp)
    assert verification_part(said_yes, "t", ["A"], "#x").verdict == "yes"
