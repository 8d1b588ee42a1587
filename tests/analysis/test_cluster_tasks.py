"""Bootstrap replicates and verification retrains on a dask.distributed LocalCluster give the tables
the local path gives, bit for bit.

A workspace opened with a scheduler (``open_workspace(path, scheduler=ADDRESS)``) hands its
independent tasks to that cluster (:class:`tracer.provenance.cluster.ClusterTasks`); without one they
run in this process (``TRACER_REPLICATE_WORKERS`` = 1 here). The reference is the local path itself:
the tables must be equal exactly (``pandas.testing.assert_frame_equal`` with ``check_exact``). A
cluster that handed results back in another order than the items', or ran something other than the
caller's function on the caller's inputs, fails these.
"""

import functools
import operator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tracer.analysis.measure import MeasureSettings, measure
from tracer.analysis.trace import TraceSettings, trace
from tracer.core import replicate_pool
from tracer.core.association import weat
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.core.replicate_pool import WORKERS_ENV, LocalTasks
from tracer.core.word2vec import Word2VecSettings
from tracer.corpus.slices import Slice, slice_from_spec
from tracer.provenance.cache import open_workspace
from tracer.provenance.specs import load_tests

distributed = pytest.importorskip("distributed", reason="the dask extra is not installed (pip install '.[dask]')")

TESTS = load_tests(Path(__file__).resolve().parents[2] / "configs" / "demo_tests.toml")
COUNTS, SVD = CountSettings(window=5, min_count=5), PpmiSvdSettings(dim=50)


@pytest.fixture(scope="module")
def address():
    from distributed import LocalCluster
    # worker processes, as a real cluster has: every task's function and inputs travel pickled
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster:
        yield cluster.scheduler_address


def _in_this_process(fn, items, workers=1):
    """The local pool's tasks, run here (what one worker does)."""
    return lambda: [fn(item) for item in items]


def _refuse(*a, **k):
    """In place of the local pool when the tasks must run on the cluster."""
    raise AssertionError("ran on the local replicate pool")


def test_tasks_keep_the_order_of_the_items_and_raise_a_task_error(address):
    from tracer.provenance.cluster import ClusterTasks
    items = list(range(40))
    # against Python's own map of the same function
    assert ClusterTasks(address).submit(functools.partial(operator.mul, 3), items)() == list(map(lambda i: 3 * i, items))
    with pytest.raises(ZeroDivisionError):
        ClusterTasks(address).submit(functools.partial(operator.truediv, 1), [1, 0, 2])()


def test_tasks_go_to_the_workspace_scheduler_else_to_the_local_pool(demo_ws, address, monkeypatch):
    from tracer.provenance.cluster import ClusterTasks, tasks_for
    monkeypatch.setenv(WORKERS_ENV, "2")
    assert tasks_for(demo_ws, 1, 10) == LocalTasks(2)
    assert tasks_for(demo_ws, 1, 1) == LocalTasks(1)  # no more workers than tasks
    on_cluster = tasks_for(open_workspace(demo_ws.path, scheduler=address), 1, 10)
    assert isinstance(on_cluster, ClusterTasks) and on_cluster.scheduler == address


def _measured(ws):
    sl = slice_from_spec(ws, "time=1960..1969")
    tests = {n: TESTS[n] for n in ("rise_and_fall", "tribune_mix", "gazette_outlet")}
    return measure(ws, tests, "ppmi-svd", [sl], COUNTS, SVD, MeasureSettings(bootstrap=4))


def test_measure_with_bootstrap_on_the_cluster_equals_the_local_tables(demo_ws, address, monkeypatch):
    monkeypatch.setattr(replicate_pool, "submit_replicates", _in_this_process)
    local = _measured(demo_ws)
    monkeypatch.setattr(replicate_pool, "submit_replicates", _refuse)
    remote = _measured(open_workspace(demo_ws.path, scheduler=address))
    assert len(local.replicates) == 12 and local.replicates["gap"].notna().all()
    # the replicates differ from each other, so an order swapped between them shows
    assert local.replicates.groupby("test")["gap"].nunique().min() == 4
    for part in ("summary", "replicates", "words", "leave_one_out"):
        pd.testing.assert_frame_equal(getattr(local, part), getattr(remote, part), check_exact=True)


def _verified(ws, model="ppmi-svd", model_settings=SVD, spec="all", **kw):
    sl = slice_from_spec(ws, spec)
    return trace(ws, TESTS["tribune_mix"], model, sl, COUNTS, model_settings, TraceSettings(verify=3, **kw))


def test_trace_verification_on_the_cluster_equals_the_local_tables(demo_ws, address, monkeypatch):
    monkeypatch.setattr(replicate_pool, "submit_replicates", _in_this_process)
    local = _verified(demo_ws)
    monkeypatch.setattr(replicate_pool, "submit_replicates", _refuse)
    remote = _verified(open_workspace(demo_ws.path, scheduler=address))
    rows = local.verification.rows
    assert len(rows) == 3 + 3 and rows["actual"].notna().all()
    pd.testing.assert_frame_equal(rows, remote.verification.rows, check_exact=True)
    pd.testing.assert_frame_equal(local.sources, remote.sources, check_exact=True)
    assert remote.verification.headline() == local.verification.headline()


def test_a_retrain_task_gives_the_model_trained_directly(demo_ws, address):
    """The retrained change of the top source, from the cluster's tasks, against a model trained
    here without that source by train_embedding (the library's one training path)."""
    from tracer.provenance.models import train_embedding
    r = _verified(open_workspace(demo_ws.path, scheduler=address))
    row = r.verification.rows.iloc[0]
    source = row["removed"].removeprefix("source=")
    sl = slice_from_spec(demo_ws, "all")
    test = TESTS["tribune_mix"]
    assert row["removed"].startswith("source=")

    def gap(weights):
        sub = Slice("all (reduced)", weights, int((weights > 0).sum()), 0)
        e = train_embedding(demo_ws, sub, "ppmi-svd", COUNTS, SVD, save=False)
        return weat(e.unit_vectors, e.index, test, with_p=False).gap

    without = sl.weights * (demo_ws.documents["source"].to_numpy() != source)
    assert row["documents"] == int((sl.weights - without).sum())
    # the change is taken from the traced model's own gap (for PPMI-SVD the attribution's base)
    assert row["actual_gap"] == gap(without) - r.gap


def test_word2vec_retrains_on_the_cluster_equal_the_local_ones(demo_ws, address, monkeypatch):
    """word2vec retrains run as tasks that open the workspace by its path; with one gensim worker
    and a seed, a worker process trains the same vectors as this one."""
    w2v = Word2VecSettings(dim=16, epochs=1, seed=2)
    monkeypatch.setattr(replicate_pool, "submit_replicates", _in_this_process)
    # one decade (about a seventh of the tokens): 14 word2vec trainings a side, each a few tenths of a second
    kw = dict(spec="time=1980..1989", seeds=2, top=3, candidates=20)
    local = _verified(demo_ws, "word2vec", w2v, **kw)
    monkeypatch.setattr(replicate_pool, "submit_replicates", _refuse)
    remote = _verified(open_workspace(demo_ws.path, scheduler=address), "word2vec", w2v, **kw)
    rows = local.verification.rows
    assert rows["seed_spread"].gt(0).all()  # two seeds, two different models each
    pd.testing.assert_frame_equal(rows, remote.verification.rows, check_exact=True)
    assert (local.effect_size, local.gap) == (remote.effect_size, remote.gap)


def test_one_local_worker_makes_each_counts_after_the_svd_before(demo_ws, monkeypatch):
    """With one local worker the retrains' counts are made one at a time, between the SVDs (not all
    held at once), and each embedding is the one embedding_from_counts makes of the same counts."""
    from tracer.provenance import models
    from tracer.provenance.counts import count_slice
    from tracer.provenance.models import embedding_from_counts, start_embeddings_from_counts
    monkeypatch.setenv(WORKERS_ENV, "1")
    events, real = [], models.ppmi_svd_vectors
    monkeypatch.setattr(models, "ppmi_svd_vectors", lambda m, settings: events.append("svd") or real(m, settings))
    specs = ("all", "time=1960..1969", "time=1970..1979")

    def made():
        for spec in specs:
            sl = slice_from_spec(demo_ws, spec)
            events.append("count")
            yield sl, count_slice(demo_ws, sl.weights, COUNTS, slice_name=sl.name)

    got = start_embeddings_from_counts(demo_ws, made(), SVD, len(specs))()
    assert events == ["count", "svd"] * len(specs)
    for emb, (sl, c) in zip(got, made()):
        want = embedding_from_counts(demo_ws, sl, c, SVD)
        assert emb.words == want.words and np.array_equal(emb.vectors, want.vectors)


def test_word2vec_bootstrap_replicates_on_the_cluster_equal_the_local_ones(demo_ws, address, monkeypatch):
    """word2vec replicates are tasks too (one per seed); the first one against a model trained here
    by train_embedding on the same resample (the path the replicates took before they were tasks)."""
    from tracer.analysis.measure import bootstrap_stream, bootstrap_weights
    from tracer.provenance.models import train_embedding
    w2v = Word2VecSettings(dim=16, epochs=1, seed=4)
    sl = slice_from_spec(demo_ws, "time=1960..1969")
    tests = {"tribune_mix": TESTS["tribune_mix"]}
    settings = MeasureSettings(bootstrap=3, seeds=2)

    def run(ws):
        return measure(ws, tests, "word2vec", [sl], COUNTS, w2v, settings).replicates

    monkeypatch.setattr(replicate_pool, "submit_replicates", _in_this_process)
    local = run(demo_ws)
    monkeypatch.setattr(replicate_pool, "submit_replicates", _refuse)
    pd.testing.assert_frame_equal(local, run(open_workspace(demo_ws.path, scheduler=address)), check_exact=True)
    assert len(local) == 3 and local["gap"].nunique() == 3
    first = bootstrap_weights(sl, bootstrap_stream(settings.seed, sl.name))
    gaps = [weat(e.unit_vectors, e.index, TESTS["tribune_mix"], with_p=False).gap
            for e in (train_embedding(demo_ws, sl, "word2vec", COUNTS, Word2VecSettings(dim=16, epochs=1, seed=4 + k),
                                      weights=first, save=False) for k in range(2))]
    assert local["gap"].iloc[0] == pytest.approx(np.mean(gaps), abs=0, rel=1e-12)
