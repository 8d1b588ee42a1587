"""Row-parallel products with a sparse matrix, for ARPACK (:func:`tracer.core.ppmi_svd.truncated_svd`).

scipy's sparse products run on one thread, and ARPACK spends most of a large SVD in
them (two per Lanczos step: ``A x`` and ``A^T y``). :class:`CsrOperator` computes both as
row-wise CSR products (:func:`tracer.core._kernels.csr_matvec_rows`) in blocks of rows on the
threads of :class:`tracer.core.threads.ThreadPool`: ``A`` and, as its own CSR, ``A^T`` (so the
transposed product needs no scatter and threads never write the same place).

The results are those of scipy's products on the matrix, bit for bit: every output element is
summed from 0.0 in the order scipy sums it (``csr_matvec`` for ``A x``; for ``A^T y`` scipy's
``csc_matvec`` adds the rows of ``A`` in ascending order, which is the sorted order of the rows of
the transposed CSR), whatever the number of threads or blocks. :meth:`CsrOperator.gram` gives
``A^T A`` with each product one pass over ``A``: scipy's sums on a small matrix, and on a large
one the sums of a fixed number of row blocks added in order (the same bits on any number of
threads). The memory is that of scipy's own operator, which also keeps a copy of the transpose
(12 bytes a nonzero more), made here only when a transposed product is asked for.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator

from tracer.core import _kernels
from tracer.core.threads import ThreadPool, process_threads

# Below this many nonzeros a product runs on the calling thread: handing blocks to the pool
# costs tens of microseconds a call, which a small product does not repay.
THREADS_FROM_NNZ = 1 << 18

# Blocks of rows per thread: more than one, so that a thread slowed by other processes on a
# shared machine does not hold the others up at the end of each product.
BLOCKS_PER_THREAD = 4

# Blocks of rows of a large A^T A product (CsrOperator.gram): fixed, so that its sums do not
# depend on the threads; enough for a few threads to share.
GRAM_BLOCKS = 8


def _row_blocks(indptr: np.ndarray, n_blocks: int) -> list[tuple[int, int]]:
    """Row ranges [r0, r1) with about the same number of nonzeros each (empty ranges left out)."""
    cuts = np.searchsorted(indptr, np.linspace(0, indptr[-1], n_blocks + 1), side="left")
    cuts[0], cuts[-1] = 0, indptr.shape[0] - 1
    return [(int(a), int(b)) for a, b in zip(cuts[:-1], cuts[1:]) if b > a]


class _Csr:
    """One CSR matrix with its row blocks, for the products of :class:`CsrOperator`."""

    def __init__(self, m: sp.csr_array, values, threads: int):
        self.shape = m.shape
        self.indptr = m.indptr.astype(np.uint64)
        self.indices = m.indices.view(np.uint32 if m.indices.itemsize == 4 else np.uint64)  # ids are >= 0
        self.data = np.ascontiguousarray(m.data, dtype=values)
        n_blocks = 1 if threads <= 1 or m.nnz < THREADS_FROM_NNZ else threads * BLOCKS_PER_THREAD
        self.blocks = _row_blocks(m.indptr, n_blocks)
        self.pool = ThreadPool(threads if n_blocks > 1 else 1)

    def times(self, x: np.ndarray) -> np.ndarray:
        """``self @ x`` for x of shape (n_cols,) or (n_cols, n_vec); float64."""
        x = np.ascontiguousarray(x, dtype=np.float64)
        if x.ndim == 1:
            kernel, out = _kernels.csr_matvec_rows, np.empty(self.shape[0])
        else:
            kernel, out = _kernels.csr_matmat_rows, np.empty((self.shape[0], x.shape[1]))
        self.pool.map(lambda a, b: kernel(self.indptr, self.indices, self.data, x, a, b, out), self.blocks)
        return out


class CsrOperator(LinearOperator):
    """A real sparse matrix as a :class:`scipy.sparse.linalg.LinearOperator` whose products
    (``matvec``, ``rmatvec``, ``matmat``, ``rmatmat``) run on ``threads`` threads.

    Parameters
    ----------
    matrix : scipy sparse matrix or array, shape (n_rows, n_cols), real
    threads : int, optional
        Threads per product; default :func:`tracer.core.threads.process_threads` (1 in a
        replicate worker process, else the cores this process may use).
    values : numpy dtype, optional
        The stored values' type (float64 by default; float32 halves their memory and gives
        products within float32 rounding of the exact ones). Products are always float64.
        Kept as the attribute ``values`` (a numpy dtype).
    """

    def __init__(self, matrix, threads: int | None = None, values=np.float64):
        threads = process_threads() if threads is None else max(1, int(threads))
        m = sp.csr_array(matrix)
        if np.iscomplexobj(m.data):
            raise TypeError("CsrOperator takes real matrices only")
        super().__init__(np.dtype(np.float64), m.shape)
        self.threads = threads
        self._m, self.values = m, np.dtype(values)
        self._a = _Csr(m, values, threads)
        self._at_csr = None

    @property
    def _at(self) -> _Csr:
        """``A^T`` as its own CSR, made at the first transposed product (``gram`` needs none)."""
        if self._at_csr is None:
            self._at_csr = _Csr(self._m.T.tocsr(), self.values, self.threads)  # rows sorted: scipy's order
        return self._at_csr

    def gram(self) -> LinearOperator:
        """``A^T A`` as an operator of shape (n_cols, n_cols), each product one pass over ``A``.

        A matrix of at least ``THREADS_FROM_NNZ`` nonzeros is cut into ``GRAM_BLOCKS`` blocks of
        rows with about the same nonzeros; each block's ``A_b^T (A_b x)``
        (:func:`tracer.core._kernels.csr_gram_matvec`) goes to its own vector, on this operator's
        threads, and the vectors are added in block order. The number of blocks depends on the
        matrix only, so the result is the same bit for bit on any number of threads (a replicate
        worker runs the blocks one after another); it differs from scipy's ``A^T (A x)`` by the
        rounding of the regrouped sums. A smaller matrix is one block: scipy's sums, bit for bit.
        The products are limited by memory bandwidth: a second thread gives a core's worth of
        bandwidth more (tests/benchmarks/bench_svd_threads.py measures it).
        """
        a, n = self._a, self.shape[1]
        indptr = self._m.indptr
        blocks = _row_blocks(indptr, GRAM_BLOCKS) if self._m.nnz >= THREADS_FROM_NNZ else [(0, self.shape[0])]
        pool = ThreadPool(min(self.threads, len(blocks)))

        def matvec(x):
            x = np.ascontiguousarray(np.ravel(x), dtype=np.float64)
            parts = np.empty((len(blocks), n))
            pool.map(lambda b, r0, r1: _kernels.csr_gram_matvec(a.indptr, a.indices, a.data, x, r0, r1, parts[b]),
                     [(b, r0, r1) for b, (r0, r1) in enumerate(blocks)])
            out = parts[0]
            for part in parts[1:]:
                out += part
            return out
        return LinearOperator((n, n), matvec=matvec, dtype=np.float64)

    def _matvec(self, x):
        return self._a.times(np.ravel(x))

    def _rmatvec(self, x):
        return self._at.times(np.ravel(x))

    def _matmat(self, x):
        return self._a.times(x)

    def _rmatmat(self, x):
        return self._at.times(x)
