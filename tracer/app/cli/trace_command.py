"""The trace command: where a test's association comes from."""

from __future__ import annotations

import click

from tracer.app.cli.views import chosen_tables, emit, show_option
from tracer.app.cli.group import cli, progress_on
from tracer.app.cli.corpus_commands import check_layout, passages_view
from tracer.app.cli.options import (LAYOUT_OPTION, PER_DOC_OPTION, SEEDS_OPTION, TOP_DOCUMENTS_OPTION, counting_options,
                                    model_options, one_slice, one_slice_option,
                                    one_test, open_workspace, output_options, tests_file_option, workspace_option)
from tracer.app.texts import CAUTIONS, ESTIMATE_NOTE

TABLES = ["sources", "documents", "passages", "first-order", "verification"]
DEFAULT = ["sources", "documents", "passages", "verification"]
# terminal column order: what a reader needs first; the rest falls off at 100 columns
FIRST = {"sources": ["source", "token_share", "contribution", "contribution_gap", "share_ratio", "documents",
                     "tokens"],
         "documents": ["rank", "doc_id", "source", "time", "contribution", "contribution_gap", "title", "tokens",
                       "pairs"],
         "verification": ["removed", "predicted", "actual"]}


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_name", required=True, help="The (two-target) test to trace.")
@one_slice_option("The slice to trace in.")
@counting_options
@model_options
@TOP_DOCUMENTS_OPTION
@PER_DOC_OPTION
@LAYOUT_OPTION
@click.option("--candidates", type=click.IntRange(min=1), default=200, show_default=True,
              help="Documents re-ranked exactly after the linear estimate.")
@click.option("--verify", type=click.IntRange(min=0), default=0, show_default=True,
              help="Retrain without the top K sources and document sets and compare (0: no verification).")
@click.option("--rank-by", type=click.Choice(["gap", "effect_size"]), default="gap", show_default=True,
              help="Rank by the raw gap (default; the effect size saturates near its ceiling) or by d.")
@SEEDS_OPTION
@show_option(TABLES, DEFAULT[:3], "documents", " and verification with --verify")
@output_options
def trace(workspace, tests_file, test_name, slice_spec, counts, model, top, per_doc, layout, candidates, verify,
          rank_by, seeds, show, out):
    """Link a test's association to the sources, documents and passages that carry it.

    Example:  tracer trace -w work/ --tests configs/demo_tests.toml --test gazette_outlet --verify 5
    """
    from tracer.analysis.trace import TraceSettings, trace as run_trace
    from tracer.errors import SettingError
    chosen_tables(show, TABLES, DEFAULT, "documents", out.fmt)  # a wrong --show fails before the work
    check_layout(layout, out)
    if verify == 0 and "verification" in show:
        raise SettingError("there is no verification table without --verify K")
    ws = open_workspace(workspace)
    settings = TraceSettings(top=top, candidates=candidates, verify=verify, rank_by=rank_by,
                             passages_per_doc=per_doc, seeds=seeds, seed=model.seed)
    result = run_trace(ws, one_test(tests_file, test_name), model.name, one_slice(ws, slice_spec), counts,
                       model.settings, settings, progress=progress_on())
    default = DEFAULT if result.verification is not None else DEFAULT[:3]
    emit(out, show, tables=TABLES, default=default, main="documents", get=lambda name: _table(result, name),
               document=lambda: _document(result), text=lambda names: _text(result, names, out, layout))


def _table(result, name: str):
    from tracer.errors import SettingError
    if name == "verification":
        if result.verification is None:
            raise SettingError("there is no verification table without --verify K")
        return result.verification.rows
    return {"sources": result.sources, "documents": result.documents, "passages": result.passages,
            "first-order": result.first_order}[name]


def _document(result) -> dict:
    from tracer.app.output import to_records
    v = result.verification
    return {"test": result.test, "model": result.model, "slice": result.slice, "effect_size": result.effect_size,
            "gap": result.gap, "rank_by": result.rank_by, "estimates": ESTIMATE_NOTE, "notes": result.notes,
            "sources": to_records(result.sources), "documents": to_records(result.documents),
            "passages": to_records(result.passages), "first_order": to_records(result.first_order),
            "verification": None if v is None else {
                "quantity": v.quantity, "rows": to_records(v.rows), "pearson_r": v.pearson_r,
                "spearman_rho": v.spearman_rho, "sign_agreement": v.sign_agreement,
                "pearson_r_without_largest": v.pearson_r_without_largest, "largest": v.largest,
                "confirmed": v.confirmed, "headline": v.headline()},
            "view_effect_size": result.view_effect_size, "view_gap": result.view_gap}


def _text(result, names: list[str], out, layout: str) -> str:
    from tracer.app.output import render, wrap
    width = out.width
    parts = [wrap(f"{result.headline()}\n{ESTIMATE_NOTE}", width)]
    for name in names:
        df = _table(result, name)
        parts.append(f"\n== {name} ==\n")
        if name == "passages":
            parts.append(passages_view(df, out, layout))
            continue
        first = FIRST.get(name, [])
        parts.append(render(df[[c for c in first if c in df.columns] + [c for c in df.columns if c not in first]],
                            width=width))
        v = result.verification
        if name == "verification":
            parts.append(wrap(v.headline(), width))
    parts.append("\n" + "".join(wrap(f"Note: {n}", width) for n in result.notes) + wrap(CAUTIONS, width))
    return "".join(parts)
