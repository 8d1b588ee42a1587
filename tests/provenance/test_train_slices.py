"""``tracer train`` over several slices: the slices' models are independent tasks
(:func:`tracer.provenance.models.train_slices`), and every stored model is, bit for bit, the one
:func:`tracer.provenance.models.train_embedding` trains on that slice alone (the sequential path
``tracer train`` took before; the reference here). The tasks run on two spawned worker processes
(``TRACER_REPLICATE_WORKERS=2``), so their inputs and results travel pickled as on a cluster.
"""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from tests.conftest import LEE_SOURCES
from tracer.app.cli import cli
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.core.replicate_pool import WORKERS_ENV
from tracer.core.word2vec import Word2VecSettings
from tracer.corpus.slices import resolve_slices
from tracer.corpus.workspace import Workspace
from tracer.provenance.cache import open_workspace
from tracer.provenance.models import load_embedding, model_folder, train_embedding, train_slices

# the card's fields that say what made the model (trained_at is the time of the training)
MADE_BY = ("model", "slice", "settings", "counts", "corpus_hash", "n_words", "dim", "slice_documents",
           "slice_tokens", "custom_weights", "versions")


def train(*args, env=None):
    result = CliRunner().invoke(cli, ["train", *map(str, args), "--format", "json"], env=env)
    assert result.exit_code == 0, result.output
    return result


def assert_same_model(stored, alone):
    """The same words, vectors (bit for bit), extras and card (but the time of training)."""
    assert stored.words == alone.words
    assert stored.vectors.dtype == alone.vectors.dtype and np.array_equal(stored.vectors, alone.vectors)
    assert stored.extras.keys() == alone.extras.keys()
    for k in stored.extras:
        assert np.array_equal(np.asarray(stored.extras[k]), np.asarray(alone.extras[k])), k
    assert {k: stored.card[k] for k in MADE_BY} == json.loads(json.dumps({k: alone.card[k] for k in MADE_BY}))


@pytest.mark.parametrize("model, options, settings", [
    ("ppmi-svd", ["--dim", "20"], PpmiSvdSettings(dim=20)),
    ("word2vec", ["--dim", "10", "--epochs", "1", "--seed", "3"], Word2VecSettings(dim=10, epochs=1, seed=3)),
])
def test_each_stored_model_is_the_one_trained_on_its_slice_alone(lee_copy, model, options, settings):
    result = train("-w", lee_copy, "--model", model, "--by", "source", *options, env={WORKERS_ENV: "2"})
    rows = json.loads(result.stdout)
    ws = Workspace(lee_copy)
    slices = resolve_slices(ws, ["source"])
    assert [r["slice"] for r in rows] == [sl.name for sl in slices] == [f"source={s}" for s in sorted(LEE_SOURCES)]
    assert [r["folder"] for r in rows] == [str(model_folder(ws, model, sl.name)) for sl in slices]
    sizes = []
    for sl, row in zip(slices, rows):
        stored = load_embedding(ws, model, sl.name)
        alone = train_embedding(ws, sl, model, CountSettings(), settings, save=False)
        assert_same_model(stored, alone)
        assert row["words"] == len(alone.words) and row["dim"] == settings.dim
        sizes.append(len(stored.words))
    # the slices' vocabularies differ, so one slice's model stored under another's name shows
    assert len(set(sizes)) == len(sizes)
    assert "training " + model + " on slice source=Ashford Post (100 documents" in result.stderr
    if model == "ppmi-svd":
        assert "counted slice source=Ashford Post: " in result.stderr
    assert f"storing 3 {model} models in {ws.models_dir / model}" in result.stderr


def test_each_slice_is_counted_after_the_svd_before_with_one_worker(lee_copy, monkeypatch):
    """With one local worker the slices are counted one at a time between the SVDs (a generator
    feeds the tasks), so the counts of every slice are never held at once."""
    from tracer.provenance import counts as counts_module, models
    ws = Workspace(lee_copy)
    monkeypatch.setenv(WORKERS_ENV, "1")
    events, svd, count = [], models.ppmi_svd_vectors, counts_module.count_matrix
    monkeypatch.setattr(models, "ppmi_svd_vectors", lambda m, settings: events.append("svd") or svd(m, settings))
    monkeypatch.setattr(counts_module, "count_matrix", lambda *a, **k: events.append("count") or count(*a, **k))
    slices = resolve_slices(ws, ["source"])
    embs = train_slices(ws, slices, "ppmi-svd", CountSettings(), PpmiSvdSettings(dim=20), save=False)
    assert events == ["count", "svd"] * 3
    assert [e.card["slice"] for e in embs] == [sl.name for sl in slices]


def test_cached_and_new_models_come_back_in_the_order_of_the_slices(lee_copy, monkeypatch):
    """The middle slice's model is in the cache (from an earlier run), the others are SVDs on the
    workers: each slice still gets its own model."""
    monkeypatch.setenv(WORKERS_ENV, "2")
    counts, svd = CountSettings(min_count=3), PpmiSvdSettings(dim=15)
    ws = open_workspace(lee_copy, cache=True)
    slices = resolve_slices(ws, ["source"])
    alone = [train_embedding(Workspace(lee_copy), sl, "ppmi-svd", counts, svd, save=False) for sl in slices]
    train_embedding(ws, slices[1], "ppmi-svd", counts, svd, save=False)  # puts it in the cache
    assert len(list(ws.cache.folder.glob("model-*"))) == 1
    got = train_slices(open_workspace(lee_copy, cache="read"), slices, "ppmi-svd", counts, svd)
    for sl, emb, want in zip(slices, got, alone):
        assert_same_model(emb, want)
        assert_same_model(load_embedding(ws, "ppmi-svd", sl.name), want)


def test_a_dimension_too_large_for_any_slice_stops_before_counting(lee_copy, monkeypatch):
    from tracer.provenance import counts as counts_module
    counted = []
    monkeypatch.setattr(counts_module, "count_matrix", lambda *a, **k: counted.append(1))
    ws = Workspace(lee_copy)
    small = resolve_slices(ws, ["year"])[0]
    # the small slice last: the sequential path counted (and stored) the two before it
    result = CliRunner().invoke(cli, ["train", "-w", str(lee_copy), "--slice", "source=Ashford Post",
                                      "--slice", "source=Bramble Wire", "--slice", small.name, "--dim", "400"])
    assert result.exit_code == 1
    assert result.stderr.splitlines()[-1].startswith(f"Error: slice {small.name} has ")
    assert "--dim 400 must be below that" in result.stderr
    assert counted == [] and list(ws.models_dir.glob("*/*/card.json")) == []
