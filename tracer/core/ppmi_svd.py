"""PPMI-SVD embeddings: a truncated SVD of the (shifted) PPMI matrix.

``W = U_k S_k ** p`` (p is the eigenvalue weight; Levy, Goldberg and Dagan
2015 found p = 0 or 0.5 better than the classic p = 1). The SVD is made
deterministic: the start vector comes from the seed, and each singular pair's
sign is fixed so that the largest entry of its left vector is positive (:func:`fix_signs`).
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools

import numpy as np
import scipy.sparse as sp
import scipy.linalg
from scipy.sparse.linalg import LinearOperator, eigsh, svds
from threadpoolctl import ThreadpoolController

from tracer.core import memory
from tracer.core.pmi import DEFAULT_ALPHA, ppmi_matrix
from tracer.core import sparse_products
from tracer.core.sparse_products import CsrOperator
from tracer.errors import SettingError

SVD_FIX = "lower --dim, or raise --min-count / set --max-vocab (fewer words)"


def check_svd_memory(counts, dim: int) -> None:
    """Raise :class:`tracer.errors.NotEnoughMemory` before the PPMI and SVD of ``counts`` when they
    cannot fit: the PPMI's temporaries, then the PPMI matrix (12 bytes a nonzero) beside the SVD's
    arrays (:mod:`tracer.core.memory`)."""
    n, nnz = counts.shape[0], counts.nnz
    memory.require(f"the PPMI and SVD of {n:,} words ({nnz:,} nonzeros, dim {dim})",
                   memory.ppmi_svd_peak(n, nnz, dim), SVD_FIX)


@dataclasses.dataclass(frozen=True)
class PpmiSvdSettings:
    """dim: vector size; eig_power: p in W = U S^p; alpha: context smoothing; shift: k of log k."""

    dim: int = 100
    eig_power: float = 0.5
    alpha: float = DEFAULT_ALPHA
    shift: float = 1.0
    seed: int = 0

    def __post_init__(self):
        if not isinstance(self.dim, int) or self.dim < 1:
            raise SettingError(f"dim must be a whole number >= 1; got {self.dim!r}")

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


@functools.cache
def _blas_controller() -> ThreadpoolController:
    return ThreadpoolController()


# Below this many rows the SVD on scipy's own products runs BLAS on one thread (see blas_threads_for).
ONE_BLAS_THREAD_BELOW = 5_000


def blas_threads_for(n_rows: int, products: str = "gram"):
    """A context for the SVD routines' BLAS calls on a matrix of ``n_rows`` rows: one thread with
    this package's products (``products`` "gram" or "separate", the default), and with scipy's own
    (``"scipy"``) one thread below ``ONE_BLAS_THREAD_BELOW`` rows, the libraries' own setting above.

    This package's products run on the cores themselves. A second OpenBLAS thread, waiting for
    work between ARPACK's calls, took a core from them: at 20M tokens (79,629 words, dim 100) the
    products took 55 s of a 75 s SVD with two BLAS threads and 36 s of 64 s with one. One thread
    also makes the SVD the same bit for bit in this process and in a worker process (whose BLAS
    runs one thread).

    scipy's products run on one thread, and there a second BLAS thread helps on large matrices.
    The routines make many BLAS calls on blocks of about a hundred columns. On the 2-core
    machines this was measured on (Householder QR, medians of noisy runs), a second
    OpenBLAS thread cost more in synchronisation than it saved on small matrices:
    subspace iteration on 493 rows took 0.04-0.05 s on one thread and 0.09-0.12 s on two,
    was even at 2,000-5,000 rows, and was faster on two threads at 10,000 (1.4-2.3 s
    against 2.1-3.4 s); ARPACK was even within the noise up to 5,000 rows and about 10%
    faster on two threads at 10,000. The demo used 59 s of CPU for 35 s of wall time on
    two threads against 34 s for 32 s on one. Many-core machines were not measured.
    """
    if products == "scipy" and n_rows >= ONE_BLAS_THREAD_BELOW:
        return contextlib.nullcontext()
    return _blas_controller().limit(limits=1, user_api="blas")


def fix_signs(u: np.ndarray, vt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Singular pairs with a fixed sign: the largest entry (in absolute value) of each left vector
    positive, the right vector flipped with it (so ``u diag(s) vt`` is unchanged).

    A singular pair is defined up to a common sign, and different solvers (or start
    vectors) return either; fixing it makes the vectors reproducible.

    Parameters
    ----------
    u : numpy.ndarray, shape (n_rows, k)
    vt : numpy.ndarray, shape (k, n_cols)

    Returns
    -------
    u, vt : same shapes, new arrays
    """
    flip = np.sign(u[np.argmax(np.abs(u), axis=0), np.arange(u.shape[1])])
    flip[flip == 0] = 1
    return u * flip, vt * flip[:, None]


# From this many nonzeros truncated_svd takes its fast path (blocked products on float32 values);
# below it, its products are scipy's bit for bit. The blocks start at the same size.
LARGE_NNZ = sparse_products.THREADS_FROM_NNZ

# How far the fast path may move d and the gap of an association test from the exact SVD's: what
# the tests hold it to. Measured with the Lanczos vectors in float32, the largest differences
# over 82 tests of 4 words a set and the planted test: 1.1e-4 in d and 5.5e-6 in the gap at 20M
# tokens (79,629 words), 4.2e-5 and 1.6e-6 at 2M (28,924 words). An interval of d is a few tenths
# wide, and the reports print d to two decimals.
FAST_PATH_TOLERANCE = {"d": 5e-4, "gap": 5e-5}


def truncated_svd(matrix, k: int, seed: int = 0, *, threads: int | None = None, ncv: int | None = None,
                  products: str = "gram") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The k largest singular triplets, in descending order, with fixed signs.

    ARPACK (scipy's ``svds``) on ``A^T A``. By default (``products="gram"``) each ``A^T A x`` is
    one pass over ``A`` (:meth:`tracer.core.sparse_products.CsrOperator.gram`) instead of scipy's
    two; ``"separate"`` runs ``A x`` and ``A^T y`` as row-parallel products on ``threads``
    threads (default: 1 in a replicate worker process, else the cores this process may use);
    ``"scipy"`` uses scipy's single-threaded products on the CSR matrix. ``"separate"`` and
    ``"scipy"`` compute the same sums in the same order, so they give the same arrays bit for bit,
    whatever the threads; so does ``"gram"`` on a matrix of fewer than ``LARGE_NNZ`` nonzeros.

    On a larger matrix ``"gram"`` is the fast path: its products add row blocks in a fixed order on
    the threads and read A's values stored in float32 (the sums stay float64), and ARPACK keeps
    its Lanczos vectors in float32 (half the memory traffic of its orthogonalizations); the span
    they give is then orthonormalized and A V decomposed in float64, so the singular values stay
    within about 1e-9 (relative) of the exact ones. Its BLAS runs on one thread, as on all this
    package's products (:func:`blas_threads_for` says why). The result is the same bit for bit on
    any number of threads. It is held to the exact path (``"scipy"``) in the figures
    users read: in d and the gap of association tests within ``FAST_PATH_TOLERANCE``
    (tests/core/test_ppmi_svd.py at 20,000 words; tests/benchmarks/bench_svd_threads.py at the
    sizes users have). The word vectors are stored in float32, so the rounding is of the order
    of the vectors' own.

    Parameters
    ----------
    matrix : scipy sparse matrix, shape (n_rows, n_cols)
    k : int
    seed : int
        Seeds ARPACK's start vector.
    threads : int, optional
        Threads of the row-parallel products (``"separate"``, and the final ``A V``).
    ncv : int, optional
        ARPACK's number of Lanczos vectors (scipy's default ``max(2k + 1, 20)``).
    products : {"gram", "separate", "scipy"}

    Returns
    -------
    u : numpy.ndarray, shape (n_rows, k)
    s : numpy.ndarray, shape (k,)
    vt : numpy.ndarray, shape (k, n_cols)
    """
    if products not in ("gram", "separate", "scipy"):
        raise SettingError(f"products must be gram, separate or scipy; got {products!r}")
    n = min(matrix.shape)
    if k >= n:
        raise SettingError(f"dim {k} is too large for a vocabulary of {n} words; use a dim below {n}")
    rng = np.random.default_rng(seed)
    v0 = rng.standard_normal(n)
    csr = sp.csr_array(matrix, dtype=np.float64)
    with blas_threads_for(matrix.shape[0], products):
        if products == "scipy":
            u, s, vt = svds(csr, k=k, v0=v0, ncv=ncv, solver="arpack")
        elif products == "separate" or csr.shape[0] < csr.shape[1]:
            u, s, vt = svds(CsrOperator(csr, threads=threads), k=k, v0=v0, ncv=ncv, solver="arpack")
        else:
            values = np.float32 if csr.nnz >= LARGE_NNZ else np.float64
            u, s, vt = _gram_svds(CsrOperator(csr, threads=threads, values=values), k, v0, ncv)
    order = np.argsort(-s, kind="stable")
    u, s, vt = u[:, order], s[order], vt[order]
    u, vt = fix_signs(u, vt)
    return u, s, vt


def _gram_svds(op: CsrOperator, k: int, v0: np.ndarray, ncv: int | None):
    """scipy's ``svds(A, k, v0=v0, ncv=ncv, solver="arpack")`` step by step (scipy 1.17's
    ``_svds.py``, for n_rows >= n_cols), with ``A^T A x`` as one pass over ``A`` (:meth:`CsrOperator.gram`):
    ARPACK's eigenvectors of ``A^T A``, orthonormalized, then the SVD of ``A V``. The same
    operations on the same values, so the same arrays bit for bit
    (tests/core/test_ppmi_svd.py compares them with ``svds``).

    An operator with float32 values (``op.values``, the fast path) runs ARPACK in single precision
    too (its vectors and orthogonalizations; each product is still summed in float64 and rounded
    once); the eigenvectors are orthonormalized and used in float64 from there on."""
    lanczos = op.values
    gram = op.gram()
    if lanczos == np.float32:
        in_float64 = gram.matvec
        gram = LinearOperator(gram.shape, dtype=np.float32, matvec=lambda x: in_float64(x).astype(np.float32))
    _, eigvec = eigsh(gram, k=k, tol=0, ncv=ncv, which="LM", v0=v0.astype(lanczos, copy=False))
    eigvec, _ = np.linalg.qr(eigvec.astype(np.float64, copy=False))
    u, s, vh = scipy.linalg.svd(op.matmat(eigvec), full_matrices=False, overwrite_a=True)
    return u[:, ::-1], s[::-1], vh[::-1] @ eigvec.T.conj()


def ppmi_svd_vectors(counts, settings: PpmiSvdSettings) -> tuple[np.ndarray, dict]:
    """Word vectors from a count matrix; also the singular values and right vectors."""
    check_svd_memory(counts, settings.dim)
    ppmi = ppmi_matrix(counts, alpha=settings.alpha, shift=settings.shift)
    u, s, vt = truncated_svd(ppmi, settings.dim, settings.seed)
    vectors = u * (s ** settings.eig_power)
    return vectors.astype(np.float32), {"singular_values": s, "context_vectors": vt.T.astype(np.float32)}


def word_vectors(counts, settings: PpmiSvdSettings) -> np.ndarray:
    """The word vectors of :func:`ppmi_svd_vectors` alone (what a bootstrap replicate keeps),
    shape (n_words, settings.dim), float32."""
    return ppmi_svd_vectors(counts, settings)[0]
