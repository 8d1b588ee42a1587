import math

import numpy as np
import pytest
import scipy.sparse as sp

from tracer.errors import SettingError
from tracer.core.pmi import Marginals, log_z, pmi, pmi_of_cells, pmi_sensitivities, ppmi, ppmi_matrix, z_without

# Term-context counts from Jurafsky and Martin, Speech and Language Processing (3rd ed. draft),
# chapter 6, section on PPMI (rows cherry, strawberry, digital, information; columns computer,
# data, result, pie, sugar). Counts and the PPMI values below are from memory of that table.
JM_COUNTS = np.array([
    [2, 8, 9, 442, 25],
    [0, 0, 1, 60, 19],
    [1670, 1683, 85, 5, 4],
    [3325, 3982, 378, 5, 13],
], dtype=float)
# PPMI in bits (log2), as printed in the book's PPMI table (from memory)
JM_PPMI_BITS = np.array([
    [0, 0, 0, 4.38, 3.30],
    [0, 0, 0, 4.10, 5.51],
    [0.18, 0.01, 0, 0, 0],
    [0.02, 0.09, 0.28, 0, 0],
])


def _by_hand_pmi(counts, alpha):
    """Reference: PMI_alpha from probabilities, log(P(w, c) / (P(w) P_alpha(c))), written with numpy
    (Levy, Goldberg and Dagan 2015), -inf where the count is 0."""
    total = counts.sum()
    pw = counts.sum(1) / total
    fc = counts.sum(0)
    pc = fc ** alpha / np.sum(fc ** alpha)
    with np.errstate(divide="ignore"):
        return np.log((counts / total) / np.outer(pw, pc))


def test_ppmi_matches_the_textbook_table():
    got_bits = ppmi_matrix(sp.csr_array(JM_COUNTS), alpha=1.0).toarray() / np.log(2)
    np.testing.assert_allclose(got_bits, JM_PPMI_BITS, atol=0.006)
    # the worked example in the text: ppmi(information, data) = log2(.3399 / (.6575 * .4842)) = .0944
    assert got_bits[3, 1] == pytest.approx(0.0944, abs=5e-4)


def test_smoothed_pmi_is_the_textbook_formula():
    """PMI_alpha(w, c) = log( P(w, c) / (P(w) P_alpha(c)) ), P_alpha(c) = f(c)^alpha / sum f^alpha
    (Levy, Goldberg and Dagan 2015, eq. for context distribution smoothing)."""
    rng = np.random.default_rng(0)
    counts = rng.integers(0, 6, size=(7, 9)).astype(float)
    expected = _by_hand_pmi(counts, 0.75)
    m = Marginals.of(sp.csr_array(counts), 0.75)
    r, c = np.nonzero(counts)
    np.testing.assert_allclose(pmi_of_cells(counts[r, c], m.rows[r], m.cols[c], m), expected[r, c], rtol=1e-12)
    shifted = ppmi_matrix(sp.csr_array(counts), alpha=0.75, shift=5).toarray()
    np.testing.assert_allclose(shifted, np.maximum(np.nan_to_num(expected, neginf=0) - np.log(5), 0) * (counts > 0),
                               atol=1e-12)
    assert pmi_of_cells(0.0, 3.0, 3.0, m) == -np.inf


@pytest.mark.parametrize("kwargs, message", [({"alpha": 0}, "alpha"), ({"alpha": 1.5}, "alpha"),
                                             ({"shift": 0.5}, "shift k must be >= 1")])
def test_bad_pmi_settings(kwargs, message):
    with pytest.raises(SettingError, match=message):
        ppmi_matrix(sp.csr_array(JM_COUNTS), **kwargs)


def _symmetric_counts(seed, n=12):
    rng = np.random.default_rng(seed)
    upper = np.triu(rng.integers(0, 5, size=(n, n)).astype(float))
    return upper + upper.T


def test_log_z_is_the_log_of_the_smoothed_normaliser():
    cols = np.array([3.0, 0.0, 7.5, 1.0, 0.0, 12.0])
    # reference: the sum over the nonzero columns written out in plain Python
    assert log_z(cols, 0.75) == pytest.approx(math.log(sum(c ** 0.75 for c in cols if c > 0)), rel=1e-15)
    batch = np.stack([cols, cols[::-1] * 2, np.zeros(6)])
    np.testing.assert_allclose(log_z(batch, 0.75), [log_z(cols, 0.75), log_z(cols[::-1] * 2, 0.75), 0.0], rtol=1e-15)
    assert Marginals.of(sp.csr_array(JM_COUNTS), 1.0).log_z == pytest.approx(math.log(JM_COUNTS.sum()), rel=1e-15)


def test_dense_batched_rows_equal_the_sparse_matrix_and_the_textbook_formula():
    """The same pmi/ppmi lines on a whole sparse matrix and on a batch of dense row blocks
    (the attribution's use), both against the formula from probabilities."""
    rows = np.array([1, 4, 7])
    batch = [_symmetric_counts(s) for s in range(3)]
    counts = np.stack([c[rows] for c in batch])                 # (3, n_rows, n)
    sums = np.stack([c.sum(1) for c in batch])                  # (3, n)
    got = ppmi(pmi(counts, sums[:, rows][:, :, None], sums[:, None, :], 0.75, log_z(sums, 0.75)[:, None, None]),
               shift=2.0)
    for k, c in enumerate(batch):
        expected = np.maximum(_by_hand_pmi(c, 0.75) - np.log(2.0), 0)
        np.testing.assert_allclose(got[k], expected[rows], rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(ppmi_matrix(sp.csr_array(c), 0.75, shift=2.0).toarray()[rows], got[k],
                                   rtol=1e-12, atol=1e-12)


def test_z_without_equals_a_fresh_normaliser():
    sums = np.array([5.0, 2.0, 9.0, 4.0, 1.0])
    removed = sp.csr_array(np.array([[1.0, 0, 0, 4.0, 0], [0, 2.0, 0, 0, 0.5], [0, 0, 0, 0, 0]]))
    got = z_without(sums, removed, 0.75, math.exp(log_z(sums, 0.75)))
    # reference: Z summed afresh over what is left of each removal, in plain Python
    expected = [sum(v ** 0.75 for v in sums - r if v > 0) for r in removed.toarray()]
    np.testing.assert_allclose(got, expected, rtol=1e-12)


def test_pmi_sensitivities_match_central_differences():
    """dB = <K, dC> - <u, dr> for B = sum g * PMI of some rows, against central differences of
    B written out with numpy (rows' counts and the row sums varied independently)."""
    c = _symmetric_counts(4) + 1.0
    rows = np.array([0, 5])
    r = c.sum(1)
    rng = np.random.default_rng(1)
    g = rng.standard_normal((2, c.shape[1]))
    K, u = pmi_sensitivities(g, c[rows], r, rows, 0.75, log_z(r, 0.75))

    def b(C, R):
        return np.sum(g * (np.log(C) - np.log(R[rows])[:, None] - 0.75 * np.log(R)[None, :]
                           + np.log(np.sum(R ** 0.75))))

    dC, dr = rng.standard_normal(K.shape), rng.standard_normal(len(r))
    h = 1e-6
    numeric = (b(c[rows] + h * dC, r + h * dr) - b(c[rows] - h * dC, r - h * dr)) / (2 * h)
    assert np.sum(K * dC) - u @ dr == pytest.approx(numeric, rel=1e-6)
