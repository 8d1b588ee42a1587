"""PPMI-SVD embeddings: a truncated SVD of the (shifted) PPMI matrix.

``W = U_k S_k ** p`` (p is the eigenvalue weight; Levy, Goldberg and Dagan
2015 found p = 0 or 0.5 better than the classic p = 1). The SVD is made
deterministic: the start vector comes from the seed, and each singular pair's
sign is fixed so that the largest entry of its left vector is positive.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import svds

from ..errors import SettingError
from ..pmi import DEFAULT_ALPHA, ppmi_matrix


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


def truncated_svd(matrix, k: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The k largest singular triplets, in descending order, with fixed signs.

    Returns
    -------
    u : numpy.ndarray, shape (n_rows, k)
    s : numpy.ndarray, shape (k,)
    vt : numpy.ndarray, shape (k, n_cols)
    """
    n = min(matrix.shape)
    if k >= n:
        raise SettingError(f"dim {k} is too large for a vocabulary of {n} words; use a dim below {n}")
    rng = np.random.default_rng(seed)
    v0 = rng.standard_normal(n)
    u, s, vt = svds(sp.csr_array(matrix, dtype=np.float64), k=k, v0=v0, solver="arpack")
    order = np.argsort(-s, kind="stable")
    u, s, vt = u[:, order], s[order], vt[order]
    flip = np.sign(u[np.argmax(np.abs(u), axis=0), np.arange(k)])
    flip[flip == 0] = 1
    return u * flip, s, vt * flip[:, None]


def ppmi_svd_vectors(counts, settings: PpmiSvdSettings) -> tuple[np.ndarray, dict]:
    """Word vectors from a count matrix; also the singular values and right vectors."""
    ppmi = ppmi_matrix(counts, alpha=settings.alpha, shift=settings.shift)
    u, s, vt = truncated_svd(ppmi, settings.dim, settings.seed)
    vectors = u * (s ** settings.eig_power)
    return vectors.astype(np.float32), {"singular_values": s, "context_vectors": vt.T.astype(np.float32)}
