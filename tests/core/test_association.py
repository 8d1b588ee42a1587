import math

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats

from tracer.core.association import (association_scores, effect_size, mean_gap, permutation_p_value, ripa_direction,
                                     score_gradient, unit_rows, weat)
from tracer.core.embedding import Embedding
from tracer.core.association import AssociationTest


def scipy_p(sx, sy):
    """Reference: scipy.stats.permutation_test, exact, independent samples, one-sided (greater)."""
    res = stats.permutation_test((sx, sy), lambda x, y, axis: np.sum(x, axis=axis) - np.sum(y, axis=axis),
                                 permutation_type="independent", alternative="greater", n_resamples=np.inf,
                                 vectorized=True)
    return res.pvalue


@pytest.mark.parametrize("nx, ny, seed", [(4, 4, 0), (5, 3, 1), (6, 6, 2), (7, 5, 3), (3, 8, 4)])
def test_exact_p_value_equals_scipy(nx, ny, seed):
    rng = np.random.default_rng(seed)
    sx, sy = rng.normal(0.2, 1, nx), rng.normal(0, 1, ny)
    ours = permutation_p_value(sx, sy)
    assert ours.method == "exact" and ours.n_partitions == math.comb(nx + ny, nx)
    assert ours.p_value == pytest.approx(scipy_p(sx, sy), abs=1e-12)


def test_exact_p_value_with_ties_equals_scipy():
    sx, sy = np.array([1.0, 1.0, 0.5, 0.1]), np.array([0.5, 0.1, 1.0, 0.0])
    assert permutation_p_value(sx, sy).p_value == pytest.approx(scipy_p(sx, sy), abs=1e-12)


def test_monte_carlo_agrees_with_exact_within_sampling_error():
    rng = np.random.default_rng(5)
    sx, sy = rng.normal(0.3, 1, 7), rng.normal(0, 1, 7)
    exact = permutation_p_value(sx, sy).p_value
    mc = permutation_p_value(sx, sy, exact_budget=10, n_resamples=40_000, rng=np.random.default_rng(9))
    assert mc.method == "monte-carlo" and mc.n_partitions == 40_000
    se = math.sqrt(exact * (1 - exact) / 40_000)
    assert abs(mc.p_value - exact) < 4 * se + 1 / 40_001
    # the +1 correction: never zero (common practice; Phipson and Smyth 2010)
    tiny = permutation_p_value(np.full(10, 5.0) + np.arange(10), np.zeros(10), exact_budget=10, n_resamples=999,
                               rng=np.random.default_rng(0))
    assert tiny.p_value == pytest.approx(1 / 1000)


def test_monte_carlo_does_not_depend_on_batch_size():
    rng = np.random.default_rng(1)
    sx, sy = rng.normal(0, 1, 9), rng.normal(0, 1, 9)
    ps = {permutation_p_value(sx, sy, exact_budget=1, n_resamples=5000, rng=np.random.default_rng(3),
                              batch=b).p_value for b in (1, 333, 4096, 5000)}
    assert len(ps) == 1


@settings(max_examples=200, deadline=None)
@given(st.integers(2, 10).flatmap(lambda n: st.tuples(
    st.lists(st.floats(-2, 2, allow_nan=False), min_size=n, max_size=n),
    st.lists(st.floats(-2, 2, allow_nan=False), min_size=n, max_size=n))))
def test_effect_size_is_bounded_by_two_for_equal_sizes(case):
    """|d| <= 2 with the population standard deviation and |X| = |Y| (a fact of the trade)."""
    d = effect_size(np.array(case[0]), np.array(case[1]))
    assert math.isnan(d) or abs(d) <= 2 + 1e-9


def test_effect_size_formula():
    sx, sy = np.array([0.3, 0.1, 0.2]), np.array([-0.1, 0.0, -0.2])
    pooled = np.concatenate([sx, sy])
    assert effect_size(sx, sy) == pytest.approx((sx.mean() - sy.mean()) / np.std(pooled, ddof=0))
    # two perfectly separated sets reach the ceiling
    assert effect_size(np.ones(4), -np.ones(4)) == pytest.approx(2.0)


def _toy_embedding():
    words = ["x1", "x2", "y1", "y2", "a1", "a2", "b1", "b2"]
    v = np.array([[1, 0.1, 0], [0.9, 0.2, 0.1], [0.1, 1, 0], [0.2, 0.9, 0.1],
                  [1, 0, 0.1], [0.95, 0.05, 0], [0, 1, 0.1], [0.05, 0.95, 0]], dtype=np.float32)
    return Embedding(words, v, {"model": "toy", "slice": "all"})


def test_weat_on_a_toy_embedding_by_hand():
    emb = _toy_embedding()
    test = AssociationTest("t", ("x1", "x2"), ("y1", "y2"), ("a1", "a2"), ("b1", "b2"), ())
    r = weat(emb.unit_vectors, emb.index, test)
    u = emb.unit_vectors

    def s(w):
        i = emb.index
        return np.mean([u[i[w]] @ u[i[a]] for a in ("a1", "a2")]) - np.mean([u[i[w]] @ u[i[b]] for b in ("b1", "b2")])

    sx, sy = np.array([s("x1"), s("x2")]), np.array([s("y1"), s("y2")])
    assert r.statistic == pytest.approx(sx.sum() - sy.sum(), rel=1e-6)
    assert r.effect_size == pytest.approx((sx.mean() - sy.mean()) / np.concatenate([sx, sy]).std(), rel=1e-6)
    assert r.p_value == pytest.approx(1 / 6) and r.p_method == "exact"  # the best of C(4, 2) = 6 partitions


def test_ripa_direction_for_one_pair_is_the_normalised_difference():
    """RIPA (Ethayarajh, Duvenaud and Hirst 2019): for one pair the relation vector is (a - b) / |a - b|."""
    emb = _toy_embedding()
    d = ripa_direction(emb, [("a1", "b1")])
    diff = emb.vector("a1") - emb.vector("b1")
    np.testing.assert_allclose(d, diff / np.linalg.norm(diff), rtol=1e-6)
    assert ripa_direction(emb, [("zz", "b1")]) is None


def _random_words(seed=0, n=12, dim=16):
    rng = np.random.default_rng(seed)
    return [f"w{i}" for i in range(n)], rng.standard_normal((n, dim)).astype(np.float32)


def test_scores_gap_and_d_against_gensim_cosines():
    """s(w, A, B), the gap and d from gensim's KeyedVectors.similarity (its own cosine, float32),
    d's standard deviation from numpy (population, ddof=0)."""
    from gensim.models import KeyedVectors
    words, vectors = _random_words()
    kv = KeyedVectors(vectors.shape[1])
    kv.add_vectors(words, vectors)
    x, y, a, b = words[0:3], words[3:7], words[7:10], words[10:12]

    def s(w):
        return np.mean([kv.similarity(w, v) for v in a]) - np.mean([kv.similarity(w, v) for v in b])

    ref_x, ref_y = np.array([s(w) for w in x], np.float64), np.array([s(w) for w in y], np.float64)
    emb = Embedding(words, vectors, {"model": "toy", "slice": "all"})
    rows = {k: np.array([emb.index[w] for w in v]) for k, v in (("x", x), ("y", y), ("a", a), ("b", b))}
    sx = association_scores(unit_rows(vectors), rows["x"], rows["a"], rows["b"])
    sy = association_scores(unit_rows(vectors), rows["y"], rows["a"], rows["b"])
    np.testing.assert_allclose(np.concatenate([sx, sy]), np.concatenate([ref_x, ref_y]), atol=1e-6)
    gap = ref_x.mean() - ref_y.mean()
    assert abs(gap) > 0.05  # the check would be empty on a zero gap
    assert mean_gap(sx, sy) == pytest.approx(gap, abs=1e-6)
    assert effect_size(sx, sy) == pytest.approx(gap / np.std(np.concatenate([ref_x, ref_y])), rel=1e-5)
    r = weat(unit_rows(vectors), emb.index, AssociationTest("t", tuple(x), tuple(y), tuple(a), tuple(b), ()),
             with_p=False)
    assert r.gap == pytest.approx(gap, abs=1e-6) and r.effect_size == pytest.approx(effect_size(sx, sy), rel=1e-12)


@pytest.mark.parametrize("quantity, n_x", [("gap", 4), ("effect_size", 4), ("gap", 7), ("effect_size", 2)])
def test_score_gradient_matches_central_differences(quantity, n_x):
    # checking an analytic derivative against central differences is common practice; the
    # quantities are written out with numpy (mean difference; over np.std with ddof=0)
    rng = np.random.default_rng(n_x)
    s = rng.standard_normal(7)

    def value(v):
        gap = v[:n_x].mean() - (v[n_x:].mean() if n_x < len(v) else 0.0)
        return gap / np.std(v) if quantity == "effect_size" and n_x < len(v) else gap

    grad = score_gradient(s, n_x, quantity)
    h = 1e-6
    numeric = [(value(s + h * e) - value(s - h * e)) / (2 * h) for e in np.eye(len(s))]
    np.testing.assert_allclose(grad, numeric, rtol=1e-6, atol=1e-9)
