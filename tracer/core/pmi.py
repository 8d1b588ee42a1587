"""PMI, PPMI and shifted PPMI with context-distribution smoothing: the one home of these formulas.

With counts ``C`` (rows: words, columns: contexts), row sums ``r``, column sums
``c`` and ``Z = sum_j c_j ** alpha``::

    PMI[i, j]  = log C[i, j] - log r[i] - alpha * log c[j] + log Z
    PPMI[i, j] = max(PMI[i, j] - log k, 0)          (k = 1: plain PPMI)

Natural logarithms. ``alpha = 0.75`` is the context-distribution smoothing of
Levy, Goldberg and Dagan (2015); ``alpha = 1`` gives the textbook PMI. For the
symmetric window counts of :mod:`tracer.core.counting`, ``c = r``.

:func:`log_z`, :func:`pmi` and :func:`ppmi` are written once and broadcast, so the
whole sparse matrix (:func:`ppmi_matrix`), a few dense probe rows with documents
removed (:mod:`tracer.analysis.influence`) and single cells (:mod:`tracer.analysis.pmi_table`)
all go through the same lines.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from tracer.errors import SettingError

DEFAULT_ALPHA = 0.75


def check_alpha(alpha: float) -> float:
    """``alpha`` as a float, or a SettingError when it is outside (0, 1]."""
    if not 0 < alpha <= 1:
        raise SettingError(f"alpha (context smoothing) must be in (0, 1]; got {alpha}")
    return float(alpha)


def log_z(sums, alpha: float):
    """``log Z = log sum_j sums_j ** alpha`` over the last axis, zero sums left out.

    Parameters
    ----------
    sums : numpy.ndarray, shape (..., n)
        Context (column) sums; for the symmetric window counts, the row sums.
    alpha : float

    Returns
    -------
    float for one-dimensional ``sums``, else numpy.ndarray of shape (...);
    0 where every sum is zero.
    """
    sums = np.asarray(sums, dtype=np.float64)
    # zero sums are kept in place (as zeros) rather than dropped, so that one batched
    # sum over the last axis serves a single vector and many at once alike
    z = np.sum(np.where(sums > 0, sums, 0.0) ** alpha, axis=-1)
    with np.errstate(divide="ignore"):
        out = np.where(z > 0, np.log(z), 0.0)
    return float(out) if out.ndim == 0 else out


def z_without(sums: np.ndarray, removed, alpha: float, z: float) -> np.ndarray:
    """``Z`` after subtracting each row of ``removed`` from ``sums``, exactly and without a new sum.

    ``Z' = Z - sum_j (sums_j ** alpha - (sums_j - removed_j) ** alpha)`` over the cells a
    removal touches only (what one document takes from the row sums is sparse).

    Parameters
    ----------
    sums : numpy.ndarray, shape (n,)
    removed : scipy.sparse array, shape (n_removals, n)
        What each removal takes from ``sums`` (nonnegative, at most ``sums``).
    alpha : float
    z : float
        ``Z`` of ``sums`` (``exp(log_z(sums, alpha))``).

    Returns
    -------
    numpy.ndarray, shape (n_removals,): ``Z'`` of each removal (not its log).
    """
    cells = removed.tocoo()
    before = sums[cells.col]
    drop = before ** alpha - np.maximum(before - cells.data, 0.0) ** alpha
    return z - np.bincount(cells.row, weights=drop, minlength=cells.shape[0])


def pmi(count, row_sum, col_sum, alpha: float, log_z_value) -> np.ndarray:
    """PMI of cells from their joint count, marginals and ``log Z``; -inf where the count is 0.

    All arguments broadcast against each other (numpy rules), so a cell, a row, a
    dense block of rows or a batch of blocks with one ``log Z`` each go through the
    same formula.
    """
    count = np.asarray(count, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (np.log(count) - np.log(np.asarray(row_sum, dtype=np.float64))
               - alpha * np.log(np.asarray(col_sum, dtype=np.float64)) + log_z_value)
    return np.where(count > 0, out, -np.inf)


def ppmi(pmi_values, shift: float = 1.0) -> np.ndarray:
    """Shifted positive PMI, ``max(PMI - log k, 0)`` (0 where the PMI is -inf); k = ``shift`` >= 1."""
    if shift < 1:
        raise SettingError(f"shift k must be >= 1 (PPMI subtracts log k); got {shift}")
    return np.maximum(np.asarray(pmi_values, dtype=np.float64) - np.log(shift), 0.0)


def pmi_sensitivities(d_pmi: np.ndarray, counts: np.ndarray, sums: np.ndarray, rows: np.ndarray, alpha: float,
                      log_z_value: float) -> tuple[np.ndarray, np.ndarray]:
    """The chain rule through :func:`pmi` for a quantity B of the PMI of some rows of symmetric counts.

    With ``g = dB / dPMI`` on those rows, to first order
    ``dB = <K, dC> - <u, dr>`` for a change dC of the rows' counts and dr of the row sums
    (which are also the column sums), from
    ``dPMI_ij = dC_ij / C_ij - dr_i / r_i - alpha dr_j / r_j + alpha sum_k r_k^(alpha - 1) dr_k / Z``.

    Parameters
    ----------
    d_pmi : numpy.ndarray, shape (n_rows, n)
        g; zero on the cells that do not move (a PPMI cell below its threshold).
    counts : numpy.ndarray, shape (n_rows, n)
        The rows' counts C.
    sums : numpy.ndarray, shape (n,)
        Row sums r of the whole matrix.
    rows : numpy.ndarray of int, shape (n_rows,)
        Which rows of the matrix ``counts`` holds.
    alpha, log_z_value : the smoothing and ``log Z`` of the PMI.

    Returns
    -------
    K : numpy.ndarray, shape (n_rows, n)
    u : numpy.ndarray, shape (n,)
    """
    K = np.divide(d_pmi, counts, out=np.zeros_like(d_pmi), where=counts > 0)
    r = np.where(sums > 0, sums, 1.0)
    u = alpha * d_pmi.sum(0) / r - alpha * d_pmi.sum() * r ** (alpha - 1.0) / np.exp(log_z_value)
    u[rows] += d_pmi.sum(1) / r[rows]
    return K, u


@dataclasses.dataclass(frozen=True)
class Marginals:
    """Row sums, column sums and the smoothing normaliser of a count matrix."""

    rows: np.ndarray
    cols: np.ndarray
    alpha: float
    log_z: float

    @classmethod
    def of(cls, counts, alpha: float = DEFAULT_ALPHA) -> "Marginals":
        alpha = check_alpha(alpha)
        rows = np.asarray(counts.sum(axis=1)).ravel().astype(np.float64)
        cols = np.asarray(counts.sum(axis=0)).ravel().astype(np.float64)
        return cls(rows, cols, alpha, log_z(cols, alpha))


def pmi_of_cells(count, row_sum, col_sum, marginals: Marginals) -> np.ndarray:
    """PMI of cells given their joint count and marginals; -inf where the count is 0."""
    return pmi(count, row_sum, col_sum, marginals.alpha, marginals.log_z)


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
    m = sp.csr_array(counts, dtype=np.float64)
    m.sum_duplicates()
    marg = Marginals.of(m, alpha)
    row_of = np.repeat(np.arange(m.shape[0]), np.diff(m.indptr))
    values = ppmi(pmi_of_cells(m.data, marg.rows[row_of], marg.cols[m.indices], marg), shift)
    out = sp.csr_array((values, m.indices.copy(), m.indptr.copy()), shape=m.shape)
    out.eliminate_zeros()
    return out
