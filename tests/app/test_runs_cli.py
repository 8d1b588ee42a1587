"""The command line's side of runs and the cache: tracer cache prune, and word2vec's reproducibility note."""

import json

import numpy as np
from click.testing import CliRunner

from tracer.app.cli import cli
from tracer.core.counting import CountSettings
from tracer.provenance.cache import open_workspace
from tracer.provenance.counts import count_slice


def test_cache_prune_removes_entries_of_another_corpus(small_ws):
    ws = open_workspace(small_ws.path, cache=True)
    for min_count in (1, 2):
        count_slice(ws, np.ones(ws.n_documents), CountSettings(min_count=min_count))
    entries = sorted((small_ws.path / "cache").glob("counts-*"))
    assert len(entries) == 2
    meta = json.loads((entries[0] / "entry.json").read_text())
    (entries[0] / "entry.json").write_text(json.dumps({**meta, "corpus_hash": "another corpus"}))
    res = CliRunner().invoke(cli, ["cache", "prune", "-w", str(small_ws.path)])
    assert res.exit_code == 0, res.output
    assert res.output.startswith("Removed 1 cache entries")
    assert not entries[0].exists() and entries[1].is_dir()
    res = CliRunner().invoke(cli, ["cache", "prune", "-w", str(small_ws.path), "--max-size", "0"])
    assert res.exit_code == 0 and res.output.startswith("Removed 1 cache entries") and not entries[1].exists()


def test_word2vec_on_several_workers_says_it_is_not_reproducible(small_ws):
    args = ["train", "-w", str(small_ws.path), "--model", "word2vec", "--dim", "4", "--min-count", "1",
            "--epochs", "1"]
    one = CliRunner().invoke(cli, args)
    assert one.exit_code == 0, one.output
    assert "not reproducible" not in one.output
    two = CliRunner().invoke(cli, args + ["--workers", "2"])
    assert two.exit_code == 0, two.output
    assert "word2vec on 2 workers: the vectors are not reproducible" in two.output
