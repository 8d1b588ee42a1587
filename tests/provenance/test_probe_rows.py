"""Probe rows without counting every pair must equal the rows of the full count."""

import numpy as np
import pytest

import tracer.provenance.probe_rows as probe_rows_module
from tracer.core.counting import CountSettings, build_vocab, count_matrix
from tracer.errors import WordNotInVocabulary
from tracer.provenance.probe_rows import probe_rows

WORDS = ["the", "minister", "police", "australia", "said"]


def full_count(ws, weights, settings):
    vocab = build_vocab(ws.tokens, ws.doc_offsets, weights, ws.vocab.words, settings)
    return count_matrix(ws.tokens, ws.doc_offsets, weights, vocab, len(ws.vocab), settings), vocab


@pytest.mark.parametrize("settings", [CountSettings(), CountSettings(window=2, weighting="harmonic", min_count=3),
                                      CountSettings(window=4, weighting="linear", max_vocab=500)])
def test_rows_and_row_sums_equal_the_full_count_on_the_lee_corpus(lee_ws, settings):
    # the reference is the project's counter, itself checked against NLTK's windowed
    # bigram counts on this corpus (tests/core/test_counting.py)
    weights = np.ones(lee_ws.n_documents)
    matrix, vocab = full_count(lee_ws, weights, settings)
    got = probe_rows(lee_ws, weights, settings, WORDS)
    assert got.vocab.words == vocab.words
    rows = [vocab.index[w] for w in WORDS]
    np.testing.assert_allclose(got.rows, matrix[rows].toarray(), rtol=1e-12, atol=0)
    np.testing.assert_allclose(got.row_sums, np.asarray(matrix.sum(axis=1)).ravel(), rtol=1e-12, atol=0)


def test_document_weights_and_small_chunks_give_the_same_rows(lee_ws, monkeypatch):
    settings = CountSettings()
    weights = np.random.default_rng(3).poisson(1.0, lee_ws.n_documents).astype(float)  # a bootstrap replicate
    weights[:40] = 0
    matrix, vocab = full_count(lee_ws, weights, settings)
    monkeypatch.setattr(probe_rows_module, "_CHUNK_TOKENS", 5_000)  # many chunks of documents
    got = probe_rows(lee_ws, weights, settings, WORDS, vocab=vocab)
    rows = [vocab.index[w] for w in WORDS]
    assert np.array_equal(got.rows, matrix[rows].toarray())       # whole-number weights: exact
    assert np.array_equal(got.row_sums, np.asarray(matrix.sum(axis=1)).ravel())


def test_a_word_next_to_itself_counts_from_both_sides(small_ws):
    settings = CountSettings(window=1, min_count=1)
    weights = np.ones(small_ws.n_documents)
    matrix, vocab = full_count(small_ws, weights, settings)
    got = probe_rows(small_ws, weights, settings, ["the", "cat"])
    assert np.array_equal(got.rows, matrix[[vocab.index["the"], vocab.index["cat"]]].toarray())


def test_a_probe_below_the_minimum_count_is_named(lee_ws):
    with pytest.raises(WordNotInVocabulary, match="below min count 5 in these documents: zzzq"):
        probe_rows(lee_ws, np.ones(lee_ws.n_documents), CountSettings(), ["the", "zzzq"])
