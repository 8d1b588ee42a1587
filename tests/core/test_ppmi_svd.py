import numpy as np
import pytest
import scipy.sparse as sp

from tracer.core.counting import CountSettings
from tracer.corpus.slices import slice_from_spec
from tracer.core.ppmi_svd import LARGE_NNZ, PpmiSvdSettings, fix_signs, truncated_svd
from tracer.provenance.models import train_embedding
from tracer.errors import SettingError
from tests.conftest import random_sparse


def test_truncated_svd_equals_numpy_full_svd():
    rng = np.random.default_rng(7)
    m = sp.random(60, 40, density=0.3, random_state=1, format="csr") + sp.diags(np.linspace(5, 1, 40), shape=(60, 40))
    dense = m.toarray()
    u, s, vt = truncated_svd(m, 8, seed=3)
    U, S, Vt = np.linalg.svd(dense, full_matrices=False)
    np.testing.assert_allclose(s, S[:8], rtol=1e-8)
    # singular vectors agree up to sign; the reconstruction has no sign ambiguity
    np.testing.assert_allclose(np.abs(np.sum(u * U[:, :8], axis=0)), 1, atol=1e-6)
    np.testing.assert_allclose(u @ np.diag(s) @ vt, U[:, :8] @ np.diag(S[:8]) @ Vt[:8], atol=1e-8)
    # fixed sign rule: the largest entry of each left vector is positive
    assert np.all(u[np.argmax(np.abs(u), axis=0), np.arange(8)] > 0)
    del rng


def test_dim_too_large_is_refused():
    with pytest.raises(SettingError, match="dim 10 is too large for a vocabulary of 10 words"):
        truncated_svd(sp.eye(10, format="csr"), 10)


def test_ppmi_svd_is_deterministic_and_meaningful(lee_ws):
    sl = slice_from_spec(lee_ws, "all")
    a = train_embedding(lee_ws, sl, "ppmi-svd", CountSettings(), PpmiSvdSettings(dim=50), save=False)
    b = train_embedding(lee_ws, sl, "ppmi-svd", CountSettings(), PpmiSvdSettings(dim=50), save=False)
    np.testing.assert_array_equal(a.vectors, b.vectors)
    assert a.vectors.shape == (len(a.words), 50)
    assert a.card["model"] == "ppmi-svd" and a.card["corpus_hash"] == lee_ws.corpus_hash
    assert a.extras["singular_values"].shape == (50,)


def test_slice_too_small_for_dim(lee_ws):
    sl = slice_from_spec(lee_ws, "time=1990")
    with pytest.raises(SettingError, match=r"slice time=1990 has \d+ words at min count 5; --dim 5000 must be below"):
        train_embedding(lee_ws, sl, "ppmi-svd", CountSettings(), PpmiSvdSettings(dim=5000), save=False)


def test_sign_fix_against_numpy_svd():
    """fix_signs on numpy.linalg.svd's factors: the rule holds, the product is unchanged, and
    the answer does not depend on which signs the solver returned; the truncated solver
    then agrees with numpy's top k to the sign."""
    rng = np.random.default_rng(3)
    dense = rng.standard_normal((30, 20)) @ np.diag(np.linspace(6, 1, 20)) @ rng.standard_normal((20, 20))
    U, S, Vt = np.linalg.svd(dense, full_matrices=False)
    u, vt = fix_signs(U, Vt)
    assert np.all(u[np.argmax(np.abs(u), axis=0), np.arange(u.shape[1])] > 0)
    np.testing.assert_allclose(u @ np.diag(S) @ vt, dense, atol=1e-9)
    flips = rng.choice([-1.0, 1.0], size=U.shape[1])
    u2, vt2 = fix_signs(U * flips, Vt * flips[:, None])
    np.testing.assert_array_equal(u2, u)
    np.testing.assert_array_equal(vt2, vt)
    k = 6
    cold = truncated_svd(sp.csr_array(dense), k, seed=1)
    got_u, got_s, got_vt = cold
    np.testing.assert_allclose(got_s, S[:k], rtol=1e-8)
    np.testing.assert_allclose(got_u, u[:, :k], atol=1e-6)
    np.testing.assert_allclose(got_vt, vt[:k], atol=1e-6)


def _reference_svds(m, k, seed):
    """scipy's svds on the CSR matrix itself (its own products), start vector and signs as truncated_svd's."""
    from scipy.sparse.linalg import svds
    v0 = np.random.default_rng(seed).standard_normal(min(m.shape))
    u, s, vt = svds(sp.csr_array(m, dtype=np.float64), k=k, v0=v0, solver="arpack")
    order = np.argsort(-s, kind="stable")
    return fix_signs(u[:, order], vt[order]) + (s[order],)


def _nonsymmetric(n, seed):
    # a non-symmetric matrix (as PPMI with alpha < 1 is), so a transposed product taken the wrong
    # way round changes the answer; square, so a wrong transpose still runs
    rng = np.random.default_rng(seed)
    m = random_sparse((n, n), 0.05, rng, "csr")
    m.data = rng.exponential(size=m.nnz)
    return m


def test_truncated_svd_equals_scipy_svds_on_the_matrix():
    m = _nonsymmetric(600, 11)
    assert m.nnz < LARGE_NNZ  # the exact path: scipy's products bit for bit
    u_ref, vt_ref, s_ref = _reference_svds(m, 12, seed=4)
    u, s, vt = truncated_svd(m, 12, seed=4)
    np.testing.assert_allclose(s, s_ref, rtol=0, atol=1e-10)
    np.testing.assert_allclose(u * s, u_ref * s_ref, rtol=0, atol=1e-10)
    np.testing.assert_allclose(vt, vt_ref, rtol=0, atol=1e-10)
    old = truncated_svd(m, 12, seed=4, products="scipy")
    for a, b in zip((u, s, vt), old):
        np.testing.assert_array_equal(a, b)  # the products are scipy's bit for bit, so is the answer


def test_fast_path_is_the_same_on_any_threads_and_near_scipy(monkeypatch):
    from tracer.core import ppmi_svd, sparse_products
    m = _nonsymmetric(600, 11)
    u_ref, vt_ref, s_ref = _reference_svds(m, 12, seed=4)
    monkeypatch.setattr(sparse_products, "THREADS_FROM_NNZ", 0)  # blocks of rows even on a small matrix
    monkeypatch.setattr(ppmi_svd, "LARGE_NNZ", 0)  # and float32 values
    one, two = (truncated_svd(m, 12, seed=4, threads=t) for t in (1, 2))
    for a, b in zip(one, two):
        np.testing.assert_array_equal(a, b)
    u, s, vt = one
    assert not np.array_equal(s, s_ref)  # the fast path really ran
    # float32 values: each product within about 6e-8 relative (float32's unit roundoff)
    np.testing.assert_allclose(s, s_ref, rtol=1e-6, atol=0)
    np.testing.assert_allclose(u * s, u_ref * s_ref, rtol=0, atol=1e-5 * s_ref[0])


def _zipf_topic_ppmi(seed=3):
    """The PPMI (window 5, alpha 0.75) of a generated corpus of 1.5M tokens: 5,000 documents of 300
    words, three quarters from a Zipf background over 60,000 types (s 1.07; Zipf frequencies are
    common practice for word counts), a quarter from the document's topic (40 topics of 400 words),
    so the matrix has a realistic vocabulary (over 20,000 words at min count 5) and structure."""
    from tracer.core.counting import CountSettings, build_vocab, count_matrix
    from tracer.core.pmi import ppmi_matrix
    rng = np.random.default_rng(seed)
    n_types, n_docs, doc_len, n_topics = 60_000, 5_000, 300, 40
    zipf = 1.0 / np.arange(1, n_types + 1) ** 1.07
    topic_words = rng.choice(np.arange(200, 30_000), (n_topics, 400))
    tokens = rng.choice(n_types, n_docs * doc_len, p=zipf / zipf.sum())
    topic = np.repeat(rng.integers(n_topics, size=n_docs), doc_len)
    from_topic = rng.random(tokens.size) < 0.25
    tokens[from_topic] = topic_words[topic[from_topic], rng.integers(400, size=from_topic.sum())]
    tokens = tokens.astype(np.uint32)
    offsets = np.arange(n_docs + 1, dtype=np.int64) * doc_len
    weights, cs = np.ones(n_docs), CountSettings()
    vocab = build_vocab(tokens, offsets, weights, [f"w{i}" for i in range(n_types)], cs)
    return ppmi_matrix(count_matrix(tokens, offsets, weights, vocab, n_types, cs), alpha=0.75, shift=1.0)


def test_fast_path_keeps_d_and_gap_of_the_exact_svd_at_20000_words():
    from tracer.core.association import association_scores, effect_size, mean_gap, unit_rows
    from tracer.core.ppmi_svd import FAST_PATH_TOLERANCE
    ppmi = _zipf_topic_ppmi()
    assert ppmi.shape[0] > 20_000 and ppmi.nnz >= LARGE_NNZ
    units = [unit_rows(u * s ** 0.5) for u, s, _ in
             (truncated_svd(ppmi, 50, seed=0, products=p) for p in ("gram", "scipy"))]
    rng = np.random.default_rng(9)
    worst = {"d": 0.0, "gap": 0.0}
    for _ in range(40):  # random tests of 4 words a set, over the whole vocabulary
        x, y, a, b = rng.choice(ppmi.shape[0], 16, replace=False).reshape(4, 4)
        (d1, g1), (d2, g2) = ((effect_size(sx, sy), mean_gap(sx, sy)) for sx, sy in
                              ((association_scores(u, x, a, b), association_scores(u, y, a, b)) for u in units))
        worst = {"d": max(worst["d"], abs(d1 - d2)), "gap": max(worst["gap"], abs(g1 - g2))}
    assert worst["d"] > 0  # the two paths differ (by rounding)
    assert worst["d"] <= FAST_PATH_TOLERANCE["d"] and worst["gap"] <= FAST_PATH_TOLERANCE["gap"], worst


def test_separate_products_give_the_same_svd(monkeypatch):
    from tracer.core import sparse_products
    m = _nonsymmetric(300, 5)
    gram = truncated_svd(m, 10, seed=1)  # one block of float64 values: scipy's sums
    monkeypatch.setattr(sparse_products, "THREADS_FROM_NNZ", 0)  # separate products in row blocks
    for products in ("separate", "scipy"):
        for a, b in zip(gram, truncated_svd(m, 10, seed=1, threads=2, products=products)):
            np.testing.assert_array_equal(a, b)
