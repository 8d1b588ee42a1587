"""Peak memory of the heavy steps, estimated before they start, and the check against what is free.

Each estimate is the most memory a step holds at once beyond what the process held before it,
in bytes, from sizes known before the step: ``P`` window pairs, ``U`` distinct cells of the
upper triangle (with the diagonal), ``N`` nonzeros of a symmetric count matrix (about ``2U``),
``n`` words, ``k`` dimensions. Derivations, from the code of each step:

Counting (:func:`tracer.core.count_engine.count_shard`, ``sum_upper``, ``symmetrize_arrays``).
    A shard writes one code per window pair: 2 bytes (uint16, at most 65,536 words and uniform
    weighting) or 4 (uint32), plus 8 (a float64 weight) when the documents have more than 32
    distinct weights. Its output holds 12 bytes per cell (int32 column, float64 value), and
    both live at once while the rows are reduced::

        shard_i = held_i + (code + weight) * P_i + 12 * U_i + 8 * n * (workers + 2)

    where ``held_i = 12 * sum_{j<i} U_j`` are the outputs of the shards before it. With more
    than one shard, summing holds the parts, their concatenation and the sum:
    ``36 * sum_j U_j``. Making the sum symmetric holds it (``12 U``) and the full matrix
    (``12 N = 24 U``), with the parts still referenced when there were several::

        symmetrize = 36 * U + (12 * sum_j U_j if several shards else 0)

    and the pages of the token array read (4 bytes a token) become resident as well. ``U`` is
    not known before counting; :mod:`tracer.core.count_memory` bounds it by ``min(P, n(n+1)/2)``
    and, when that bound does not fit, estimates it from the cells of two nested samples of
    documents (a power law in ``P`` fitted to them; distinct pairs grow more slowly than pairs,
    so extrapolating the local slope over-estimates, on the safe side).

PPMI (:func:`tracer.core.pmi.ppmi_matrix`), beside the counts it reads.
    The row index of every nonzero (int64), the row and column marginals gathered per nonzero,
    the logarithms and the comparison with zero are float64 arrays of ``N`` values alive
    together (about four at once), and the result keeps 12 bytes per nonzero::

        ppmi = 8 * N (row index) + 4 * 8 * N (temporaries) + 12 * N (result) = 52 * N

    (measured with tracemalloc on a 2M-token corpus: 41 bytes per nonzero; the bound is kept).

Truncated SVD with ARPACK (:func:`tracer.core.ppmi_svd.truncated_svd`).
    the products' operator (:class:`tracer.core.sparse_products.CsrOperator`) holds the transpose
    as its own CSR matrix (12 bytes per nonzero, as scipy's own operator's copy did) and, for ``k`` vectors,
    ARPACK's ``ncv = 2k + 1`` Lanczos vectors, their products and the returned ``u``, ``vt``
    and their reordered, sign-fixed copies: about ``5k`` float64 vectors of length ``n``::

        svd = 12 * N + 8 * n * 5 * k

    (measured with tracemalloc, 28,495 words: 12.2 bytes per nonzero and 5.0 k vectors.) The
    default one-pass ``A^T A`` products need no transpose; on a large matrix they keep a float32
    copy of the values instead (4 bytes per nonzero), so the bound holds with room to spare.

Dense probe rows (:class:`tracer.analysis.influence.Attribution`).
    ``rows x n`` float64 arrays: the counts, the PPMI and the derivative of the probe rows,
    with about two temporaries: ``8 * rows * n * 5``.

The memory available is ``MemAvailable`` of ``/proc/meminfo`` (what the kernel can give
without swapping), else the free physical pages from ``os.sysconf``; the environment
variable ``TRACER_AVAILABLE_MB`` replaces it (for tests, or to leave room for other work).
"""

from __future__ import annotations

import os

from tracer.errors import NotEnoughMemory, SettingError

AVAILABLE_ENV = "TRACER_AVAILABLE_MB"
MB = 2 ** 20


def available_bytes() -> int:
    """Memory this process can take without swapping, in bytes (see the module docstring)."""
    override = os.environ.get(AVAILABLE_ENV)
    if override:
        try:
            return int(float(override) * MB)
        except ValueError:
            raise SettingError(f"{AVAILABLE_ENV} must be a number of megabytes; got {override!r}") from None
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return 2 ** 62  # nothing to measure with: no check


def _mb(n: float) -> str:
    return f"{n / MB:,.0f}" if n >= 10 * MB else f"{n / MB:.2g}"


def require(step: str, needed: int, fix: str) -> None:
    """Raise :class:`NotEnoughMemory` naming ``fix`` when ``needed`` bytes are more than are available."""
    have = available_bytes()
    if needed > have:
        raise NotEnoughMemory(f"{step} needs about {_mb(needed)} MB at its peak but {_mb(have)} MB are "
                              f"available; {fix} (or set {AVAILABLE_ENV} if more is free than this machine says)")


def counting_peak(n_tokens: int, shard_pairs: list[int], shard_cells: list[int], cells: int, n_words: int, *,
                  narrow: bool, per_pair: bool, workers: int) -> int:
    """Peak bytes of one count: shards of ``shard_pairs`` pairs and ``shard_cells`` upper cells,
    ``cells`` upper cells in the sum, over ``n_tokens`` tokens read."""
    per = (2 if narrow else 4) + (8 if per_pair else 0)
    held, peak = 0, 0
    for p, u in zip(shard_pairs, shard_cells):
        peak = max(peak, held + per * p + 12 * u + 8 * n_words * (workers + 2))
        held += 12 * u
    several = len(shard_pairs) > 1
    if several:
        peak = max(peak, 3 * held)
    peak = max(peak, 36 * cells + (held if several else 0))
    return 4 * n_tokens + peak


def ppmi_peak(nnz: int) -> int:
    """Peak bytes of the PPMI of a matrix of ``nnz`` nonzeros, beyond the matrix itself."""
    return 52 * nnz


def svd_peak(n_words: int, nnz: int, dim: int) -> int:
    """Peak bytes of the ARPACK truncated SVD of ``dim`` vectors of an ``n_words``-square matrix."""
    return 12 * nnz + 8 * n_words * 5 * dim


def ppmi_svd_peak(n_words: int, nnz: int, dim: int) -> int:
    """Peak bytes of the PPMI and then the SVD of a count matrix, beyond the counts: the PPMI's
    temporaries, or the PPMI matrix (12 bytes a nonzero) beside the SVD's arrays."""
    return max(ppmi_peak(nnz), 12 * nnz + svd_peak(n_words, nnz, dim))


def dense_rows_peak(n_rows: int, n_words: int) -> int:
    """Peak bytes of the dense probe-row arrays of ``n_rows`` rows over ``n_words`` words."""
    return 8 * n_rows * n_words * 5
