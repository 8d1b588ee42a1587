"""Interval arithmetic for every figure with an interval: one place, one convention.

The tool's bootstrap replicates are expensive (each one is a retrained model), so a
call has 5-20 of them. With so few, a "2.5-97.5 percentile" interval is the minimum
and maximum of the replicates, and its position inherits whatever the replicates share
beyond sampling noise: a document resample holds about 63% distinct documents and a
model of less distinct text gives smaller cosine gaps, so the replicates run low and
the estimate often fell outside its own interval.

The interval used throughout is therefore the *bootstrap standard-error interval*
(Efron and Tibshirani 1993, ch. 6 and 13): centred on the estimate, half-width
``t(n - 1) * sd(replicates)``. The replicates are used only for their spread, which
a shift common to all of them does not change; the Student t quantile with n - 1
degrees of freedom widens the interval for the uncertainty of a standard deviation
estimated from n replicates (its relative standard error is about 1 / sqrt(2 (n - 1)):
16% at 20 replicates, 24% at 10). Fewer than :data:`MIN_REPLICATES` replicates give a
warning; fewer than 2 give no interval. Derived figures (a difference of two periods,
a slope over periods, a decomposition's parts) combine the standard errors of
independent parts (each period's replicates are drawn from its own documents), with
Welch-Satterthwaite degrees of freedom.

A ratio such as the WEAT effect size ``d = gap / sd`` (sd of the target words' scores) gets
its standard error by the delta method from the paired replicates of numerator and
denominator, with the derivatives taken at the full-data values
(:func:`ratio_interval`): ``se^2 = (var u - 2 q cov(u, v) + q^2 var v) / v^2`` for ``q = u / v``.
Taking the sd of the replicate ratios instead shrinks the spread: the word scores of a
resample carry the resampling noise on top of the sample's own, so a replicate's sd runs
high (median 29% above the estimate's over 200 simulated corpora) and its ratio answers a change of
the gap with a slope 1/sd* smaller than the 1/sd of the estimate. In that simulation
(tests/benchmarks/bench_coverage.py) the interval from the sd of the replicate d's covered
the expected d in 90% of 200 corpora, the delta method's in 94.5%.

Percentile intervals are kept for resamples that are cheap and many (words resampled
in ``correlate``): :func:`percentile_interval` refuses fewer than
:func:`min_replicates_for_percentiles` replicates, the count at which the claimed
percentiles are order statistics strictly inside the sample.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import stats

from tracer.errors import SettingError

LEVEL = 0.95
# below this many replicates the standard error is too rough to rely on (relative SE > 24%)
MIN_REPLICATES = 10
METHOD = "bootstrap standard error, t(n-1), centred on the estimate"
RATIO_METHOD = ("delta method on the bootstrap replicates' numerator and denominator, t(n-1), centred on "
                "the estimate")


@dataclasses.dataclass(frozen=True)
class Interval:
    """An interval around ``estimate``: ``low``, ``high``, the standard error ``se``, the degrees of
    freedom ``df`` of its quantile, ``n`` replicates, and ``note`` (empty, or why to read it with care)."""

    estimate: float
    low: float
    high: float
    se: float
    df: float
    n: int
    note: str = ""


NO_INTERVAL = Interval(float("nan"), float("nan"), float("nan"), float("nan"), float("nan"), 0,
                       "no interval: fewer than 2 replicates")


def replicate_note(n: int) -> str:
    """Why an interval from ``n`` replicates needs care, or ''."""
    if n < MIN_REPLICATES:
        return (f"interval from {n} replicates, fewer than {MIN_REPLICATES}: its width is uncertain by about "
                f"{100 / math.sqrt(2 * max(n - 1, 1)):.0f}%")
    return ""


def standard_error(replicates) -> tuple[float, int]:
    """The bootstrap standard error (sd with n - 1) of the finite replicates, and their number."""
    r = np.asarray(replicates, dtype=np.float64)
    r = r[np.isfinite(r)]
    return (float(r.std(ddof=1)) if len(r) > 1 else float("nan")), len(r)


def se_interval(estimate: float, se: float, df: float, n: int, level: float = LEVEL, note: str = "") -> Interval:
    """``estimate +- t(df) * se``."""
    if not (np.isfinite(se) and np.isfinite(estimate) and df > 0):
        return dataclasses.replace(NO_INTERVAL, estimate=float(estimate), n=n)
    half = float(stats.t.ppf(0.5 + level / 2, df)) * se
    return Interval(float(estimate), float(estimate) - half, float(estimate) + half, float(se), float(df), n, note)


def bootstrap_interval(estimate: float, replicates, level: float = LEVEL) -> Interval:
    """The bootstrap standard-error interval of one estimate (see the module docstring).

    Parameters
    ----------
    estimate : float
        The figure on the full data.
    replicates : array_like, shape (n,)
        The same figure on n bootstrap replicates (NaN replicates are left out).
    """
    se, n = standard_error(replicates)
    if n < 2:
        return dataclasses.replace(NO_INTERVAL, estimate=float(estimate), n=n)
    return se_interval(estimate, se, n - 1, n, level, replicate_note(n))


def ratio_interval(estimate: float, numerator: float, denominator: float, numerator_replicates,
                   denominator_replicates, level: float = LEVEL) -> Interval:
    """Interval of a ratio ``q = u / v`` by the delta method on paired replicates of u and v.

    Parameters
    ----------
    estimate : float
        The ratio reported (the centre; with several seeds a mean of ratios, near ``numerator /
        denominator``).
    numerator, denominator : float
        u and v on the full data: the derivatives ``1 / v`` and ``-u / v^2`` are taken there.
    numerator_replicates, denominator_replicates : array_like, shape (n,)
        u and v on the same n bootstrap replicates (pairs with a NaN are left out).

    Returns
    -------
    Interval
        ``estimate +- t(n - 1) se`` with ``se^2 = (var u - 2 q cov(u, v) + q^2 var v) / v^2``.
    """
    if not (np.isfinite(denominator) and denominator != 0):
        return dataclasses.replace(NO_INTERVAL, estimate=float(estimate))
    q = float(numerator) / float(denominator)
    v = float(denominator)
    return delta_interval(estimate, [1.0 / v, -q / v],
                          np.column_stack([numerator_replicates, denominator_replicates]), level)


def delta_interval(estimate: float, gradient, replicates, level: float = LEVEL) -> Interval:
    """Interval of a smooth function f of several figures by the delta method on their replicates.

    Parameters
    ----------
    estimate : float
        f on the full data (the centre).
    gradient : array_like, shape (p,)
        The partial derivatives of f at the full-data values of the p figures.
    replicates : array_like, shape (n, p)
        The p figures on n bootstrap replicates (rows with a NaN are left out).

    Returns
    -------
    Interval
        ``estimate +- t(n - 1) se`` with ``se^2 = g' Cov(replicates) g``: the sd of the
        linearised replicates ``g . theta*_i``.
    """
    g = np.asarray(gradient, dtype=np.float64)
    r = np.asarray(replicates, dtype=np.float64).reshape(-1, len(g))
    ok = np.isfinite(r).all(axis=1)
    n = int(ok.sum())
    if n < 2 or not np.isfinite(g).all():
        return dataclasses.replace(NO_INTERVAL, estimate=float(estimate), n=n)
    se = float(np.std(r[ok] @ g, ddof=1))
    return se_interval(estimate, se, n - 1, n, level, replicate_note(n))


def combined_interval(estimate: float, coefficients, replicate_sets, level: float = LEVEL) -> Interval:
    """Interval of ``estimate = sum_i c_i theta_i`` for independent estimates theta_i, each with its own
    replicates: ``se^2 = sum_i c_i^2 se_i^2``, Welch-Satterthwaite degrees of freedom
    ``(sum v_i)^2 / sum(v_i^2 / (n_i - 1))`` with ``v_i = c_i^2 se_i^2``."""
    v, dfs, ns = [], [], []
    for c, reps in zip(coefficients, replicate_sets):
        se, n = standard_error(reps)
        if n < 2:
            return dataclasses.replace(NO_INTERVAL, estimate=float(estimate), n=n)
        v.append(float(c) ** 2 * se ** 2)
        dfs.append(n - 1)
        ns.append(n)
    v = np.array(v)
    total = float(v.sum())
    df = total ** 2 / float(np.sum(v ** 2 / np.array(dfs))) if total > 0 else float(min(dfs))
    return se_interval(estimate, math.sqrt(total), df, min(ns), level, replicate_note(min(ns)))


def difference_interval(estimate_a: float, replicates_a, estimate_b: float, replicates_b,
                        level: float = LEVEL) -> Interval:
    """Interval of ``b - a`` for two independent estimates (two periods' own replicate sets): no
    pairing of replicates, whose order carries no information."""
    return combined_interval(float(estimate_b) - float(estimate_a), [-1.0, 1.0], [replicates_a, replicates_b], level)


def min_replicates_for_percentiles(level: float = LEVEL) -> int:
    """Fewest replicates for which the (1 - level)/2 and (1 + level)/2 percentiles are order statistics
    strictly inside the sample: ``(n + 1) (1 - level) / 2 >= 1``, so 39 at 95%. Below it the
    interval is the sample's minimum and maximum, whose coverage depends on n, not on ``level``."""
    return math.ceil(round(2.0 / (1.0 - level), 9)) - 1


def percentile_interval(replicates, level: float = LEVEL) -> tuple[float, float]:
    """The percentile interval of many cheap replicates; refuses too few (see
    :func:`min_replicates_for_percentiles`)."""
    r = np.asarray(replicates, dtype=np.float64)
    need = min_replicates_for_percentiles(level)
    if len(r) < need:
        raise SettingError(f"a {level:.0%} percentile interval needs at least {need} replicates; got {len(r)}")
    tail = 100 * (1 - level) / 2
    lo, hi = np.percentile(r, [tail, 100 - tail])
    return float(lo), float(hi)


def q_values(p_values) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values) of a family, NaN where p is NaN (not counted).

    ``q_(i) = min_{j >= i} m p_(j) / j`` over the m finite p-values sorted ascending, capped at 1.
    """
    p = np.asarray(p_values, dtype=np.float64)
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    m = len(ok)
    if m == 0:
        return out
    order = ok[np.argsort(p[ok], kind="stable")]
    scaled = p[order] * m / np.arange(1, m + 1)
    out[order] = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
    return out
