"""Interval arithmetic and multiplicity control (tracer/core/intervals.py)."""

import math

import numpy as np
import pytest
from scipy import stats

from tracer.core.intervals import (MIN_REPLICATES, bootstrap_interval, combined_interval, difference_interval,
                                   min_replicates_for_percentiles, percentile_interval, q_values, ratio_interval,
                                   delta_interval)
from tracer.errors import SettingError


def test_q_values_equal_scipy_false_discovery_control():
    rng = np.random.default_rng(0)
    p = np.concatenate([rng.uniform(size=40), rng.uniform(0, 0.01, size=10)])
    # reference: scipy.stats.false_discovery_control(method="bh")
    np.testing.assert_allclose(q_values(p), stats.false_discovery_control(p, method="bh"), rtol=1e-12)
    with_nan = np.array([0.01, np.nan, 0.04, 0.03])
    q = q_values(with_nan)
    assert np.isnan(q[1])
    np.testing.assert_allclose(q[[0, 2, 3]], stats.false_discovery_control([0.01, 0.04, 0.03], method="bh"))


def test_the_interval_is_centred_on_the_estimate_with_a_t_quantile():
    reps = np.array([0.8, 1.1, 0.9, 1.3, 1.0, 0.7, 1.2, 0.95, 1.05, 0.85, 1.15])
    iv = bootstrap_interval(2.0, reps)   # replicates far below the estimate: the interval stays on it
    half = stats.t.ppf(0.975, len(reps) - 1) * reps.std(ddof=1)  # scipy's t quantile
    assert (iv.low, iv.high) == pytest.approx((2.0 - half, 2.0 + half), rel=1e-12)
    assert iv.low < 2.0 < iv.high and iv.note == ""
    few = bootstrap_interval(1.0, reps[:5])
    assert f"fewer than {MIN_REPLICATES}" in few.note
    assert np.isnan(bootstrap_interval(1.0, [0.5]).low)


def test_bootstrap_intervals_cover_the_mean_95_percent_of_the_time():
    """Many samples of a normal variable, each with its own bootstrap of the mean: the 95% interval
    covers the true mean in 93-97% of them (binomial sd 0.5 points over 2,000 samples)."""
    rng = np.random.default_rng(1)
    n, reps, trials, hits = 30, 20, 2000, 0
    for _ in range(trials):
        x = rng.normal(size=n)
        boot = x[rng.integers(0, n, (reps, n))].mean(axis=1)
        iv = bootstrap_interval(x.mean(), boot)
        hits += iv.low <= 0 <= iv.high
    assert 0.93 <= hits / trials <= 0.975, hits / trials


def test_a_difference_of_independent_estimates_adds_the_variances():
    rng = np.random.default_rng(2)
    ra, rb = rng.normal(0, 0.1, 12), rng.normal(0, 0.2, 15)
    iv = difference_interval(1.0, ra, 1.5, rb)
    va, vb = ra.var(ddof=1), rb.var(ddof=1)
    df = (va + vb) ** 2 / (va ** 2 / 11 + vb ** 2 / 14)     # Welch-Satterthwaite, written out
    half = stats.t.ppf(0.975, df) * math.sqrt(va + vb)
    assert (iv.estimate, iv.low, iv.high) == pytest.approx((0.5, 0.5 - half, 0.5 + half), rel=1e-12)
    # the order of the replicates carries no information: shuffling one set changes nothing
    assert difference_interval(1.0, ra[::-1], 1.5, rb).low == pytest.approx(iv.low, rel=1e-12)
    slope = combined_interval(0.3, [-0.5, 0.5], [ra, rb])
    assert slope.se == pytest.approx(0.5 * math.sqrt(va + vb), rel=1e-12)


def test_percentile_intervals_refuse_too_few_replicates():
    assert min_replicates_for_percentiles(0.95) == 39 and min_replicates_for_percentiles(0.90) == 19
    with pytest.raises(SettingError, match="needs at least 39 replicates; got 20"):
        percentile_interval(np.arange(20.0))
    r = np.random.default_rng(3).normal(size=500)
    assert percentile_interval(r) == pytest.approx(tuple(np.percentile(r, [2.5, 97.5])))


def test_the_ratio_interval_is_the_delta_method_on_paired_replicates():
    rng = np.random.default_rng(4)
    u = rng.normal(1.0, 0.1, 20)
    v = 0.5 + 0.3 * (u - 1.0) + rng.normal(0, 0.02, 20)
    iv = ratio_interval(1.9, 1.0, 0.5, u, v)
    # the delta method written out: gradient of u / v at (1.0, 0.5), numpy's sample covariance
    grad = np.array([1 / 0.5, -1.0 / 0.5 ** 2])
    se = math.sqrt(grad @ np.cov(u, v) @ grad)
    half = stats.t.ppf(0.975, 19) * se
    assert (iv.low, iv.high, iv.se, iv.df) == pytest.approx((1.9 - half, 1.9 + half, se, 19), rel=1e-12)
    # a fixed denominator leaves the plain standard-error interval of u / v
    fixed = ratio_interval(2.0, 1.0, 0.5, u, np.full(20, 0.5))
    assert fixed.se == pytest.approx(bootstrap_interval(2.0, u / 0.5).se, rel=1e-12)
    assert np.isnan(ratio_interval(1.0, 1.0, 0.0, u, v).low) and ratio_interval(1.0, 1.0, 0.5, u[:5], v[:5]).note


def test_the_delta_interval_of_a_change_of_two_ratios_is_the_written_out_formula():
    # d_a - d_b with d = gap / sd: gradient (1/s_a, -g_a/s_a^2, -1/s_b, g_b/s_b^2) at the full-data values,
    # se^2 = g' Cov g with numpy's sample covariance of the four figures' replicates
    rng = np.random.default_rng(6)
    reps = rng.normal([0.3, 0.2, 0.5, 0.25], [0.05, 0.02, 0.04, 0.03], (25, 4))
    reps[:, 1] += 0.2 * (reps[:, 0] - 0.3)
    ga, sa, gb, sb = 0.3, 0.2, 0.5, 0.25
    grad = np.array([1 / sa, -ga / sa ** 2, -1 / sb, gb / sb ** 2])
    iv = delta_interval(ga / sa - gb / sb, grad, reps)
    se = math.sqrt(grad @ np.cov(reps.T) @ grad)
    half = stats.t.ppf(0.975, 24) * se
    assert (iv.low, iv.high, iv.se, iv.df) == pytest.approx((-0.5 - half, -0.5 + half, se, 24), rel=1e-12)
    reps[3, 2] = np.nan  # a replicate with a missing figure is left out whole
    assert delta_interval(-0.5, grad, reps).n == 24
    assert np.isnan(delta_interval(-0.5, [np.nan, 1, 1, 1], reps).low)


def test_ratio_intervals_cover_a_ratio_of_means_95_percent_of_the_time():
    """Samples of (u, v) pairs, the ratio of their means bootstrapped: the 95% delta-method interval covers
    the population ratio 2 in 93-97.5% of 1,000 samples (binomial sd 0.7 points)."""
    rng = np.random.default_rng(5)
    n, reps, trials, hits = 40, 20, 1000, 0
    for _ in range(trials):
        v = rng.gamma(4.0, 0.25, n)                 # mean 1
        u = 2.0 * v + rng.normal(0, 0.5, n)         # E u / E v = 2
        draw = rng.integers(0, n, (reps, n))
        iv = ratio_interval(u.mean() / v.mean(), u.mean(), v.mean(), u[draw].mean(axis=1), v[draw].mean(axis=1))
        hits += iv.low <= 2.0 <= iv.high
    assert 0.93 <= hits / trials <= 0.975, hits / trials
