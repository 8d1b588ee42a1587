"""The drift command: how an association, or a word, moved from period to period."""

from __future__ import annotations

import click

from tracer.app.cli.views import chosen_tables, emit, show_option
from tracer.app.commands import known_words
from tracer.app.cli.group import cli, progress_on
from tracer.app.cli.options import (NEIGHBOURS_OPTION, counting_options, load_tests, measuring_options,
                                    open_workspace, output_options,
                                    test_names_option, tests_file_option, words_of, workspace_option)
from tracer.app.texts import CAUTIONS, DRIFT_LEGEND

TABLES = ["periods", "trend", "changes", "sources"]
DEFAULT = ["periods", "trend", "changes"]
WORD_TABLES = ["change", "neighbours"]
FIRST = {"periods": ["period", "effect_size", "ci_low", "ci_high", "gap", "gap_ci_low", "gap_ci_high",
                     "change_significant", "tokens", "measured", "reason", "dropped_words"],
         "changes": ["from", "to", "total", "mix_part", "within_part", "mix_share", "overall"]}


@cli.command()
@workspace_option()
@tests_file_option(required=False)
@test_names_option()
@click.option("--words", default=None, help="Comma-separated words: their change across aligned periods instead.")
@click.option("--by", default="time:10y", show_default=True, help="The periods: time:Ny or year.")
@counting_options
@measuring_options
@click.option("--min-tokens", type=click.IntRange(min=1), default=20_000, show_default=True,
              help="A period with fewer tokens is not measured.")
@NEIGHBOURS_OPTION
@show_option(TABLES + WORD_TABLES, DEFAULT, "periods", "; with --words: change, neighbours")
@output_options
def drift(workspace, tests_file, test_names, words, by, counts, model, measuring, min_tokens, n_neighbours, show,
          out):
    """How an association (or a word) moved from period to period, and why.

    Example:  tracer drift -w work/ --tests configs/demo_tests.toml --test tribune_mix --by time:10y
    """
    from tracer.app.commands import check_periods, drift_chosen
    from tracer.corpus.slices import slices_by
    from tracer.errors import InputError
    ws = open_workspace(workspace)
    check_periods(by)
    _check_show(show, WORD_TABLES if words else TABLES, "with --words" if words else "of a test's drift")
    chosen_tables(show, WORD_TABLES if words else TABLES, [], "", out.fmt)  # a wrong --show fails before the work
    periods = slices_by(ws, by)
    if words:
        _word_drift(ws, words, periods, counts, model, n_neighbours, show, out)
        return
    if tests_file is None:
        raise InputError("give --tests FILE (and --test NAME), or --words")
    from tracer.analysis.drift import drift_tests
    tests = load_tests(tests_file, test_names)
    results = list(drift_tests(ws, drift_chosen(tests, bool(test_names)), model.name, periods, counts, model.settings,
                               measuring, min_tokens=min_tokens, progress=progress_on()).values())
    emit(out, show, tables=TABLES, default=DEFAULT, main="periods",
               get=lambda name: _concat(results, name), document=lambda: _document(results),
               text=lambda names: _text(results, names, out.width))


def _word_drift(ws, words, periods, counts, model, n_neighbours, show, out) -> None:
    from tracer.analysis.drift import word_drift
    from tracer.app.output import render, wrap
    kept, skipped = known_words(ws.normalize_words(words_of(words)), ws.vocab.index, "the corpus at all")
    change, near, notes = word_drift(ws, kept, periods, counts, model.ppmi_svd, neighbours=n_neighbours)
    notes = skipped + list(notes)
    from tracer.app.output import to_records
    tables = {"change": change, "neighbours": near}
    emit(out, show, tables=WORD_TABLES, default=WORD_TABLES, main="change", get=tables.get,
               document=lambda: {"change": to_records(change), "neighbours": to_records(near), "notes": notes},
               text=lambda names: "\n".join(render(tables[n], width=out.width) for n in names)
               + "".join(wrap(f"Note: {n}", out.width) for n in notes))


def _check_show(show, allowed: list[str], what: str) -> None:
    from tracer.errors import SettingError
    wrong = [s for s in show if s not in allowed + ["all"]]
    if wrong:
        raise SettingError(f"--show {wrong[0]}: the tables {what} are {', '.join(allowed)}")


def _table(r, name: str):
    import pandas as pd
    return {"periods": r.periods, "trend": pd.DataFrame([r.trend]), "changes": r.changes,
            "sources": r.source_parts}[name]


def _concat(results, name: str):
    import pandas as pd
    return pd.concat([_table(r, name).assign(test=r.test) for r in results], ignore_index=True)


def _document(results) -> dict | list:
    from tracer.app.output import to_records
    doc = [{"test": r.test, "model": r.model, "periods": to_records(r.periods), "trend": r.trend,
            "changes": to_records(r.changes), "source_shares": to_records(r.source_parts), "notes": r.notes}
           for r in results]
    return doc if len(doc) > 1 else doc[0]


def _text(results, names: list[str], width: int | None) -> str:
    from tracer.app.output import render, wrap
    parts = []
    for r in results:
        parts.append(f"== {r.test} ({r.model}) ==\n")
        for name in names:
            df = _table(r, name)
            first = FIRST.get(name, [])
            df = df[[c for c in first if c in df.columns] + [c for c in df.columns if c not in first]]
            parts.append(f"-- {name} --\n" + render(df, width=width))
        parts += [wrap(f"Note: {n}", width) for n in r.notes]
    parts.append(wrap(DRIFT_LEGEND + "\n" + CAUTIONS, width))
    return "".join(parts)
