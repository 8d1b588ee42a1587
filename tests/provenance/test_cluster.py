"""Counting by document partitions on a dask.distributed LocalCluster equals the local count."""

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
