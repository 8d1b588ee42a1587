import numpy as np
import pytest
import scipy.sparse as sp

from tracer.errors import SettingError
from tracer.core.pmi import Marginals, pmi_of_cells, ppmi_matrix

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
    total = counts.sum()
    pw = counts.sum(1) / total
    fc = counts.sum(0)
    pc = fc ** 0.75 / np.sum(fc ** 0.75)
    with np.errstate(divide="ignore"):
        expected = np.log((counts / total) / np.outer(pw, pc))
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
