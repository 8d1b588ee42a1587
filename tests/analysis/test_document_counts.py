"""The window walks against each other: the counter, the per-document counts, the linear pass.

The three walk a window in loops of their own (see the note in tracer.core.counting); the
counter itself is checked against the counting rule written as plain loops in
tests/core/test_counting.py, so here each other walk is checked against the counter, and the
per-document row sums also against the rule written out for one document.
"""

import numpy as np
import pytest

from tracer.analysis.document_counts import Stream, document_probe_rows, document_row_sums, kept_stream
from tracer.core import _kernels
from tracer.core.counting import CountSettings, cumulative_weights
from tracer.provenance.counts import count_slice

WEIGHTINGS = [CountSettings(window=3), CountSettings(weighting="harmonic"), CountSettings(window=7, weighting="linear")]


def _setup(ws, settings, seed=0):
    weights = np.random.default_rng(seed).integers(0, 3, ws.n_documents).astype(float)  # resampling-style
    counts = count_slice(ws, weights, settings)
    return weights, counts, kept_stream(ws, weights, counts)


@pytest.mark.parametrize("settings", WEIGHTINGS, ids=lambda s: f"{s.weighting}-{s.window}")
def test_per_document_counts_add_up_to_the_counters(lee_ws, settings):
    weights, counts, stream = _setup(lee_ws, settings)
    n_docs, n_words = lee_ws.n_documents, len(counts.vocab)
    probe = np.array([0, 3, 17, 40, n_words - 1])
    per_doc = document_probe_rows(stream, weights, settings.distance_weights(), probe, n_docs, n_words)
    by_word = per_doc.toarray().reshape(len(probe), n_docs, n_words).sum(axis=1)
    np.testing.assert_allclose(by_word, counts.matrix[probe].toarray(), rtol=1e-12)
    sums = document_row_sums(stream, weights, settings.distance_weights(), n_docs, n_words)
    np.testing.assert_allclose(sums.sum(axis=0), counts.row_sums, rtol=1e-12)
    assert np.all(sums.sum(axis=1)[weights == 0] == 0)


def test_row_sums_of_one_document_follow_the_counting_rule():
    """A document of 4 kept tokens, window 3, harmonic weights, written out by hand:
    positions 0..3, each token's neighbours within 3 on both sides, weights 1/k."""
    ids = np.array([0, 1, 0, 2])
    stream = Stream(ids, np.zeros(4, np.int64), np.arange(4), np.zeros(4, np.int64), np.full(4, 4))
    dist = CountSettings(window=3, weighting="harmonic").distance_weights()
    got = document_row_sums(stream, np.array([2.0]), dist, 1, 3).toarray()[0]
    # token 0: right neighbours at 1, 2, 3; token 2: left at 1, 2, right at 1 -> both are word 0
    expected = 2.0 * np.array([(1 + 1 / 2 + 1 / 3) + (1 + 1 / 2 + 1), 1 + 1 + 1 / 2, 1 / 3 + 1 / 2 + 1])
    np.testing.assert_allclose(got, expected, rtol=1e-15)


@pytest.mark.parametrize("settings", WEIGHTINGS, ids=lambda s: f"{s.weighting}-{s.window}")
def test_linear_pass_equals_the_per_document_counts(lee_ws, settings):
    """_kernels.linear_scores, fed random coefficients, against -<K, C^d> + <u, r^d> from the
    per-document matrices."""
    weights, counts, stream = _setup(lee_ws, settings, seed=1)
    n_docs, n_words = lee_ws.n_documents, len(counts.vocab)
    probe = np.array([2, 5, 11])
    rng = np.random.default_rng(2)
    K, u = rng.standard_normal((len(probe), n_words)), rng.standard_normal(n_words)
    dist = settings.distance_weights()
    per_doc = document_probe_rows(stream, weights, dist, probe, n_docs, n_words)
    sums = document_row_sums(stream, weights, dist, n_docs, n_words)
    expected = sums @ u - sum(per_doc[k * n_docs:(k + 1) * n_docs] @ K[k] for k in range(len(probe)))
    probe_row = np.full(n_words, -1, np.int64)
    probe_row[probe] = np.arange(len(probe))
    offsets = lee_ws.doc_offsets
    longest = int(np.diff(offsets).max())
    got = np.empty(n_docs)
    _kernels.linear_scores(np.asarray(lee_ws.tokens), offsets[:-1], offsets[1:], counts.vocab.id_map(len(lee_ws.vocab)),
                           weights, dist, cumulative_weights(dist), probe_row, K, u, np.empty(longest, np.int32),
                           np.empty(longest, np.int64), got)
    assert np.count_nonzero(got) > 100
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-9 * np.abs(expected).max())
