"""The ``tracer`` command: parse options, call the library, print. No analysis here."""

from __future__ import annotations

import functools
import logging
import sys
import traceback
from pathlib import Path

import click

from tracer import __version__
from tracer.errors import TracerError

# ---- shared options ---------------------------------------------------------------------------


def _progress(ctx: click.Context) -> bool:
    obj = ctx.find_root().obj or {}
    return not obj.get("quiet") and sys.stderr.isatty()


def _say(ctx: click.Context, text: str) -> None:
    """A status line on stderr (not with --quiet), so stdout stays a clean result."""
    if not (ctx.find_root().obj or {}).get("quiet"):
        click.echo(text, err=True)


def workspace_option(required: bool = True):
    return click.option("-w", "--workspace", type=click.Path(file_okay=False, path_type=Path),
                        required=required, help="Workspace folder (one per corpus).")


def output_options(f):
    """--format and -o/--out, the same on every command that prints a table."""
    f = click.option("-o", "--out", type=click.Path(dir_okay=False, path_type=Path), default=None,
                     help="Write the result to this file instead of standard output.")(f)
    f = click.option("--format", "fmt", type=click.Choice(["table", "csv", "json"]), default="table",
                     show_default=True, help="Output format.")(f)
    return f


def count_options(f):
    """Counting settings shared by every command that counts or trains."""
    f = click.option("--max-vocab", type=click.IntRange(min=1), default=None,
                     help="Keep at most this many words (the most frequent).")(f)
    f = click.option("--weighting", type=click.Choice(["uniform", "harmonic", "linear"]), default="uniform",
                     show_default=True, help="Weight of a pair by distance: 1, 1/d, or word2vec-style linear.")(f)
    f = click.option("--min-count", type=click.IntRange(min=1), default=5, show_default=True,
                     help="Words rarer than this in the slice are removed before windowing.")(f)
    f = click.option("--window", type=click.IntRange(min=1), default=5, show_default=True,
                     help="Tokens each side.")(f)
    return f


def slice_options(f):
    f = click.option("--slice", "picks", multiple=True,
                     help="One slice: all, source=NAME, time=1960..1979 (repeatable).")(f)
    f = click.option("--by", multiple=True,
                     help="Slices by source, year or time:Ny, e.g. time:10y (repeatable).")(f)
    return f


def model_options(f):
    """Model choice and settings shared by every command that trains."""
    opts = [
        click.option("--model", type=click.Choice(["ppmi-svd", "word2vec"]), default="ppmi-svd", show_default=True),
        click.option("--dim", type=click.IntRange(min=1), default=100, show_default=True, help="Vector size."),
        click.option("--seed", type=int, default=None,
                     help="Random seed (default: 0 for ppmi-svd, 1 for word2vec)."),
        click.option("--eig-power", type=float, default=0.5, show_default=True, help="ppmi-svd: p in W = U S^p."),
        click.option("--alpha", type=click.FloatRange(0, 1, min_open=True), default=0.75, show_default=True,
                     help="Context-distribution smoothing of PMI."),
        click.option("--shift", type=click.FloatRange(min=1), default=1.0, show_default=True,
                     help="ppmi-svd: k of shifted PPMI."),
        click.option("--cbow", is_flag=True, help="word2vec: CBOW instead of skip-gram."),
        click.option("--negative", type=click.IntRange(min=0), default=5, show_default=True,
                     help="word2vec: negative samples."),
        click.option("--epochs", type=click.IntRange(min=1), default=5, show_default=True, help="word2vec: epochs."),
        click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True,
                     help="word2vec: training threads (1 gives reproducible vectors)."),
    ]
    for opt in reversed(opts):
        f = opt(f)
    return f


def _model_settings(model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs, workers):
    from tracer.core.ppmi_svd import PpmiSvdSettings
    from tracer.core.word2vec import Word2VecSettings
    if model == "ppmi-svd":
        return PpmiSvdSettings(dim=dim, eig_power=eig_power, alpha=alpha, shift=shift, seed=0 if seed is None else seed)
    return Word2VecSettings(dim=dim, skip_gram=not cbow, negative=negative, epochs=epochs,
                            seed=1 if seed is None else seed, workers=workers)


def tests_file_option(required: bool = True):
    return click.option("--tests", "tests_file", type=click.Path(dir_okay=False, path_type=Path), required=required,
                        help="TOML file of association tests.")


def _load_tests(tests_file, names=()) -> dict:
    """The tests of the file, only the named ones if names are given."""
    from tracer.provenance.specs import load_tests, select_tests
    return select_tests(load_tests(tests_file), list(names), tests_file)


def _count_settings(window, min_count, weighting, max_vocab):
    from tracer.core.counting import CountSettings
    return CountSettings(window=window, weighting=weighting, min_count=min_count, max_vocab=max_vocab)


def _emit(text: str, out: Path | None, ctx: click.Context) -> None:
    if out is None:
        click.echo(text, nl=False)
    else:
        from tracer.files import write_atomic
        write_atomic(out, text)
        _say(ctx, f"wrote {out}")


def _emit_table(df, fmt: str, out: Path | None, ctx: click.Context) -> None:
    from tracer.app.output import render
    _emit(render(df, fmt), out, ctx)


def _open(workspace: Path):
    from tracer.provenance.cache import open_workspace
    # counts and models that tracer run stored are reused (same corpus, documents and settings);
    # the other commands store nothing there
    return open_workspace(workspace, cache="read")


def _words(value: str) -> list[str]:
    return [w.strip() for w in value.split(",") if w.strip()]


class TracerGroup(click.Group):
    """Turns every library error into one line and exit code 1 (--debug shows the traceback)."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except TracerError as e:
            if (ctx.obj or {}).get("debug"):
                traceback.print_exc()
            raise click.ClickException(str(e)) from None
        except KeyboardInterrupt:
            click.echo("Interrupted; the workspace is left as it was before this command.", err=True)
            sys.exit(130)


@click.group(cls=TracerGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="tracer")
@click.option("-q", "--quiet", is_flag=True, help="Print only results, no progress or status lines.")
@click.option("-v", "--verbose", is_flag=True, help="Print more about each step.")
@click.option("--debug", is_flag=True, help="Show the full traceback of an error.")
@click.pass_context
def cli(ctx, quiet, verbose, debug):
    """Trace associations in word embeddings back to the corpus that made them.

    Example:  tracer demo -w demo-work
    """
    ctx.obj = {"quiet": quiet, "verbose": verbose, "debug": debug}
    logging.basicConfig(level=logging.INFO if verbose else logging.WARNING, format="%(message)s")


# ---- ingest / info ----------------------------------------------------------------------------


@cli.command()
@click.argument("inputs", nargs=-1, required=True, type=click.Path(path_type=Path))
@workspace_option()
@click.option("--text-field", default="text", show_default=True, help="Field holding the text.")
@click.option("--id-field", default="id", show_default=True, help="Field holding the document id.")
@click.option("--source-field", default="source", show_default=True, help="Field holding the source.")
@click.option("--time-field", default=None,
              help="Field holding the time (required when named). Default: time, else date, if present.")
@click.option("--title-field", default="title", show_default=True, help="Field holding the title.")
@click.option("--source", "default_source", default=None,
              help="Source of records that name none (default: the input file's name).")
@click.option("--input-format", type=click.Choice(["jsonl", "csv", "txt", "parquet"]), default=None,
              help="Format of the inputs (default: from the file name).")
@click.option("--strict", is_flag=True, help="Fail on the first rejected record instead of skipping it.")
@click.option("--keep-case", is_flag=True, help="Do not lower-case (new workspaces only).")
@click.option("--normalization", type=click.Choice(["NFKC", "NFC", "NFD", "NFKD", "none"]), default=None,
              help="Unicode normal form before tokenizing (new workspaces only; default NFKC).")
@output_options
@click.pass_context
def ingest(ctx, inputs, workspace, text_field, id_field, source_field, time_field, title_field,
           default_source, input_format, strict, keep_case, normalization, fmt, out):
    """Read corpus files (JSONL, JSONL.gz, CSV, .txt folders, Parquet) into a workspace.

    Running it again on the same file changes nothing; a new file is appended.

    Example:  tracer ingest news.jsonl.gz -w work/
    """
    import pandas as pd

    from tracer.corpus.ingest import FieldMap, ingest as run_ingest
    from tracer.corpus.tokenize import TokenizerSettings

    tok = None
    if keep_case or normalization:
        tok = TokenizerSettings(lowercase=not keep_case, normalization=normalization or "NFKC")
    summary = run_ingest(workspace, inputs,
                         fields=FieldMap(text=text_field, id=id_field, source=source_field, time=time_field,
                                         title=title_field),
                         tokenizer=tok, input_format=input_format, default_source=default_source,
                         strict=strict, progress=_progress(ctx))
    df = pd.DataFrame([{"input": i.path, "status": i.status, "records": i.records, "documents": i.documents,
                        "tokens": i.tokens, "rejected": i.rejects} for i in summary.inputs])
    _emit_table(df, fmt, out, ctx)
    _say(ctx, f"workspace {summary.workspace}: {summary.documents_total} documents, "
              f"{summary.tokens_total} tokens, {summary.vocabulary_total} word types")
    if summary.rejects:
        reasons = ", ".join(f"{k}: {v}" for k, v in summary.reject_reasons.items())
        _say(ctx, f"{summary.rejects} records skipped ({reasons}); see {summary.rejects_file}")


@cli.command()
@workspace_option()
@click.option("--sources", "show_sources", is_flag=True, help="One row per source instead of the summary.")
@output_options
@click.pass_context
def info(ctx, workspace, show_sources, fmt, out):
    """Documents, tokens, vocabulary, sources and time span of a workspace.

    Example:  tracer info -w work/ --sources
    """
    from tracer.app.output import render_mapping
    ws = _open(workspace)
    if show_sources:
        _emit_table(ws.sources_table(), fmt, out, ctx)
    else:
        _emit(render_mapping(ws.summary(), fmt), out, ctx)


# ---- counts -----------------------------------------------------------------------------------


@cli.command()
@click.argument("word")
@click.option("--with", "contexts", required=True, help="Comma-separated context words.")
@workspace_option()
@count_options
@slice_options
@click.option("--alpha", type=click.FloatRange(0, 1, min_open=True), default=0.75, show_default=True,
              help="Context-distribution smoothing exponent (1: no smoothing).")
@click.option("--shift", type=click.FloatRange(min=1), default=1.0, show_default=True,
              help="k of shifted PPMI, max(PMI - log k, 0).")
@output_options
@click.pass_context
def pmi(ctx, word, contexts, workspace, window, min_count, weighting, max_vocab, by, picks, alpha, shift, fmt, out):
    """Window counts, marginals, PMI and PPMI of WORD with each context word, per slice.

    Example:  tracer pmi -w work/ nurse --with he,she,doctor --by source --format json
    """
    from tracer.corpus.slices import resolve_slices
    from tracer.analysis.pmi_table import pmi_table
    ws = _open(workspace)
    settings = _count_settings(window, min_count, weighting, max_vocab)
    df = pmi_table(ws, word, _words(contexts), resolve_slices(ws, by, picks), settings, alpha=alpha,
                   shift=shift, progress=_progress(ctx))
    if fmt == "json":
        df = df.drop(columns=["note"]).assign(note=df["note"].replace("", None))
    _emit_table(df, fmt, out, ctx)


# ---- models -----------------------------------------------------------------------------------


@cli.command()
@workspace_option()
@slice_options
@count_options
@model_options
@output_options
@click.pass_context
def train(ctx, workspace, by, picks, window, min_count, weighting, max_vocab, model, dim, seed, eig_power,
          alpha, shift, cbow, negative, epochs, workers, fmt, out):
    """Train PPMI-SVD or word2vec embeddings on each slice and store them in the workspace.

    Example:  tracer train -w work/ --model ppmi-svd --by time:10y
    """
    import pandas as pd

    from tracer.corpus.slices import resolve_slices
    from tracer.provenance.models import model_folder, train_embedding
    ws = _open(workspace)
    counts = _count_settings(window, min_count, weighting, max_vocab)
    settings = _model_settings(model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs, workers)
    rows = []
    for sl in resolve_slices(ws, by, picks):
        _say(ctx, f"training {model} on slice {sl.name} ({sl.n_documents} documents, {sl.n_tokens} tokens)")
        emb = train_embedding(ws, sl, model, counts, settings, progress=_progress(ctx))
        rows.append({"model": model, "slice": sl.name, "documents": sl.n_documents, "tokens": sl.n_tokens,
                     "words": len(emb.words), "dim": emb.dim, "folder": str(model_folder(ws, model, sl.name))})
    _emit_table(pd.DataFrame(rows), fmt, out, ctx)


CAUTIONS = ("Cautions: an association in an embedding is not proof of discrimination; word lists encode "
            "choices; small corpora give unstable numbers; consequential decisions belong with qualified "
            "reviewers and the applicable law.")


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_names", multiple=True, help="Only this test (repeatable; default: all).")
@slice_options
@count_options
@model_options
@click.option("--bootstrap", type=click.IntRange(min=0), default=None,
              help="Document-bootstrap replicates for the interval (default: 20 for ppmi-svd, 0 for word2vec).")
@click.option("--seeds", type=click.IntRange(min=1), default=1, show_default=True,
              help="word2vec: models trained with consecutive seeds; mean and spread of the effect size.")
@click.option("--vectors", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also measure these vectors (word2vec text, or binary if the name ends in .bin); "
                   "alone unless --by or --slice is given.")
@click.option("--min-words", type=click.IntRange(min=1), default=3, show_default=True,
              help="A target set with fewer words in a slice's vocabulary is not measured there.")
@click.option("--permutations", type=click.IntRange(min=1), default=10_000, show_default=True,
              help="Monte Carlo re-partitions when exact enumeration does not fit the budget.")
@click.option("--exact-budget", type=click.IntRange(min=1), default=200_000, show_default=True,
              help="Enumerate every re-partition when there are at most this many.")
@click.option("--show", type=click.Choice(["summary", "words", "leave-one-out"]), default="summary",
              show_default=True, help="Which table to print.")
@output_options
@click.pass_context
def measure(ctx, workspace, tests_file, test_names, by, picks, window, min_count, weighting, max_vocab, model, dim,
            seed, eig_power, alpha, shift, cbow, negative, epochs, workers, bootstrap, seeds, vectors, min_words,
            permutations, exact_budget, show, fmt, out):
    """Measure association tests on each slice: effect size, p-value, bootstrap interval, PMI view.

    Example:  tracer measure -w work/ --tests configs/demo_tests.toml --by time:10y --format json
    """
    from tracer.corpus.slices import resolve_slices
    from tracer.core.embedding import Embedding
    from tracer.analysis.measure import MeasureSettings, measure as run_measure
    ws = _open(workspace)
    tests = _load_tests(tests_file, test_names)
    if bootstrap is None:
        bootstrap = 20 if model == "ppmi-svd" else 0
    settings = MeasureSettings(min_words=min_words, bootstrap=bootstrap, seeds=seeds, permutations=permutations,
                               exact_budget=exact_budget, seed=0 if seed is None else seed, alpha=alpha)
    from tracer.provenance.vectors_io import read_word2vec_format
    ext = read_word2vec_format(vectors) if vectors else None
    # with --vectors alone only those are measured; with slices too, both side by side
    slices = resolve_slices(ws, by, picks) if (by or picks or ext is None) else []
    result = run_measure(ws, tests, model, slices, _count_settings(window, min_count, weighting,
                         max_vocab), _model_settings(model, dim, seed, eig_power, alpha, shift, cbow, negative,
                         epochs, workers), settings, vectors=ext, progress=_progress(ctx))
    table = {"summary": result.summary, "words": result.words, "leave-one-out": result.leave_one_out}[show]
    if fmt == "table" and show == "summary":
        cols = ["test", "model", "slice", "measured", "effect_size", "ci_low", "ci_high", "p_value", "p_method",
                "gap", "pmi_effect_size", "pmi_p_value", "mean_score", "n_targets_x", "n_targets_y",
                "n_attributes_a", "n_attributes_b", "dropped_words", "reason"]
        shown = table[cols].copy()
        shown["dropped_words"] = shown["dropped_words"].map(lambda ws_: ",".join(ws_) if isinstance(ws_, list) else "")
        from tracer.app.output import render
        text = render(shown)
        notes = sorted({w for w in table["warning"] if w})
        text += ("\neffect_size: WEAT d, " + table["std_convention"].iloc[0] + "; p_value: one-sided permutation; "
                 f"interval: {bootstrap} document-bootstrap replicates (percentile 2.5-97.5).\n"
                 "Cohen's conventions: |d| 0.2 small, 0.5 medium, 0.8 large; |d| <= 2 for equal set sizes.\n"
                 + "".join(f"Warning: {w}\n" for w in notes) + CAUTIONS + "\n") if len(table) else ""
        _emit(text, out, ctx)
    else:
        _emit_table(table, fmt, out, ctx)


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_name", required=True, help="The test whose attribute sets score each word.")
@click.option("--table", "table_file", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="CSV with a header: a word column and a numeric column.")
@click.option("--word-column", default="word", show_default=True)
@click.option("--value-column", required=True, help="The numeric column to correlate with.")
@slice_options
@count_options
@model_options
@click.option("--bootstrap", type=click.IntRange(min=0), default=1000, show_default=True,
              help="Resamples of the words for the intervals.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Write a scatter of the words (PNG).")
@output_options
@click.pass_context
def correlate(ctx, workspace, tests_file, test_name, table_file, word_column, value_column, by, picks, window,
              min_count, weighting, max_vocab, model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs,
              workers, bootstrap, plot, fmt, out):
    """Correlate each word's association score with a numeric column of a CSV, per slice.

    Example:  tracer correlate -w work/ --tests configs/demo_tests.toml --test occupations
              --table corpora_demo/occupation_shares.csv --word-column occupation --value-column share_women
    """
    from tracer.analysis.correlate import correlate as run_correlate, read_word_values, scatter_plot
    from tracer.corpus.slices import resolve_slices
    from tracer.provenance.models import train_embedding
    ws = _open(workspace)
    test = _one_test(tests_file, test_name)
    table = read_word_values(table_file, word_column, value_column)
    counts = _count_settings(window, min_count, weighting, max_vocab)
    settings = _model_settings(model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs, workers)
    from tracer.provenance.counts import count_slice
    pairs = [(train_embedding(ws, sl, model, counts, settings, save=False, progress=_progress(ctx)),
              count_slice(ws, sl.weights, counts, slice_name=sl.name)) for sl in resolve_slices(ws, by, picks)]
    summary, points = run_correlate(pairs, test, table, n_boot=bootstrap,
                                    seed=0 if seed is None else seed)
    if plot is not None:
        scatter_plot(points, value_column, plot)
        _say(ctx, f"wrote {plot}")
    _emit_table(summary, fmt, out, ctx)


@cli.command()
@workspace_option()
@output_options
@click.pass_context
def models(ctx, workspace, fmt, out):
    """List the models stored in a workspace.

    Example:  tracer models -w work/
    """
    from tracer.provenance.models import list_models
    _emit_table(list_models(_open(workspace)), fmt, out, ctx)


@cli.command()
@workspace_option()
@click.option("--model", type=click.Choice(["ppmi-svd", "word2vec"]), default="ppmi-svd", show_default=True)
@click.option("--slice", "slice_name", default="all", show_default=True, help="Slice the model was trained on.")
@click.option("-o", "--out", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="File to write.")
@click.option("--binary", is_flag=True, help="word2vec binary format instead of text.")
@click.pass_context
def export(ctx, workspace, model, slice_name, out, binary):
    """Write a stored model in the word2vec format that gensim and other tools read.

    Example:  tracer export -w work/ --model ppmi-svd --slice all -o vectors.txt
    """
    from tracer.corpus.slices import slice_from_spec
    from tracer.provenance.models import load_embedding
    ws = _open(workspace)
    emb = load_embedding(ws, model, slice_from_spec(ws, slice_name).name)
    from tracer.provenance.vectors_io import write_word2vec_format
    write_word2vec_format(emb, out, binary=binary)
    _say(ctx, f"wrote {len(emb.words)} vectors of {emb.dim} dimensions to {out}")


@cli.command()
@click.argument("words")
@workspace_option()
@click.option("--model", type=click.Choice(["ppmi-svd", "word2vec"]), default="ppmi-svd", show_default=True)
@click.option("--slice", "slice_name", default="all", show_default=True, help="Slice the model was trained on.")
@click.option("-n", "--top", type=click.IntRange(min=1), default=10, show_default=True)
@output_options
@click.pass_context
def neighbours(ctx, words, workspace, model, slice_name, top, fmt, out):
    """Nearest words by cosine similarity in a stored model (comma-separated WORDS).

    Example:  tracer neighbours -w work/ harbour,wheat --model word2vec
    """
    import pandas as pd

    from tracer.corpus.slices import slice_from_spec
    from tracer.provenance.models import load_embedding
    ws = _open(workspace)
    emb = load_embedding(ws, model, slice_from_spec(ws, slice_name).name)
    rows = [{"word": w, "rank": r + 1, "neighbour": n, "cosine": s}
            for w in _words(words) for r, (n, s) in enumerate(emb.neighbours(w, top))]
    _emit_table(pd.DataFrame(rows), fmt, out, ctx)


# ---- trace --------------------------------------------------------------------------------------


def _one_test(tests_file, test_name):
    return _load_tests(tests_file, [test_name])[test_name]


def _one_slice(ws, spec):
    from tracer.corpus.slices import slice_from_spec
    return slice_from_spec(ws, spec)


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_name", required=True, help="The (two-target) test to trace.")
@click.option("--slice", "slice_spec", default="all", show_default=True, help="The slice to trace in.")
@count_options
@model_options
@click.option("--top", type=click.IntRange(min=1), default=20, show_default=True, help="Documents to list.")
@click.option("--candidates", type=click.IntRange(min=1), default=200, show_default=True,
              help="Documents re-ranked exactly after the linear estimate.")
@click.option("--verify", type=click.IntRange(min=0), default=0, show_default=True,
              help="Retrain without the top K sources and document sets and compare (0: no verification).")
@click.option("--rank-by", type=click.Choice(["gap", "effect_size"]), default="gap", show_default=True,
              help="Rank by the raw gap (default; the effect size saturates near its ceiling) or by d.")
@click.option("--seeds", type=click.IntRange(min=1), default=3, show_default=True,
              help="word2vec: seeds of each verification retrain.")
@click.option("--show", type=click.Choice(["all", "sources", "documents", "passages", "first-order",
                                           "verification"]), default="all", show_default=True,
              help="Which table to print (json always gives all).")
@output_options
@click.pass_context
def trace(ctx, workspace, tests_file, test_name, slice_spec, window, min_count, weighting, max_vocab, model, dim,
          seed, eig_power, alpha, shift, cbow, negative, epochs, workers, top, candidates, verify, rank_by, seeds,
          show, fmt, out):
    """Link a test's association to the sources, documents and passages that carry it.

    Example:  tracer trace -w work/ --tests configs/demo_tests.toml --test gazette_outlet --verify 5
    """
    import json

    from tracer.app.output import render, to_records
    from tracer.analysis.trace import TraceSettings, trace as run_trace
    ws = _open(workspace)
    result = run_trace(ws, _one_test(tests_file, test_name), model, _one_slice(ws, slice_spec),
                       _count_settings(window, min_count, weighting, max_vocab),
                       _model_settings(model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs, workers),
                       TraceSettings(top=top, candidates=candidates, verify=verify, rank_by=rank_by, seeds=seeds,
                                     seed=0 if seed is None else seed), progress=_progress(ctx))
    v = result.verification
    tables = {"sources": result.sources, "documents": result.documents, "passages": result.passages,
              "first-order": result.first_order, "verification": v.rows if v is not None else None}
    if fmt == "json":
        doc = {"test": result.test, "model": result.model, "slice": result.slice, "effect_size": result.effect_size,
               "gap": result.gap, "rank_by": result.rank_by, "estimates": ESTIMATE_NOTE, "notes": result.notes,
               "sources": to_records(result.sources), "documents": to_records(result.documents),
               "passages": to_records(result.passages), "first_order": to_records(result.first_order),
               "verification": None if v is None else {
                   "quantity": v.quantity, "rows": to_records(v.rows), "pearson_r": v.pearson_r,
                   "spearman_rho": v.spearman_rho, "sign_agreement": v.sign_agreement,
                   "pearson_r_without_largest": v.pearson_r_without_largest, "largest": v.largest,
                   "confirmed": v.confirmed, "headline": v.headline()},
               "view_effect_size": result.view_effect_size, "view_gap": result.view_gap}
        from tracer.app.output import plain_values
        _emit(json.dumps(plain_values(doc), indent=1, ensure_ascii=False) + "\n", out, ctx)
        return
    if show != "all":
        if tables[show] is None:
            from tracer.errors import SettingError
            raise SettingError("there is no verification table without --verify K")
        _emit_table(tables[show], fmt, out, ctx)
        return
    parts = [f"{result.headline()}\n{ESTIMATE_NOTE}\n"]
    for name, df in tables.items():
        if df is None:
            continue
        shown = df.drop(columns=["text"]) if name == "passages" and len(df) else df
        parts.append(f"\n== {name} ==\n" + render(shown))
    if v is not None:
        parts.append(v.headline() + "\n")
    parts += [f"Note: {n}\n" for n in result.notes]
    parts.append(CAUTIONS + "\n")
    _emit("".join(parts), out, ctx)


ESTIMATE_NOTE = ("Contributions are estimates of the change if the source or document were removed (counts exact, "
                 "model subspace held fixed); only the verification rows are measured by retraining.")


@cli.command()
@click.argument("word")
@click.option("--with", "contexts", required=True, help="Comma-separated words that co-occur with WORD.")
@workspace_option()
@click.option("--slice", "slice_spec", default="all", show_default=True)
@count_options
@click.option("--top", type=click.IntRange(min=1), default=10, show_default=True, help="Documents to show.")
@click.option("--per-doc", type=click.IntRange(min=1), default=3, show_default=True, help="Passages per document.")
@output_options
@click.pass_context
def passages(ctx, word, contexts, workspace, slice_spec, window, min_count, weighting, max_vocab, top, per_doc, fmt,
             out):
    """Passages (KWIC) where WORD co-occurs with the context words, from the documents with most such pairs.

    Example:  tracer passages -w work/ velmari --with agony,evil --top 10
    """
    from tracer.analysis.trace import pair_passages
    ws = _open(workspace)
    df = pair_passages(ws, word.lower(), [w.lower() for w in _words(contexts)], _one_slice(ws, slice_spec),
                       _count_settings(window, min_count, weighting, max_vocab), top=top, per_doc=per_doc)
    if fmt == "table":
        df = df.drop(columns=["text"])
    _emit_table(df, fmt, out, ctx)


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_names", multiple=True, help="Only this test (repeatable; default: all).")
@click.option("--drop", "drops", multiple=True, help="Documents to drop, as a slice: source=NAME or time=A..B "
              "(repeatable).")
@click.option("--drop-docs", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="File of document ids to drop, one per line.")
@click.option("--slice", "slice_spec", default="all", show_default=True, help="The slice to measure in.")
@count_options
@model_options
@click.option("--bootstrap", type=click.IntRange(min=0), default=None,
              help="Document-bootstrap replicates (default: 20 for ppmi-svd, 0 for word2vec).")
@click.option("--seeds", type=click.IntRange(min=1), default=1, show_default=True, help="word2vec: seeds.")
@output_options
@click.pass_context
def ablate(ctx, workspace, tests_file, test_names, drops, drop_docs, slice_spec, window, min_count, weighting,
           max_vocab, model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs, workers, bootstrap, seeds,
           fmt, out):
    """Retrain without some sources, documents or years and re-measure: the effect before and after.

    Example:  tracer ablate -w work/ --tests configs/demo_tests.toml --test gazette_outlet --drop source=Gazette
    """
    from tracer.analysis.counterfactual import ablate as run_ablate, drop_mask
    from tracer.errors import InputError
    from tracer.analysis.measure import MeasureSettings
    ws = _open(workspace)
    tests = _load_tests(tests_file, test_names)
    ids = []
    if drop_docs is not None:
        if not drop_docs.is_file():
            raise InputError(f"{drop_docs}: no such file")
        ids = [line.strip() for line in drop_docs.read_text(encoding="utf-8").splitlines() if line.strip()]
        if not ids:
            raise InputError(f"{drop_docs}: the drop list is empty")
    mask, what = drop_mask(ws, list(drops), ids)
    if bootstrap is None:
        bootstrap = 20 if model == "ppmi-svd" else 0
    res = run_ablate(ws, tests, model, _one_slice(ws, slice_spec), mask, what,
                     _count_settings(window, min_count, weighting, max_vocab),
                     _model_settings(model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs, workers),
                     MeasureSettings(bootstrap=bootstrap, seeds=seeds, seed=0 if seed is None else seed, alpha=alpha))
    if fmt == "table":
        res = res[["run", "test", "slice", "effect_size", "ci_low", "ci_high", "p_value", "gap", "change",
                   "change_ci_low", "change_ci_high", "change_interval", "documents_dropped", "tokens_dropped",
                   "effect_size_seed_sd"]]
    _emit_table(res, fmt, out, ctx)


@cli.command()
@workspace_option()
@tests_file_option()
@click.option("--test", "test_name", required=True, help="The (two-target) test to bring down.")
@click.option("--goal", type=click.FloatRange(min=0), required=True, help="Target bound on |d|.")
@click.option("--unit", type=click.Choice(["document", "source"]), default="document", show_default=True)
@click.option("--slice", "slice_spec", default="all", show_default=True)
@click.option("--max-steps", type=click.IntRange(min=1), default=500, show_default=True,
              help="At most this many documents (or sources) in the plan.")
@count_options
@click.option("--dim", type=click.IntRange(min=1), default=100, show_default=True)
@click.option("-o", "--out", "drop_list", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Write the drop list (document ids, one per line).")
@click.option("--write-corpus", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Write the filtered corpus (JSONL with the original fields).")
@click.option("--bootstrap", type=click.IntRange(min=0), default=0, show_default=True,
              help="Document-bootstrap replicates of the filtered corpus: an interval for the verified effect.")
@click.option("--goal-on-interval", is_flag=True, help="The whole interval must lie within the goal (needs --bootstrap).")
@click.option("--require-goal", is_flag=True, help="Exit with an error (code 1) when the goal is not reached.")
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True)
@click.pass_context
def plan(ctx, workspace, tests_file, test_name, goal, unit, slice_spec, max_steps, window, min_count, weighting,
         max_vocab, dim, drop_list, write_corpus, bootstrap, goal_on_interval, require_goal, fmt):
    """Find a small set of documents (or sources) whose removal brings |d| to the goal, and verify it.

    Example:  tracer plan -w work/ --tests configs/demo_tests.toml --test gazette_outlet --goal 0.5 -o drop.txt
    """
    import json

    from tracer.analysis.counterfactual import write_filtered_corpus
    from tracer.analysis.plan import plan as run_plan
    from tracer.core.ppmi_svd import PpmiSvdSettings
    from tracer.app.output import plain_values, render, to_records
    from tracer.files import write_atomic
    ws = _open(workspace)
    sl = _one_slice(ws, slice_spec)
    p = run_plan(ws, _one_test(tests_file, test_name), sl, goal, unit=unit, max_steps=max_steps,
                 counts=_count_settings(window, min_count, weighting, max_vocab), settings=PpmiSvdSettings(dim=dim),
                 bootstrap=bootstrap, on_interval=goal_on_interval)
    ids = ws.documents["doc_id"].to_numpy()[p.doc_indices]
    if drop_list is not None:
        write_atomic(drop_list, "".join(f"{i}\n" for i in ids))
        _say(ctx, f"wrote {len(ids)} document ids to {drop_list}")
    if write_corpus is not None:
        keep = sl.weights > 0
        keep[p.doc_indices] = False
        n = write_filtered_corpus(ws, keep, write_corpus)
        _say(ctx, f"wrote {n} documents to {write_corpus}")
    summary = {"goal_reached": p.reached, "unit": p.unit, "removed": len(p.removed),
               "documents_removed": len(p.doc_indices), "tokens_removed": p.tokens_removed,
               "token_share_removed": p.token_share, "effect_before": p.effect_before,
               "predicted_effect": p.predicted_effect, "verified_effect": p.verified_effect,
               "verified_low": p.verified_low, "verified_high": p.verified_high, "interval_method": p.interval_method}
    tables = {"rounds": p.rounds, "removed by source": p.removed_table, "test words removed": p.losses,
              "frequent words that fall most": p.falling, "usefulness": p.usefulness}
    if fmt == "json":
        click.echo(json.dumps(plain_values({**summary, "message": p.message, "removed_items": p.removed,
                                            "steps": to_records(p.steps),
                                            **{k.replace(" ", "_"): to_records(v) for k, v in tables.items()}}),
                              indent=1, ensure_ascii=False))
    else:
        from tracer.app.output import render_mapping
        click.echo(p.message + "\n" + render_mapping(summary) + "".join(f"\n== {k} ==\n" + render(v)
                                                                       for k, v in tables.items()) +
                   "\npredicted_effect is an estimate (model subspace held fixed); verified_effect comes from "
                   "retraining without the plan.\n" + CAUTIONS)
    if require_goal and not p.reached:
        from tracer.errors import GoalNotReached
        raise GoalNotReached(p.message)


@cli.command()
@workspace_option()
@tests_file_option(required=False)
@click.option("--test", "test_names", multiple=True, help="Only this test (repeatable).")
@click.option("--words", default=None, help="Comma-separated words: their change across aligned periods instead.")
@click.option("--by", default="time:10y", show_default=True, help="The periods: time:Ny or year.")
@count_options
@model_options
@click.option("--bootstrap", type=click.IntRange(min=0), default=20, show_default=True,
              help="Document-bootstrap replicates per period (intervals, trend interval, significant changes).")
@click.option("--min-tokens", type=click.IntRange(min=1), default=20_000, show_default=True,
              help="A period with fewer tokens is not measured.")
@click.option("--neighbours", type=click.IntRange(min=1), default=10, show_default=True,
              help="With --words: nearest neighbours listed per period.")
@click.option("--show", type=click.Choice(["all", "periods", "trend", "changes", "sources"]), default="all",
              show_default=True, help="Which table to print (json always gives all).")
@output_options
@click.pass_context
def drift(ctx, workspace, tests_file, test_names, words, by, window, min_count, weighting, max_vocab, model, dim,
          seed, eig_power, alpha, shift, cbow, negative, epochs, workers, bootstrap, min_tokens, neighbours, show,
          fmt, out):
    """How an association (or a word) moved from period to period, and why.

    Example:  tracer drift -w work/ --tests configs/demo_tests.toml --test tribune_mix --by time:10y
    """
    import json

    import pandas as pd

    from tracer.corpus.slices import slices_by
    from tracer.analysis.drift import drift_tests, word_drift
    from tracer.core.ppmi_svd import PpmiSvdSettings
    from tracer.errors import InputError
    from tracer.analysis.measure import MeasureSettings
    from tracer.app.output import plain_values, render, to_records
    ws = _open(workspace)
    if not by.startswith("time") and by != "year":
        raise InputError(f"--by {by}: drift needs periods of time (time:Ny or year)")
    periods = slices_by(ws, by)
    counts = _count_settings(window, min_count, weighting, max_vocab)
    if words:
        change, near, notes = word_drift(ws, [w.lower() for w in _words(words)], periods, counts,
                                         PpmiSvdSettings(dim=dim, alpha=alpha, shift=shift, eig_power=eig_power),
                                         neighbours=neighbours)
        if fmt == "json":
            _emit(json.dumps(plain_values({"change": to_records(change), "neighbours": to_records(near), "notes": notes}),
                             indent=1, ensure_ascii=False) + "\n", out, ctx)
        else:
            _emit(render(change) + "\n" + render(near) + "".join(f"Note: {n}\n" for n in notes), out, ctx)
        return
    if tests_file is None:
        raise InputError("give --tests FILE (and --test NAME), or --words")
    tests = _load_tests(tests_file, test_names)
    chosen = list(tests.values()) if test_names else [t for t in tests.values() if t.two_target]
    settings = MeasureSettings(bootstrap=bootstrap, seed=0 if seed is None else seed, alpha=alpha)
    results = list(drift_tests(ws, {t.name: t for t in chosen}, model, periods, counts,
                               _model_settings(model, dim, seed, eig_power, alpha, shift, cbow, negative, epochs,
                                               workers),
                               settings, min_tokens=min_tokens, progress=_progress(ctx)).values())
    if fmt == "json":
        doc = [{"test": r.test, "model": r.model, "periods": to_records(r.periods), "trend": r.trend,
                "changes": to_records(r.changes), "source_shares": to_records(r.source_parts), "notes": r.notes}
               for r in results]
        _emit(json.dumps(plain_values(doc if len(doc) > 1 else doc[0]), indent=1, ensure_ascii=False) + "\n", out, ctx)
        return
    tables = {"periods": lambda r: r.periods, "trend": lambda r: pd.DataFrame([r.trend]),
              "changes": lambda r: r.changes, "sources": lambda r: r.source_parts}
    if show != "all":
        _emit_table(pd.concat([tables[show](r).assign(test=r.test) for r in results]), fmt, out, ctx)
        return
    parts = []
    for r in results:
        parts.append(f"== {r.test} ({r.model}) ==\n")
        for name in ("periods", "trend", "changes"):
            parts.append(f"-- {name} --\n" + render(tables[name](r)))
        parts += [f"Note: {n}\n" for n in r.notes]
    parts.append("gap: mean association of targets_x minus targets_y (trend and decomposition use it; the effect "
                 "size saturates); slope: gap per decade; mix_part: change due to the mix of sources, "
                 "within_part: change inside the sources (the later period reweighted to the earlier mix).\n"
                 + CAUTIONS + "\n")
    _emit("".join(parts), out, ctx)


# ---- runs and reports ---------------------------------------------------------------------------


@cli.command()
@click.argument("experiment", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--open-report", is_flag=True, help="Print only the report's path (for scripts).")
@click.pass_context
def run(ctx, experiment, open_report):
    """Run an experiment file: ingest (if needed), measure, trace, drift, report.

    Example:  tracer run configs/demo.toml
    """
    from tracer.provenance.experiment import load_experiment
    from tracer.app.pipeline import run_experiment
    exp = load_experiment(experiment)
    result = run_experiment(exp, progress=_progress(ctx), say=functools.partial(_say, ctx),
                            command=f"tracer run {experiment}")
    report = result.folder / "report.html"
    if open_report:
        click.echo(str(report))
        return
    click.echo(f"{'Reused' if result.reused else 'Stored'} run {result.run_id} in {result.folder}\n"
               f"Report: {report}\nTables: {result.folder / 'tables'}")


@cli.command()
@workspace_option()
@click.option("--run", "run_id", default="latest", show_default=True, help="Run id, or latest.")
@click.option("-o", "--out", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="Where to write the HTML report.")
@click.pass_context
def report(ctx, workspace, run_id, out):
    """Write the self-contained HTML report of a stored run.

    Example:  tracer report -w tracer-demo --run latest -o report.html
    """
    from tracer.app.report.html import write_report
    from tracer.app.pipeline import find_run
    folder = find_run(workspace, run_id)
    write_report(folder, out)
    _say(ctx, f"wrote the report of run {folder.name} to {out}")


# ---- demo -------------------------------------------------------------------------------------


@cli.command()
@workspace_option(required=False)
@click.pass_context
def demo(ctx, workspace):
    """Run the whole path on the bundled demo archive and say where the results are.

    Example:  tracer demo -w demo-work
    """
    from tracer.app.demo import run_demo
    workspace = workspace or Path("tracer-demo")
    result = run_demo(workspace, progress=_progress(ctx), say=functools.partial(_say, ctx))
    click.echo(result.text, nl=False)


def main() -> None:
    cli(prog_name="tracer")


if __name__ == "__main__":
    main()
