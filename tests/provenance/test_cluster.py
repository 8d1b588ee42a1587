"""Counting by document partitions on a dask.distributed LocalCluster equals the local count."""

import gc
import re

import numpy as np
import pytest

from tracer.core.counting import CountSettings, build_vocab, count_matrix

distributed = pytest.importorskip("distributed", reason="the dask extra is not installed (pip install '.[dask]')")


@pytest.fixture(scope="module")
def client():
    from distributed import Client, LocalCluster
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster, \
            Client(cluster) as c:
        yield c


def local(ws, weights, settings):
    vocab = build_vocab(ws.tokens, ws.doc_offsets, weights, ws.vocab.words, settings)
    return count_matrix(ws.tokens, ws.doc_offsets, weights, vocab, len(ws.vocab), settings), vocab


@pytest.mark.parametrize("kind", ["all", "slice", "bootstrap"])
def test_partitioned_count_equals_the_local_count_bit_for_bit(lee_ws, client, kind):
    from tracer.provenance.cluster import count_on_cluster
    rng = np.random.default_rng(5)
    weights = {"all": np.ones(lee_ws.n_documents),
               "slice": (np.arange(lee_ws.n_documents) % 3 == 0).astype(float),
               "bootstrap": rng.poisson(1.0, lee_ws.n_documents).astype(float)}[kind]
    settings = CountSettings()
    want, vocab = local(lee_ws, weights, settings)
    got, got_vocab = count_on_cluster(lee_ws, weights, settings, scheduler=client, partition_tokens=20_000)
    assert got_vocab.words == vocab.words
    assert np.array_equal(got.indptr, want.indptr) and np.array_equal(got.indices, want.indices)
    assert np.array_equal(got.data, want.data)


def test_non_integer_weights_agree_to_rounding(lee_ws, client):
    from tracer.provenance.cluster import count_on_cluster
    weights = np.random.default_rng(1).uniform(0.1, 2.0, lee_ws.n_documents)
    want, _ = local(lee_ws, weights, CountSettings(weighting="harmonic"))
    got, _ = count_on_cluster(lee_ws, weights, CountSettings(weighting="harmonic"), scheduler=client,
                              partition_tokens=30_000)
    assert np.allclose(got.toarray(), want.toarray(), rtol=1e-12, atol=0)


@pytest.fixture(scope="module")
def address():
    from distributed import LocalCluster
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        yield cluster.scheduler_address


def test_a_workspace_opened_with_a_scheduler_counts_its_slices_there(lee_ws, address, monkeypatch):
    import tracer.provenance.counts as counts_module
    from tracer.corpus.slices import slice_from_spec
    from tracer.provenance.cache import open_workspace
    from tracer.provenance.counts import count_slice
    sl = slice_from_spec(lee_ws, "source=Bramble Wire")
    want = count_slice(lee_ws, sl.weights, CountSettings())

    def no_local_count(*a, **k):
        raise AssertionError("counted locally")

    monkeypatch.setattr(counts_module, "count_matrix", no_local_count)
    got = count_slice(open_workspace(lee_ws.path, scheduler=address), sl.weights, CountSettings())
    assert got.vocab.words == want.vocab.words
    assert (got.matrix != want.matrix).nnz == 0 and np.array_equal(got.matrix.indices, want.matrix.indices)


def test_the_scheduler_option_and_the_experiment_key(small_ws, address, tmp_path, monkeypatch):
    from click.testing import CliRunner
    import tracer.provenance.cluster as cluster
    from tracer.app.cli import cli
    from tracer.provenance.experiment import load_experiment
    seen = []
    real = cluster.count_on_cluster
    monkeypatch.setattr(cluster, "count_on_cluster", lambda *a, **k: seen.append(k["scheduler"]) or real(*a, **k))
    result = CliRunner().invoke(cli, ["--scheduler", address, "train", "-w", str(small_ws.path), "--model",
                                      "ppmi-svd", "--dim", "2", "--min-count", "1"])
    assert result.exit_code == 0, result.output
    assert seen == [address]
    f = tmp_path / "e.toml"
    f.write_text(f'[corpus]\ninputs = ["a.jsonl"]\nworkspace = "w"\n[measure]\ntests = "t.toml"\n'
                 f'[compute]\nscheduler = "{address}"\n', encoding="utf-8")
    assert load_experiment(f).scheduler == address


def _free_address() -> str:
    """A local port nothing listens on (bound, read, released)."""
    import socket
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return f"tcp://127.0.0.1:{s.getsockname()[1]}"


def test_no_scheduler_at_the_address_is_one_named_error_on_the_command_line(small_ws, monkeypatch):
    import dask
    from click.testing import CliRunner
    from tracer.app.cli import cli
    from tracer.errors import ClusterError
    from tracer.provenance.cluster import ClusterTasks
    nowhere = _free_address()
    with dask.config.set({"distributed.comm.timeouts.connect": "1s"}):
        with pytest.raises(ClusterError, match=r"cannot connect to the dask scheduler tcp://127\.0\.0\.1:\d+"):
            ClusterTasks(nowhere).submit(abs, [1])()
        with pytest.raises(ClusterError, match="cannot connect to the dask scheduler nonsense://x"):
            ClusterTasks("nonsense://x").submit(abs, [1])()
        result = CliRunner().invoke(cli, ["--scheduler", nowhere, "train", "-w", str(small_ws.path), "--model",
                                          "ppmi-svd", "--dim", "2", "--min-count", "1"])
    assert result.exit_code == 1
    # the status line before it, then one error line, no traceback
    lines = result.output.strip().splitlines()
    assert lines[-1].startswith(f"Error: cannot connect to the dask scheduler {nowhere}: "), lines
    assert "Traceback" not in result.output and sum(line.startswith("Error") for line in lines) == 1


def _unclosed_clients() -> int:
    from distributed import Client
    return sum(isinstance(o, Client) and o.status != "closed" for o in gc.get_objects())


@pytest.mark.parametrize("bad", ["nonsense://x", "tcp://x", "x", "tcp://127.0.0.1:notaport", "NOWHERE"])
def test_a_bad_address_is_refused_without_leaving_a_half_made_client(bad):
    """A Client that fails on a malformed address stays half-made ("connecting") while anything
    holds the error; the garbage collector closing it inside another Client's start deadlocked
    a whole test run on distributed's one loop lock. The address is checked before a Client is made."""
    import dask
    from tracer.errors import ClusterError
    from tracer.provenance.cluster import ClusterTasks
    bad = _free_address() if bad == "NOWHERE" else bad
    gc.collect()
    before = _unclosed_clients()
    with dask.config.set({"distributed.comm.timeouts.connect": "1s"}):
        with pytest.raises(ClusterError, match=f"cannot connect to the dask scheduler {re.escape(bad)}: ") as held:
            ClusterTasks(bad).submit(abs, [1])()
    assert _unclosed_clients() == before, held.value  # the error is still held here, as by a caller


def test_a_worker_without_the_workspace_says_so(address):
    """A named error raised by a task on a worker reaches the caller as itself."""
    from tracer.errors import ClusterError
    from tracer.provenance.cluster import ClusterTasks, task_workspace
    with pytest.raises(ClusterError, match="cannot open the workspace /no/such/folder.*workers must see it"):
        ClusterTasks(address).submit(task_workspace, ["/no/such/folder"])()


def test_a_worker_that_dies_is_one_named_error():
    import functools
    import os
    import dask
    from distributed import LocalCluster
    from tracer.errors import ClusterError
    from tracer.provenance.cluster import ClusterTasks
    # the scheduler (in this process) gives up on a task after the first worker it kills
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
            LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster:
        with pytest.raises(ClusterError, match="a worker of the dask scheduler tcp://.* died while running a task"):
            ClusterTasks(cluster.scheduler_address).submit(functools.partial(os._exit), [3])()


def test_which_failures_are_the_clusters():
    from tracer.errors import ClusterError
    from tracer.provenance.cluster import _cluster_failure
    missing = ModuleNotFoundError("No module named 'tracer'", name="tracer")
    assert isinstance(_cluster_failure(missing, "tcp://h:1"), ClusterError)
    assert "install corpus-tracer" in str(_cluster_failure(missing, "tcp://h:1"))
    # a task's own bug stays itself, with its traceback
    assert _cluster_failure(ZeroDivisionError("x"), "tcp://h:1") is None
    assert _cluster_failure(ModuleNotFoundError("No module named 'other'", name="other"), "tcp://h:1") is None


@pytest.mark.parametrize("model, options", [("ppmi-svd", ["--dim", "20"]),
                                            ("word2vec", ["--dim", "10", "--epochs", "1", "--seed", "3"])])
def test_train_by_source_on_the_cluster_stores_the_models_trained_here(lee_copy, address, model, options, monkeypatch):
    """``tracer --scheduler ADDRESS train --by source``: the slices counted and their models trained
    on the cluster's workers, stored as the same models, bit for bit, as without a scheduler (the
    local path, itself equal to each slice trained alone: tests/provenance/test_train_slices.py)."""
    from click.testing import CliRunner
    import tracer.core.replicate_pool as replicate_pool
    import tracer.provenance.counts as counts_module
    from tests.provenance.test_train_slices import assert_same_model
    from tracer.app.cli import cli
    from tracer.corpus.slices import resolve_slices
    from tracer.corpus.workspace import Workspace
    from tracer.provenance.models import load_embedding
    args = ["train", "-w", str(lee_copy), "--model", model, "--by", "source", *options]
    assert CliRunner().invoke(cli, args).exit_code == 0
    ws = Workspace(lee_copy)
    slices = resolve_slices(ws, ["source"])
    local = [load_embedding(ws, model, sl.name) for sl in slices]

    def refuse(*a, **k):
        raise AssertionError("ran in this process or its local workers")

    monkeypatch.setattr(counts_module, "count_matrix", refuse)
    monkeypatch.setattr(replicate_pool, "submit_replicates", refuse)
    result = CliRunner().invoke(cli, ["--scheduler", address, *args])
    assert result.exit_code == 0, result.output
    assert len({len(e.words) for e in local}) == 3  # three different slices: a swap between them shows
    for sl, here in zip(slices, local):
        assert_same_model(load_embedding(ws, model, sl.name), here)
