"""Commands that measure tests: measure, correlate, ablate, plan."""

from __future__ import annotations

from pathlib import Path

import click

from tracer.app.cli.group import cli, progress_on, say, steps
from tracer.app.cli.options import (DIM_OPTION, check_out, counting_options, load_tests, measuring_options, model_options,
                                    one_slice, one_slice_option, one_test, open_workspace, output_options,
                                    slice_options, test_names_option, tests_file_option, workspace_option)
from tracer.app.commands import distinct_warnings, read_drop_list, summary_view
from tracer.app.texts import CAUTIONS, measure_legend
from tracer.app.cli.views import chosen_tables, emit, show_option

@cli.command()
@workspace_option()
@tests_file_option()
@test_names_option()
@slice_options
@counting_options
@measuring_options
@click.option("--vectors", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also measure these vectors (word2vec text, or binary if the name ends in .bin); "
                   "alone unless --by or --slice is given.")
@click.option("--show", type=click.Choice(["summary", "words", "leave-one-out"]), default="summary",
              show_default=True, help="Which table to print.")
@output_options
def measure(workspace, tests_file, test_names, slices, counts, model, measuring, vectors, show, out):
    """Measure association tests on each slice: effect size, p-value, bootstrap interval, PMI view.

    Example:  tracer measure -w work/ --tests configs/demo_tests.toml --by time:10y --format json
    """
    from tracer.analysis.measure import measure as run_measure
    from tracer.provenance.vectors_io import read_word2vec_format
    ws = open_workspace(workspace)
    tests = load_tests(tests_file, test_names)
    ext = read_word2vec_format(vectors) if vectors else None
    # with --vectors alone only those are measured; with slices too, both side by side
    chosen = slices.resolve(ws) if (slices.given or ext is None) else []
    result = run_measure(ws, tests, model.name, chosen, counts, model.settings, measuring, vectors=ext,
                         progress=progress_on())
    table = {"summary": result.summary, "words": result.words, "leave-one-out": result.leave_one_out}[show]
    if out.fmt != "table" or show != "summary" or not len(table):
        out.table(table)
        return
    out.table(summary_view(table, out.wide), notes=[f"Warning: {w}" for w in distinct_warnings(table["warning"])],
              legend=measure_legend(table["std_convention"].iloc[0], measuring.bootstrap) + CAUTIONS)


CORRELATE_COLUMNS = ["view", "slice", "pearson_r", "pearson_ci_low", "pearson_ci_high", "pearson_p", "spearman_rho",
                     "spearman_ci_low", "spearman_ci_high", "spearman_p", "n_words", "words_missing"]


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_name", required=True, help="The test whose attribute sets score each word.")
@click.option("--table", "table_file", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="CSV with a header: a word column and a numeric column.")
@click.option("--word-column", default="word", show_default=True, help="The column of the CSV holding the words.")
@click.option("--value-column", required=True, help="The numeric column to correlate with.")
@slice_options
@counting_options
@model_options
@click.option("--resamples", type=click.IntRange(min=0), default=1000, show_default=True,
              help="Resamples of the words (not of documents) for the intervals of the correlations.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Write a scatter of the words (PNG).")
@output_options
def correlate(workspace, tests_file, test_name, table_file, word_column, value_column, slices, counts, model,
              resamples, plot, out):
    """Correlate each word's association score with a numeric column of a CSV, per slice.

    Example:  tracer correlate -w work/ --tests configs/demo_tests.toml --test occupations
              --table corpora_demo/occupation_shares.csv --word-column occupation --value-column share_women
    """
    from tracer.app.commands import correlation
    from tracer.app.report.figures import scatter_plot
    ws = open_workspace(workspace)
    summary, points = correlation(ws, one_test(tests_file, test_name), table_file, word_column, value_column,
                                  steps(slices.resolve(ws), "correlate", "slices"), model, counts,
                                  resamples=resamples, progress=progress_on())
    if plot is not None:
        scatter_plot(points, value_column, plot)
        say(f"wrote {plot}")
    out.table(summary, first=CORRELATE_COLUMNS)


ABLATE_COLUMNS = ["run", "test", "effect_size", "change", "change_ci_low", "change_ci_high", "ci_low", "ci_high",
                  "p_value", "q_value", "gap", "change_interval", "documents_dropped", "tokens_dropped", "slice", "effect_size_seed_sd"]


@cli.command()
@workspace_option()
@tests_file_option()
@test_names_option()
@click.option("--drop", "drops", multiple=True, help="Documents to drop, as a slice: source=NAME or time=A..B "
              "(repeatable).")
@click.option("--drop-docs", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="File of document ids to drop, one per line (tracer plan --drop-list writes one).")
@one_slice_option("The slice to measure in.")
@counting_options
@measuring_options
@output_options
def ablate(workspace, tests_file, test_names, drops, drop_docs, slice_spec, counts, model, measuring, out):
    """Retrain without some sources, documents or years and re-measure: the effect before and after.

    Example:  tracer ablate -w work/ --tests configs/demo_tests.toml --test gazette_outlet --drop source=Gazette
    """
    from tracer.analysis.counterfactual import ablate as run_ablate, drop_mask
    ws = open_workspace(workspace)
    tests = load_tests(tests_file, test_names)
    mask, what = drop_mask(ws, list(drops), read_drop_list(drop_docs))
    res = run_ablate(ws, tests, model.name, one_slice(ws, slice_spec), mask, what, counts, model.settings, measuring)
    if out.fmt == "table":
        cols = [c for c in ABLATE_COLUMNS if c in res.columns]
        res = res[cols + [c for c in res.columns if c not in cols]] if out.wide else res[cols]
    out.table(res)


PLAN_TABLES = ["summary", "rounds", "removed-by-source", "test-words-removed", "frequent-words-falling",
               "usefulness", "steps"]
PLAN_DEFAULT = ["summary", "rounds", "removed-by-source", "test-words-removed", "usefulness"]


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_name", required=True, help="The (two-target) test to bring down.")
@click.option("--goal", type=click.FloatRange(min=0), required=True, help="Target bound on |d|.")
@click.option("--unit", type=click.Choice(["document", "source"]), default="document", show_default=True,
              help="What the plan removes: single documents or whole sources.")
@one_slice_option()
@click.option("--max-steps", type=click.IntRange(min=1), default=500, show_default=True,
              help="At most this many documents (or sources) in the plan.")
@counting_options
@DIM_OPTION
@click.option("--drop-list", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also write the ids of the documents the plan drops, one per line (for ablate --drop-docs).")
@click.option("--write-corpus", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also write the filtered corpus (JSONL with the original fields).")
@click.option("--interval-replicates", type=click.IntRange(min=0), default=0, show_default=True,
              help="Document-bootstrap replicates of the filtered corpus: an interval for the verified effect.")
@click.option("--goal-on-interval", is_flag=True,
              help="The whole interval must lie within the goal (needs --interval-replicates 2 or more).")
@click.option("--require-goal", is_flag=True, help="Exit with an error (code 1) when the goal is not reached.")
@show_option(PLAN_TABLES, PLAN_DEFAULT, "rounds")
@output_options
def plan(workspace, tests_file, test_name, goal, unit, slice_spec, max_steps, counts, dim, drop_list,
         write_corpus, interval_replicates, goal_on_interval, require_goal, show, out):
    """Find a small set of documents (or sources) whose removal brings |d| to the goal, and verify it.

    Example:  tracer plan -w work/ --tests configs/demo_tests.toml --test gazette_outlet --goal 0.5
              --drop-list drop.txt
    """
    from tracer.analysis.plan import plan as run_plan
    from tracer.core.ppmi_svd import PpmiSvdSettings
    for path in (drop_list, write_corpus):
        if path is not None:
            check_out(path)
    chosen_tables(show, PLAN_TABLES, PLAN_DEFAULT, "rounds", out.fmt)  # a wrong --show fails before the work
    ws = open_workspace(workspace)
    sl = one_slice(ws, slice_spec)
    p = run_plan(ws, one_test(tests_file, test_name), sl, goal, unit=unit, max_steps=max_steps, counts=counts,
                 settings=PpmiSvdSettings(dim=dim), bootstrap=interval_replicates, on_interval=goal_on_interval)
    _write_plan_files(ws, sl, p, drop_list, write_corpus)
    _show_plan(p, show, out)
    if require_goal and not p.reached:
        from tracer.errors import GoalNotReached
        raise GoalNotReached(p.message)


def _write_plan_files(ws, sl, p, drop_list: Path | None, write_corpus: Path | None) -> None:
    from tracer.analysis.counterfactual import write_filtered_corpus
    from tracer.files import write_atomic
    if drop_list is not None:
        ids = ws.documents["doc_id"].to_numpy()[p.doc_indices]
        write_atomic(drop_list, "".join(f"{i}\n" for i in ids))
        say(f"wrote {len(ids)} document ids to {drop_list}")
    if write_corpus is not None:
        keep = sl.weights > 0
        keep[p.doc_indices] = False
        n = write_filtered_corpus(ws, keep, write_corpus)
        say(f"wrote {n} documents to {write_corpus}")


def _show_plan(p, show: tuple[str, ...], out) -> None:
    from tracer.app.commands import plan_summary, plan_tables
    from tracer.app.output import render, render_mapping, to_records, wrap
    summary, tables = plan_summary(p), plan_tables(p)

    def text(names: list[str]) -> str:
        parts = [render_mapping(summary, width=out.width) if name == "summary"
                 else f"== {name.replace('-', ' ')} ==\n" + render(tables[name], width=out.width) for name in names]
        return wrap(p.message, out.width) + "\n".join(parts) + wrap("\npredicted_effect is an estimate (model subspace held fixed); verified_effect "
                                       "comes from retraining without the plan.\n" + CAUTIONS, out.width)

    emit(out, show, tables=PLAN_TABLES, default=PLAN_DEFAULT, main="rounds", get=tables.get, text=text,
         document=lambda: {**summary, "message": p.message, "removed_items": p.removed,
                           **{k.replace("-", "_"): to_records(v) for k, v in tables.items() if k != "summary"}})
