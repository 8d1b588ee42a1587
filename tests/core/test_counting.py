import mmap

import numpy as np
import scipy.sparse as sp
import pytest
from hypothesis import given, settings, strategies as st

from tracer.core.count_engine import make_shards
from tracer.core.counting import CountSettings, ModelVocab, build_vocab, count_matrix
from tracer.provenance.counts import count_slice
from tracer.errors import SettingError, SliceError


def brute_force(tokens, offsets, weights, vocab, n_full, s: CountSettings):
    """Dense reference: the counting rule of tracer.core.counting written as plain loops."""
    idm = vocab.id_map(n_full)
    dist = s.distance_weights()
    out = np.zeros((len(vocab), len(vocab)))
    for d in range(len(offsets) - 1):
        if weights[d] == 0:
            continue
        ids = [idm[t] for t in tokens[offsets[d]:offsets[d + 1]] if idm[t] >= 0]
        for i in range(len(ids)):
            for j in range(i + 1, min(i + s.window, len(ids) - 1) + 1):
                out[ids[i], ids[j]] += weights[d] * dist[j - i - 1]
                out[ids[j], ids[i]] += weights[d] * dist[j - i - 1]
    return out


@st.composite
def corpora(draw):
    n_full = draw(st.integers(1, 12))
    lengths = draw(st.lists(st.integers(0, 25), min_size=1, max_size=8))
    tokens = np.array(draw(st.lists(st.integers(0, n_full - 1), min_size=sum(lengths), max_size=sum(lengths))),
                      dtype=np.uint32)
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    weights = np.array(draw(st.lists(st.sampled_from([0.0, 1.0, 2.0, 0.5, 1.7]), min_size=len(lengths),
                                     max_size=len(lengths))))
    s = CountSettings(window=draw(st.integers(1, 6)), weighting=draw(st.sampled_from(["uniform", "harmonic", "linear"])),
                      min_count=draw(st.integers(1, 3)))
    return tokens, offsets, weights, n_full, s, draw(st.integers(1, 40))


@settings(max_examples=150, deadline=None)
@given(corpora())
def test_counts_equal_the_brute_force_rule(case):
    tokens, offsets, weights, n_full, s, shard_tokens = case
    words = [f"w{i}" for i in range(n_full)]
    try:
        vocab = build_vocab(tokens, offsets, np.ones(len(weights)), words, s)
    except SliceError:
        return
    m = count_matrix(tokens, offsets, weights, vocab, n_full, s, shard_tokens=shard_tokens, workers=2)
    assert m.has_canonical_format
    np.testing.assert_allclose(m.toarray(), brute_force(tokens, offsets, weights, vocab, n_full, s), rtol=1e-12, atol=1e-12)


def test_windows_do_not_cross_documents_and_rare_words_are_removed_first():
    # words: 0=a 1=b 2=rare ; documents [a rare b] [b a]
    tokens = np.array([0, 2, 1, 1, 0], dtype=np.uint32)
    offsets = np.array([0, 3, 5])
    s = CountSettings(window=1, min_count=2)
    vocab = build_vocab(tokens, offsets, np.ones(2), ["a", "b", "rare"], s)
    assert vocab.words == ["a", "b"]
    m = count_matrix(tokens, offsets, np.ones(2), vocab, 3, s).toarray()
    # "rare" is removed before windowing, so a and b become neighbours in document 1;
    # the last b of document 0 and the first b of document 1 never pair
    np.testing.assert_array_equal(m, [[0, 2], [2, 0]])


def test_results_do_not_depend_on_sharding_or_threads(lee_ws):
    s = CountSettings()
    w = np.ones(lee_ws.n_documents)
    vocab = build_vocab(lee_ws.tokens, lee_ws.doc_offsets, w, lee_ws.vocab.words, s)
    ref = count_matrix(lee_ws.tokens, lee_ws.doc_offsets, w, vocab, len(lee_ws.vocab), s, workers=1,
                       shard_tokens=10**9)
    for shard_tokens, workers in ((1000, 2), (7777, 1), (50_000, 2)):
        other = count_matrix(lee_ws.tokens, lee_ws.doc_offsets, w, vocab, len(lee_ws.vocab), s, workers=workers,
                             shard_tokens=shard_tokens)
        assert (abs(other - ref)).max() < 1e-9


def test_counts_are_linear_in_document_weights(lee_ws):
    s = CountSettings(weighting="harmonic")
    rng = np.random.default_rng(3)
    n = lee_ws.n_documents
    w1, w2 = rng.poisson(1.0, n).astype(float), rng.random(n)  # integer and arbitrary weights
    vocab = build_vocab(lee_ws.tokens, lee_ws.doc_offsets, np.ones(n), lee_ws.vocab.words, s)

    def c(w):
        return count_matrix(lee_ws.tokens, lee_ws.doc_offsets, w, vocab, len(lee_ws.vocab), s)

    assert abs(c(w1 + 2.5 * w2) - (c(w1) + 2.5 * c(w2))).max() < 1e-8


def test_equals_nltk_window_counts_on_the_lee_corpus(lee_ws):
    """Reference: NLTK's BigramCollocationFinder.from_words(words, window_size=w + 1) counts each ordered
    pair (x, y) with y at most w tokens after x; summed both ways it is the symmetric window count.
    NLTK sees one stream, so it is run document by document on the tokens left after min-count removal."""
    from collections import Counter

    from nltk.collocations import BigramCollocationFinder

    window = 4
    s = CountSettings(window=window, min_count=5)
    c = count_slice(lee_ws, np.ones(lee_ws.n_documents), s)
    keep = set(c.vocab.words)
    words = lee_ws.vocab.words
    expected: Counter = Counter()
    for d in range(lee_ws.n_documents):
        doc = [words[i] for i in lee_ws.document_tokens(d) if words[i] in keep]
        finder = BigramCollocationFinder.from_words(doc, window_size=window + 1)
        for (x, y), n in finder.ngram_fd.items():
            expected[(x, y)] += n
            expected[(y, x)] += n
    m = c.matrix.tocoo()
    ours = {(c.vocab.words[i], c.vocab.words[j]): v for i, j, v in zip(m.row, m.col, m.data)}
    assert len(ours) == len(expected) and len(ours) > 50_000
    assert all(ours[k] == v for k, v in expected.items())


def test_vocab_respects_min_count_max_vocab_and_ties():
    tokens = np.array([3, 3, 1, 1, 2, 0, 0, 0], dtype=np.uint32)
    offsets = np.array([0, 8])
    v = build_vocab(tokens, offsets, np.ones(1), list("abcd"), CountSettings(min_count=2))
    assert v.words == ["a", "b", "d"] and list(v.counts) == [3, 2, 2]  # ties by first id
    v = build_vocab(tokens, offsets, np.ones(1), list("abcd"), CountSettings(min_count=1, max_vocab=2))
    assert v.words == ["a", "b"]
    with pytest.raises(SliceError, match="lower --min-count"):
        build_vocab(tokens, offsets, np.ones(1), list("abcd"), CountSettings(min_count=9))


def test_shards_group_documents_by_weight():
    offsets = np.arange(0, 110, 10)
    w = np.array([1, 1, 2, 0, 1, 2, 2, 1, 0, 1], dtype=float)
    shards = make_shards(offsets, w, shard_tokens=20)
    assert sorted(np.concatenate([s.docs for s in shards]).tolist()) == [0, 1, 2, 4, 5, 6, 7, 9]
    assert all(np.all(w[s.docs] == s.weight) for s in shards)
    assert all((offsets[s.docs + 1] - offsets[s.docs]).sum() <= 20 for s in shards)
    few = make_shards(offsets, np.linspace(0.1, 1, 10), shard_tokens=1000)
    assert len(few) == 10 and all(s.weight is not None for s in few)  # 10 distinct weights: one group each
    spread = make_shards(np.arange(0, 410, 10), np.linspace(0.1, 1, 40), shard_tokens=1000)
    assert len(spread) == 1 and spread[0].weight is None  # too many distinct weights: per-pair values


@pytest.mark.parametrize("kwargs, message", [
    ({"window": 0}, "window must be a whole number >= 1"),
    ({"weighting": "gaussian"}, "weighting must be one of uniform, harmonic, linear"),
    ({"min_count": 0}, "min_count must be a whole number >= 1"),
    ({"max_vocab": 0}, "max_vocab must be a whole number >= 1 or unset"),
])
def test_bad_settings_name_the_setting(kwargs, message):
    with pytest.raises(SettingError, match=message):
        CountSettings(**kwargs)


def test_bad_weights_are_refused():
    v = ModelVocab(["a"], np.array([0]), np.array([3]))
    with pytest.raises(SettingError, match="one value per document"):
        count_matrix(np.zeros(3, np.uint32), np.array([0, 3]), np.ones(2), v, 1, CountSettings())
    with pytest.raises(SettingError, match="finite and non-negative"):
        count_matrix(np.zeros(3, np.uint32), np.array([0, 3]), np.array([-1.0]), v, 1, CountSettings())


def test_upper_triangle_output_adds_up_to_the_symmetric_matrix(lee_ws):
    s = CountSettings()
    w = np.ones(lee_ws.n_documents)
    vocab = build_vocab(lee_ws.tokens, lee_ws.doc_offsets, w, lee_ws.vocab.words, s)
    args = (lee_ws.tokens, lee_ws.doc_offsets, w, vocab, len(lee_ws.vocab), s)
    full = count_matrix(*args, workers=2)
    upper = count_matrix(*args, workers=2, symmetric=False)
    assert upper.nnz == len(set(zip(*upper.nonzero())))  # no duplicate cells
    assert abs(sp.triu(upper) - upper).max() == 0  # upper triangle only
    assert abs((upper + upper.T) - full).max() < 1e-9  # the diagonal doubles in U + U^T


def test_wide_codes_and_plain_page_arrays_give_the_same_counts(lee_ws, monkeypatch):
    # the counter picks uint16 pair codes for a small vocabulary with uniform weights and
    # ordinary-page arrays above a size; forcing the other branch must change nothing
    import tracer.core._kernels as kernels
    import tracer.core.count_engine as engine
    import tracer.core.threads as threads
    s = CountSettings()
    w = np.ones(lee_ws.n_documents)
    vocab = build_vocab(lee_ws.tokens, lee_ws.doc_offsets, w, lee_ws.vocab.words, s)
    args = (lee_ws.tokens, lee_ws.doc_offsets, w, vocab, len(lee_ws.vocab), s)
    assert engine.narrow_codes(len(vocab), s)
    ref = count_matrix(*args, workers=2)
    monkeypatch.setattr(kernels, "NARROW_MAX_WORDS", 0)
    monkeypatch.setattr(threads, "_PLAIN_PAGES_FROM", 0)
    assert not engine.narrow_codes(len(vocab), s)
    assert isinstance(threads.big_empty(10, np.int32).base.obj, mmap.mmap)
    other = count_matrix(*args, workers=2)
    assert other.has_canonical_format and ref.has_canonical_format
    assert (abs(other - ref)).max() == 0 and other.nnz == ref.nnz
