"""Commands on the stored corpus: ingest, info, pmi, passages."""

from __future__ import annotations

from pathlib import Path

import click

from tracer.app.cli.group import cli, progress_on, say
from tracer.app.commands import known_words
from tracer.app.cli.options import (LAYOUT_OPTION, PER_DOC_OPTION, TOP_DOCUMENTS_OPTION, counting_options, one_slice,
                                    one_slice_option, open_workspace, option_group, output_options, slice_options,
                                    words_of, workspace_option)
from tracer.corpus.streams import ReadLimits

FIELD_OPTIONS = [
    click.option("--text-field", default="text", show_default=True, help="Field holding the text."),
    click.option("--id-field", default="id", show_default=True, help="Field holding the document id."),
    click.option("--source-field", default="source", show_default=True, help="Field holding the source."),
    click.option("--time-field", default=None,
                 help="Field holding the time (required when named). Default: time, else date, if present."),
    click.option("--title-field", default="title", show_default=True, help="Field holding the title."),
]


def _field_map(v: dict) -> dict:
    from tracer.corpus.ingest import FieldMap
    return {"fields": FieldMap(text=v["text_field"], id=v["id_field"], source=v["source_field"],
                               time=v["time_field"], title=v["title_field"])}


TOKENIZER_OPTIONS = [
    click.option("--keep-case", is_flag=True, help="Do not lower-case (new workspaces only)."),
    click.option("--normalization", type=click.Choice(["NFKC", "NFC", "NFD", "NFKD", "none"]), default=None,
                 help="Unicode normal form before tokenizing (new workspaces only; default NFKC)."),
    click.option("--case-rule", type=click.Choice(["fold", "turkish"]), default=None,
                 help="Case rule (new workspaces only): Unicode case folding (default), or Turkish/Azeri dotted "
                      "and dotless i."),
]


def _tokenizer(v: dict) -> dict:
    from tracer.corpus.tokenize import TokenizerSettings
    if not (v["keep_case"] or v["normalization"] or v["case_rule"]):
        return {"tokenizer": None}  # the workspace's own settings (or the defaults for a new one)
    return {"tokenizer": TokenizerSettings(lowercase=not v["keep_case"], normalization=v["normalization"] or "NFKC",
                                           case_rule=v["case_rule"] or "fold")}


_MIB = 2 ** 20


def _plain(x: float) -> int | float:
    """A whole number as an int, so --help shows ``64``, not ``64.0``."""
    return int(x) if x == int(x) else x


def _mb(n_bytes: int) -> int | float:
    """A byte count in MB, as the limit options take it."""
    return _plain(n_bytes / _MIB)


def _limit_options() -> list:
    # the defaults are ReadLimits' own, so the library and the command line cannot drift apart
    d = ReadLimits()
    return [
        click.option("--max-record-mb", type=click.FloatRange(min=0.001), default=_mb(d.max_record_bytes),
                     show_default=True, help="Largest record (also the CSV field limit); larger ones are rejected."),
        click.option("--max-line-mb", type=click.FloatRange(min=0.001), default=_mb(d.max_line_bytes),
                     show_default=True, help="Longest line of a JSONL or CSV file; longer ones are rejected unread."),
        click.option("--max-depth", type=click.IntRange(min=1), default=d.max_depth, show_default=True,
                     help="Deepest nesting of a JSON record."),
        click.option("--max-gzip-ratio", type=click.FloatRange(min=1, min_open=True), default=_plain(d.max_gzip_ratio),
                     show_default=True,
                     help="Largest decompressed/compressed size of a .gz input (checked past "
                          f"{_mb(d.gzip_ratio_floor_bytes)} MB)."),
    ]


LIMIT_OPTIONS = _limit_options()


def _limits(v: dict) -> dict:
    return {"limits": ReadLimits(max_record_bytes=int(v["max_record_mb"] * _MIB),
                                 max_line_bytes=int(v["max_line_mb"] * _MIB),
                                 max_depth=v["max_depth"], max_gzip_ratio=v["max_gzip_ratio"])}


@cli.command()
@click.argument("inputs", nargs=-1, required=True, type=click.Path(path_type=Path))
@workspace_option()
@option_group(FIELD_OPTIONS, _field_map)
@click.option("--source", "default_source", default=None,
              help="Source of records that name none (default: the input file's name).")
@click.option("--input-format", type=click.Choice(["jsonl", "csv", "txt", "parquet"]), default=None,
              help="Format of the inputs (default: from the file name).")
@click.option("--strict", is_flag=True, help="Fail on the first rejected record instead of skipping it.")
@option_group(TOKENIZER_OPTIONS, _tokenizer)
@option_group(LIMIT_OPTIONS, _limits)
@click.option("--replace", is_flag=True,
              help="Rebuild the corpus from these inputs alone (to re-read a file with other fields or settings).")
@click.option("--no-wait", is_flag=True, help="Fail at once if another command is writing to the workspace.")
@click.option("--jobs", type=click.IntRange(min=1), default=None,
              help="Worker processes that parse, validate and tokenize (default: the cores available; 1: no extra process).")
@output_options
def ingest(inputs, workspace, fields, default_source, input_format, strict, tokenizer, limits, replace, no_wait,
           jobs, out):
    """Read corpus files (JSONL, JSONL.gz, CSV, .txt folders, Parquet) into a workspace.

    Running it again on the same file changes nothing; a new file is appended.

    Example:  tracer ingest news.jsonl.gz -w work/
    """
    from tracer.app.commands import ingest_table
    from tracer.corpus.ingest import ingest as run_ingest
    summary = run_ingest(workspace, inputs, fields=fields, tokenizer=tokenizer, input_format=input_format,
                         default_source=default_source, strict=strict, progress=progress_on(), replace=replace,
                         wait=not no_wait, limits=limits, jobs=jobs, command="tracer ingest " + " ".join(map(str, inputs)))
    out.table(ingest_table(summary))
    for warning in summary.warnings:
        say(f"Warning: {warning}")
    if summary.replaced:
        say("replaced the corpus with these inputs")
    say(f"workspace {summary.workspace}: {summary.documents_total} documents, "
        f"{summary.tokens_total} tokens, {summary.vocabulary_total} word types")
    if summary.rejects:
        reasons = ", ".join(f"{k}: {v}" for k, v in summary.reject_reasons.items())
        say(f"{summary.rejects} records skipped ({reasons}); see {summary.rejects_file}")


@cli.command()
@workspace_option()
@click.option("--sources", "show_sources", is_flag=True, help="One row per source instead of the summary.")
@output_options
def info(workspace, show_sources, out):
    """Documents, tokens, vocabulary, sources and time span of a workspace.

    Example:  tracer info -w work/ --sources
    """
    from tracer.app.output import render_mapping
    ws = open_workspace(workspace)
    if show_sources:
        out.table(ws.sources_table())
    else:
        out.write(render_mapping(ws.summary(), out.fmt, width=out.width))


@cli.command()
@workspace_option()
def verify(workspace):
    """Check a workspace: its CURRENT pointer, manifest, arrays against the documents table, postings.

    Example:  tracer verify -w work/
    """
    from tracer.corpus.verify import verify_workspace
    from tracer.errors import WorkspaceError
    report = verify_workspace(workspace)
    for line in report.checked:
        click.echo(f"ok       {line}")
    for line in report.notes:
        click.echo(f"note     {line}")
    for line in report.problems:
        click.echo(f"PROBLEM  {line}")
    if not report.ok:
        raise WorkspaceError(f"workspace {workspace} has {len(report.problems)} problem(s), listed above")


CONTEXT_WORDS_OPTION = click.option("--with", "contexts", required=True,
                                    help="Comma-separated context words (in the window of WORD).")


@cli.command()
@click.argument("word")
@CONTEXT_WORDS_OPTION
@workspace_option()
@counting_options
@slice_options
@click.option("--alpha", type=click.FloatRange(0, 1, min_open=True), default=0.75, show_default=True,
              help="Context-distribution smoothing of PMI (1: none).")
@click.option("--shift", type=click.FloatRange(min=1), default=1.0, show_default=True,
              help="k of shifted PPMI, max(PMI - log k, 0).")
@output_options
def pmi(word, contexts, workspace, counts, slices, alpha, shift, out):
    """Window counts, marginals, PMI and PPMI of WORD with each context word, per slice.

    Example:  tracer pmi -w work/ nurse --with he,she,doctor --by source --format json
    """
    from tracer.analysis.pmi_table import pmi_table
    ws = open_workspace(workspace)
    kept, notes = known_words(ws.normalize_words(words_of(contexts)), ws.vocab.index, "the corpus at all")
    df = pmi_table(ws, word, kept, slices.resolve(ws), counts, alpha=alpha, shift=shift, progress=progress_on())
    if out.fmt == "json":
        df = df.drop(columns=["note"]).assign(note=df["note"].replace("", None))
    out.table(df, notes=notes)


@cli.command()
@click.argument("word")
@CONTEXT_WORDS_OPTION
@workspace_option()
@one_slice_option()
@counting_options
@TOP_DOCUMENTS_OPTION
@PER_DOC_OPTION
@LAYOUT_OPTION
@output_options
def passages(word, contexts, workspace, slice_spec, counts, top, per_doc, layout, out):
    """Passages (KWIC) where WORD co-occurs with the context words, from the documents with most such pairs.

    Example:  tracer passages -w work/ velmari --with agony,evil --top 10 --layout kwic
    """
    from tracer.analysis.passages import pair_passages
    from tracer.core.counting import build_vocab
    check_layout(layout, out)
    ws = open_workspace(workspace)
    sl = one_slice(ws, slice_spec)
    # the slice's vocabulary alone (no counting) says which context words can be looked for
    vocab = build_vocab(ws.tokens, ws.doc_offsets, sl.weights, ws.vocab.words, counts)
    kept, notes = known_words(ws.normalize_words(words_of(contexts)), vocab.index,
                              f"the vocabulary of slice {sl.name} (min count {counts.min_count})")
    df = pair_passages(ws, word, kept, sl, counts, top=top, per_doc=per_doc)
    show_passages(df, out, layout=layout, notes=notes)


def check_layout(layout: str, out) -> None:
    """--layout shapes the terminal view only; CSV and JSON carry the marks as offsets."""
    from tracer.errors import SettingError
    if layout != "reading" and out.fmt != "table":
        raise SettingError(f"--layout {layout} shapes the terminal view; --format {out.fmt} writes the passages "
                           "table, marks as character offsets")


def emphasis(out) -> str:
    """Bold marks for a terminal (unless NO_COLOR is set); carets under the text anywhere else."""
    import os
    import sys
    tty = out.path is None and sys.stdout.isatty() and not os.environ.get("NO_COLOR")
    return "bold" if tty else "caret"


def passages_view(df, out, layout: str) -> str:
    """The passages as the terminal shows them (see :mod:`tracer.app.passages_view`)."""
    from tracer.app.passages_view import passages_text
    return passages_text(df, width=out.width, layout=layout, emphasis=emphasis(out))


def show_passages(df, out, *, layout: str = "reading", notes=()) -> None:
    """Passages: in table format the reading or kwic view; else the table (marks as offsets)."""
    if out.fmt != "table":
        out.table(df, notes=notes)
        return
    from tracer.app.output import wrap
    out.write(passages_view(df, out, layout) + "".join(wrap(f"Note: {n}", out.width) for n in notes))
