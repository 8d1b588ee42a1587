"""CsrOperator's products against scipy's own sparse products (bit for bit) and numpy's dense ones."""

import multiprocessing

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st
from scipy.sparse.linalg import aslinearoperator

from tracer.core import sparse_products
from tracer.core.sparse_products import CsrOperator
from tracer.core.threads import default_workers, process_threads
from tests.conftest import random_sparse


def random_csr(rows, cols, density, seed, canonical=True):
    """A random real CSR matrix; not canonical: rows' entries shuffled and some entries repeated."""
    rng = np.random.default_rng(seed)
    m = random_sparse((rows, cols), density, rng, "coo")
    m.data = rng.standard_normal(m.nnz) * 10.0 ** rng.uniform(-3, 3, m.nnz)  # a wide range of magnitudes
    if canonical:
        return m.tocsr()
    dup = rng.random(m.nnz) < 0.3
    r = np.concatenate([m.row, m.row[dup]])
    c = np.concatenate([m.col, m.col[dup]])
    v = np.concatenate([m.data, -0.5 * m.data[dup]])
    order = np.lexsort((rng.random(r.shape[0]), r))  # by row, shuffled within rows
    counts = np.bincount(r, minlength=rows)
    indptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)
    return sp.csr_array((v[order], c[order].astype(np.int32), indptr), shape=(rows, cols))


@settings(max_examples=40, deadline=None)
@given(rows=st.integers(1, 120), cols=st.integers(1, 120), density=st.floats(0.0, 1.0),
       seed=st.integers(0, 2**31), threads=st.integers(1, 3), canonical=st.booleans(), n_vec=st.integers(1, 6))
def test_products_equal_scipys_bit_for_bit(rows, cols, density, seed, threads, canonical, n_vec):
    check_products(random_csr(rows, cols, density, seed, canonical), threads, seed, n_vec)


def test_products_of_a_matrix_with_unsorted_and_repeated_entries():
    m = random_csr(200, 150, 0.3, 1, canonical=False)
    assert not m.has_sorted_indices and m.nnz > sp.csr_array(m.toarray()).nnz  # the case is really there
    check_products(m, 2, 1, 5)


def check_products(m, threads, seed, n_vec):
    """All four products of CsrOperator(m) against scipy's (exactly) and numpy's dense ones."""
    # THREADS_FROM_NNZ at 0: even small matrices are cut into row blocks on several threads
    ref = aslinearoperator(m)  # what svds uses on a sparse matrix: csr_matvec, and csc_matvec on m.T
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(sparse_products, "THREADS_FROM_NNZ", 0)
        op = CsrOperator(m, threads=threads)
    rows, cols = m.shape
    rng = np.random.default_rng(seed + 1)
    x, y = rng.standard_normal(cols), rng.standard_normal(rows)
    xs, ys = rng.standard_normal((cols, n_vec)), np.asfortranarray(rng.standard_normal((rows, n_vec)))
    np.testing.assert_array_equal(op.matvec(x), ref.matvec(x))
    np.testing.assert_array_equal(op.rmatvec(y), ref.rmatvec(y))
    np.testing.assert_array_equal(op.matmat(xs), ref.matmat(xs))
    np.testing.assert_array_equal(op.rmatmat(ys), ref.rmatmat(ys))
    np.testing.assert_array_equal(op.gram().matvec(x), ref.rmatvec(ref.matvec(x)))  # what svds computes
    # and the dense products (numpy) to rounding, so equal-to-scipy is not equal-and-wrong
    dense = m.toarray()
    scale = np.abs(dense).sum() * 1e-13 + 1e-300
    np.testing.assert_allclose(op.matvec(x), dense @ x, rtol=0, atol=scale * np.abs(x).max())
    np.testing.assert_allclose(op.rmatmat(ys), dense.T @ ys, rtol=0, atol=scale * np.abs(ys).max())
    gram_scale = np.abs(dense).sum(axis=0).max() * np.abs(dense).sum(axis=1).max() * np.abs(x).max() * 1e-13 + 1e-300
    np.testing.assert_allclose(op.gram().matvec(x), dense.T @ (dense @ x), rtol=0, atol=gram_scale)


@pytest.mark.parametrize("values", [np.float64, np.float32])
def test_blocked_gram_product_is_the_same_on_any_threads(monkeypatch, values):
    m = random_csr(700, 300, 0.2, 8)
    x = np.random.default_rng(2).standard_normal(300)
    exact = CsrOperator(m).gram().matvec(x)  # one block: scipy's sums (check_products)
    monkeypatch.setattr(sparse_products, "THREADS_FROM_NNZ", 0)  # a large matrix's path
    one, two = (CsrOperator(m, threads=t, values=values).gram().matvec(x) for t in (1, 2))
    np.testing.assert_array_equal(one, two)
    assert not np.array_equal(one, exact)  # the blocks really ran (their sums are grouped otherwise)
    # every block counted once: against numpy's dense A^T (A x), to rounding (float32 values: 2^-23 each)
    dense = m.toarray()
    eps = 1e-13 if values is np.float64 else 2.0 ** -22
    bound = (np.abs(dense).T @ (np.abs(dense) @ np.abs(x))) * eps + 1e-300
    assert np.all(np.abs(one - dense.T @ (dense @ x)) <= bound)


def test_blocks_cover_the_rows_once_with_even_nonzeros():
    m = random_csr(5000, 300, 0.05, 3)
    blocks = sparse_products._row_blocks(m.indptr, 8)
    assert blocks[0][0] == 0 and blocks[-1][1] == 5000
    assert all(a[1] == b[0] for a, b in zip(blocks, blocks[1:]))
    per_block = [m.indptr[b] - m.indptr[a] for a, b in blocks]
    assert max(per_block) - min(per_block) <= 2 * np.diff(m.indptr).max()


def test_float32_values_give_products_to_float32_rounding():
    m = random_csr(400, 300, 0.1, 5)
    x = np.random.default_rng(0).standard_normal(300)
    got = CsrOperator(m, threads=2, values=np.float32).matvec(x)
    assert got.dtype == np.float64
    bound = np.abs(m) @ np.abs(x) * 2.0 ** -23  # one float32 rounding of each value
    assert np.all(np.abs(got - m @ x) <= bound)
    assert not np.array_equal(got, m @ x)


def test_complex_matrices_are_refused():
    with pytest.raises(TypeError, match="real matrices only"):
        CsrOperator(sp.csr_array(np.array([[1j, 0.0]])))


def _threads_in_child(_):
    return process_threads()


def test_worker_processes_use_one_thread():
    # a spawned process (as the replicate pool's workers are) runs its products on one thread
    with multiprocessing.get_context("spawn").Pool(1) as pool:
        assert pool.map(_threads_in_child, [0]) == [1]
    assert process_threads() == default_workers()
    assert CsrOperator(sp.eye(3, format="csr")).threads == default_workers()
