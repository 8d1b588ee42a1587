"""Commands on stored models: train, models, export, neighbours."""

from __future__ import annotations

from pathlib import Path

import click

from tracer.app.commands import known_words
from tracer.app.cli.group import cli, progress_on, say, steps
from tracer.app.cli.options import (MODELS, NEIGHBOURS_OPTION, check_out, counting_options, model_options, open_workspace,
                                    output_options,
                                    slice_options, words_of, workspace_option)


@cli.command()
@workspace_option()
@slice_options
@counting_options
@model_options
@output_options
def train(workspace, slices, counts, model, out):
    """Train PPMI-SVD or word2vec embeddings on each slice and store them in the workspace.

    Example:  tracer train -w work/ --model ppmi-svd --by time:10y
    """
    import pandas as pd

    from tracer.provenance.models import model_folder, train_slices
    ws = open_workspace(workspace)
    slice_list = slices.resolve(ws)
    # the slices' trainings are independent tasks (the cluster's, else the local worker processes)
    embs = train_slices(ws, slice_list, model.name, counts, model.settings, progress=progress_on(), say=say,
                        bar=lambda items: steps(items, "train", "slices"))
    rows = [{"model": model.name, "slice": sl.name, "documents": sl.n_documents, "tokens": sl.n_tokens,
             "words": len(emb.words), "dim": emb.dim, "folder": str(model_folder(ws, model.name, sl.name))}
            for sl, emb in zip(slice_list, embs)]
    out.table(pd.DataFrame(rows))


@cli.command()
@workspace_option()
@output_options
def models(workspace, out):
    """List the models stored in a workspace.

    Example:  tracer models -w work/
    """
    from tracer.provenance.models import list_models
    out.table(list_models(open_workspace(workspace)))


STORED_MODEL_OPTIONS = [
    click.option("--model", type=click.Choice(MODELS), default="ppmi-svd", show_default=True,
                 help="The stored model to use."),
    click.option("--slice", "slice_name", default="all", show_default=True, help="Slice the model was trained on."),
]


def _stored_model(ws, model: str, slice_name: str):
    from tracer.app.commands import stored_model
    return stored_model(ws, model, slice_name)


@cli.command()
@workspace_option()
@STORED_MODEL_OPTIONS[0]
@STORED_MODEL_OPTIONS[1]
@click.option("-o", "--out", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="File to write (the result).")
@click.option("--binary", is_flag=True, help="word2vec binary format instead of text.")
def export(workspace, model, slice_name, out, binary):
    """Write a stored model in the word2vec format that gensim and other tools read.

    Example:  tracer export -w work/ --model ppmi-svd --slice all -o vectors.txt
    """
    from tracer.provenance.vectors_io import write_word2vec_format
    check_out(out)
    emb = _stored_model(open_workspace(workspace), model, slice_name)
    write_word2vec_format(emb, out, binary=binary)
    say(f"wrote {len(emb.words)} vectors of {emb.dim} dimensions to {out}")


@cli.command()
@click.argument("words")
@workspace_option()
@STORED_MODEL_OPTIONS[0]
@STORED_MODEL_OPTIONS[1]
@NEIGHBOURS_OPTION
@output_options
def neighbours(words, workspace, model, slice_name, n_neighbours, out):
    """Nearest words by cosine similarity in a stored model (comma-separated WORDS).

    Example:  tracer neighbours -w work/ harbour,wheat --model word2vec
    """
    from tracer.app.commands import neighbour_table
    ws = open_workspace(workspace)
    emb = _stored_model(ws, model, slice_name)
    kept, notes = known_words(ws.normalize_words(words_of(words)), emb.index, f"the {model} model of slice {slice_name}")
    out.table(neighbour_table(emb, kept, n_neighbours), notes=notes)
