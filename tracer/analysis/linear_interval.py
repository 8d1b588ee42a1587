"""Infinitesimal-jackknife standard errors of the gap and d from the linear (first-order) pass.

The document bootstrap of :func:`tracer.analysis.measure.bootstrap_weights` draws, for the n
documents of a slice (those of weight > 0), multipliers ``m ~ Multinomial(n, 1/n)`` and gives
document i the weight ``m_i w_i``; the model is retrained on every draw. Write a figure T (the
gap, or d) as a function ``T(m)`` with ``T(1) = T`` (the estimate). To first order

    T(m*) - T(1) = sum_i D_i (m*_i - 1),    D_i = dT / dm_i at m = 1,

and the multinomial's moments ``E m*_i = 1``, ``Var m*_i = 1 - 1/n``, ``Cov(m*_i, m*_j) = -1/n``
(``Cov m* = I - J / n``, J the all-ones matrix) give the bootstrap variance

    Var*(T) = D' (I - J / n) D = sum_i D_i^2 - (sum_i D_i)^2 / n = sum_i (D_i - mean D)^2.

The centring is the multinomial's fixed total (the resample always holds n documents). The
PPMI is nearly unchanged when every weight is scaled by one factor (its ``Z`` scales with the
counts), so ``sum_i D_i`` is small for the association, but not zero (thresholds, the SVD's
fixed subspace); for a plain weighted total it is the whole difference (tests).

``D_i`` comes from :meth:`tracer.analysis.influence.Attribution.linear`: its estimate of the
change of T when document i is removed (``m_i`` from 1 to 0) is ``-D_i`` to first order. For
d the pass differentiates ``d = gap / sd`` (sd the population sd of the target words'
scores) by the quotient rule (:func:`tracer.core.association.score_gradient`): the same
linearisation the delta method of :func:`tracer.core.intervals.ratio_interval` applies to
the replicates of gap and score sd, here applied to every document's influence at once.

What it ignores: (1) the SVD's subspace moving: the pass holds the right singular vectors
and singular values fixed, while a bootstrap replicate retrains them (an exact SVD); (2) the
second-order terms of T in ``m* - 1``, which are not small for a resample (about 37% of the
documents drop out, others count 2 or 3 times); (3) words crossing the PPMI threshold (only
cells above it move). The interval is ``T +- z_0.975 se`` (normal quantile: no replicates, so
no t correction).

Measured against 20 retrained bootstrap replicates (tests/benchmarks/bench_linear_interval.py,
tests/benchmarks/bench_coverage.py) it does not hold well enough to replace them, so the tool
does not offer it: its se was 1.30 times the bootstrap's for the gap (median; 0.65-2.49) and
1.00 for d (0.49-1.75) over 5 demo tests on 3 slices, and over 80 simulated corpora its
intervals were 1.33 (gap) and 1.27 (d) times as wide (median), covering in 98.8% and 100%
of them against the bootstrap's 96.3% and 98.8%: wide, and erratic from one test to another.
In the simulation, resampling with the subspace fixed and the PPMI recomputed exactly gave a gap
se about 0.7 times the retrained one (on the demo 1.09, 0.59-2.01), so both omissions matter:
the first-order terms overshoot the exact change of a resample and the moving subspace adds
spread the pass cannot see.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from tracer.analysis.influence import Attribution
from tracer.core.intervals import Interval, se_interval

__all__ = ["LinearIntervals", "LINEAR_METHOD", "jackknife_se", "linear_intervals"]

LINEAR_METHOD = ("infinitesimal jackknife from the linear per-document influences (first order, SVD subspace "
                 "fixed), normal quantile, centred on the estimate")


@dataclasses.dataclass(frozen=True)
class LinearIntervals:
    """The 95% intervals of one test on one slice from the linear pass: ``gap`` and ``d``
    (:class:`tracer.core.intervals.Interval`, ``df`` infinite, ``n`` the slice's documents), and
    the per-document influences ``D_i`` they come from (shape (n_members,), members in order)."""

    gap: Interval
    d: Interval
    gap_influence: np.ndarray
    d_influence: np.ndarray


def jackknife_se(influence) -> float:
    """Infinitesimal-jackknife standard error under the multinomial document bootstrap.

    Parameters
    ----------
    influence : array_like, shape (n,)
        ``D_i = dT / dm_i`` at m = 1 for the n resampled documents.

    Returns
    -------
    float
        ``sqrt(sum_i (D_i - mean D)^2)`` (module docstring); NaN for fewer than 2 documents or a
        non-finite influence.
    """
    d = np.asarray(influence, dtype=np.float64)
    if len(d) < 2 or not np.isfinite(d).all():
        return float("nan")
    return float(np.sqrt(np.sum((d - d.mean()) ** 2)))


def linear_intervals(attr: Attribution, level: float = 0.95) -> LinearIntervals:
    """Influence-function intervals of the gap and d of ``attr``'s test on its slice.

    Parameters
    ----------
    attr : Attribution
        The test on one slice's PPMI-SVD model; two passes over the slice's tokens (gap, d).
    level : float

    Returns
    -------
    LinearIntervals
        Centred on the model's gap and d; d's interval stops at ``|d| <= n / sqrt(n_x n_y)``
        as measure's does.
    """
    members = np.flatnonzero(attr.weights > 0)
    n = len(members)
    # linear() estimates the change on removal (m_i: 1 -> 0), which is -D_i to first order
    gap_inf = -attr.linear("gap")[members]
    d_inf = -attr.linear("effect_size")[members]
    gi = se_interval(attr.base.gap, jackknife_se(gap_inf), np.inf, n, level)
    di = se_interval(attr.base.effect_size, jackknife_se(d_inf), np.inf, n, level)
    nx, ny = len(attr.sets["x"]), len(attr.sets["y"])
    if nx and ny and np.isfinite(di.low):
        bound = (nx + ny) / np.sqrt(nx * ny)
        di = dataclasses.replace(di, low=max(di.low, -bound), high=min(di.high, bound))
    return LinearIntervals(gi, di, gap_inf, d_inf)
