"""PMI, PPMI and shifted PPMI with context-distribution smoothing.

With counts ``C`` (rows: words, columns: contexts), row sums ``r``, column sums
``c`` and ``Z = sum_j c_j ** alpha``::

    PMI[i, j]  = log C[i, j] - log r[i] - alpha * log c[j] + log Z
    PPMI[i, j] = max(PMI[i, j] - log k, 0)          (k = 1: plain PPMI)

Natural logarithms. ``alpha = 0.75`` is the context-distribution smoothing of
Levy, Goldberg and Dagan (2015); ``alpha = 1`` gives the textbook PMI. For the
symmetric window counts of :mod:`tracer.cooccur`, ``c = r``.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from tracer.errors import SettingError

DEFAULT_ALPHA = 0.75


@dataclasses.dataclass(frozen=True)
class Marginals:
    """Row sums, column sums and the smoothing normaliser of a count matrix."""

    rows: np.ndarray
    cols: np.ndarray
    alpha: float
    log_z: float

    @classmethod
    def of(cls, counts, alpha: float = DEFAULT_ALPHA) -> "Marginals":
        if not 0 < alpha <= 1:
            raise SettingError(f"alpha (context smoothing) must be in (0, 1]; got {alpha}")
        rows = np.asarray(counts.sum(axis=1)).ravel().astype(np.float64)
        cols = np.asarray(counts.sum(axis=0)).ravel().astype(np.float64)
        pos = cols[cols > 0]
        log_z = float(np.log(np.sum(pos ** alpha))) if len(pos) else 0.0
        return cls(rows, cols, float(alpha), log_z)


def pmi_of_cells(count, row_sum, col_sum, marginals: Marginals) -> np.ndarray:
    """PMI of cells given their joint count and marginals; -inf where the count is 0."""
    count = np.asarray(count, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (np.log(count) - np.log(np.asarray(row_sum, dtype=np.float64))
               - marginals.alpha * np.log(np.asarray(col_sum, dtype=np.float64)) + marginals.log_z)
    return np.where(count > 0, out, -np.inf)


def ppmi_matrix(counts, alpha: float = DEFAULT_ALPHA, shift: float = 1.0) -> sp.csr_array:
    """Shifted PPMI of a sparse count matrix, same sparsity or sparser.

    Parameters
    ----------
    counts : scipy.sparse matrix, shape (n_words, n_contexts)
    alpha : float
        Context-distribution smoothing exponent.
    shift : float
        k in ``max(PMI - log k, 0)``; 1 for plain PPMI.

    Returns
    -------
    scipy.sparse.csr_array of float64, shape (n_words, n_contexts)
    """
    if shift < 1:
        raise SettingError(f"shift k must be >= 1 (PPMI subtracts log k); got {shift}")
    m = sp.csr_array(counts, dtype=np.float64)
    m.sum_duplicates()
    marg = Marginals.of(m, alpha)
    row_of = np.repeat(np.arange(m.shape[0]), np.diff(m.indptr))
    values = pmi_of_cells(m.data, marg.rows[row_of], marg.cols[m.indices], marg) - np.log(shift)
    values = np.maximum(values, 0.0)
    out = sp.csr_array((values, m.indices.copy(), m.indptr.copy()), shape=m.shape)
    out.eliminate_zeros()
    return out
