"""The infinitesimal-jackknife intervals of tracer.analysis.linear_interval."""

from pathlib import Path

import numpy as np
import pytest

from tracer.analysis.influence import Attribution
from tracer.analysis.linear_interval import jackknife_se, linear_intervals
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.corpus.slices import slice_from_spec
from tracer.provenance.counts import count_slice
from tracer.provenance.models import embedding_from_counts
from tracer.provenance.specs import load_tests

ROOT = Path(__file__).resolve().parents[2]
TESTS = load_tests(ROOT / "configs" / "demo_tests.toml")


def test_jackknife_se_of_a_hand_built_case():
    # D = (1, 2, 3, 6): mean 3, squared deviations 4 + 1 + 0 + 9 = 14, by hand
    assert jackknife_se([1.0, 2.0, 3.0, 6.0]) == pytest.approx(np.sqrt(14.0), rel=1e-12)
    assert np.isnan(jackknife_se([1.0])) and np.isnan(jackknife_se([1.0, np.nan]))


def test_the_mean_of_document_values_has_the_exact_bootstrap_variance():
    # the bootstrap mean of n values is linear in the multipliers (sum m* = n), so its variance is
    # exactly sum (x - mean x)^2 / n^2 (Efron and Tibshirani 1993, ch. 5: the ideal bootstrap se of a
    # mean); D_i = d/dm_i [sum m x / sum m] = (x_i - mean x) / n
    x = np.random.default_rng(0).gamma(2.0, size=40)
    n = len(x)
    exact = np.sqrt(np.sum((x - x.mean()) ** 2)) / n
    assert jackknife_se((x - x.mean()) / n) == pytest.approx(exact, rel=1e-12)
    # and numpy's multinomial draws agree (Monte Carlo, 200 000 resamples: relative se of an sd 0.16%)
    m = np.random.default_rng(1).multinomial(n, np.full(n, 1.0 / n), size=200_000)
    assert np.std(m @ x / n) == pytest.approx(exact, rel=0.01)


def test_a_weighted_total_needs_the_multinomial_centring():
    # T(m) = sum m_i v_i: D_i = v_i, and the multinomial's Cov(m*) = I - J/n gives Var* = sum (v - mean v)^2
    # exactly; the values are all positive so sum D_i is far from 0 and an uncentred sum of squares is wrong
    v = np.random.default_rng(2).uniform(1.0, 3.0, size=30)
    n = len(v)
    draws = np.random.default_rng(3).multinomial(n, np.full(n, 1.0 / n), size=200_000) @ v
    assert jackknife_se(v) == pytest.approx(np.std(draws), rel=0.01)
    assert np.sqrt(np.sum(v ** 2)) > 2 * np.std(draws)   # what dropping the centring would give


@pytest.fixture(scope="module")
def gazette(demo_ws):
    sl = slice_from_spec(demo_ws, "source=Gazette")
    c = count_slice(demo_ws, sl.weights, CountSettings())
    emb = embedding_from_counts(demo_ws, sl, c, PpmiSvdSettings())
    return sl, Attribution(demo_ws, sl.weights, c, emb, TESTS["gazette_outlet"], alpha=0.75, shift=1, eig_power=0.5)


def _central_influences(attr, docs, which, eps=1e-4):
    """D_i by central differences of the exact tier: document i's counts scaled by 1 +- eps (no threshold
    crosses at so small a step), the subspace fixed as in the linear pass."""
    n_probe, n_docs = len(attr.probe_ids), attr.ws.n_documents
    out = []
    for d in docs:
        c_d = attr.document_probe_counts[np.arange(n_probe) * n_docs + d].toarray()
        r_d = attr.document_row_sums[[d]].toarray()[0]
        up, down = attr._effects_without(np.stack([-eps * c_d, eps * c_d]), np.stack([-eps * r_d, eps * r_d]))
        out.append((getattr(up, which) - getattr(down, which)) / (2 * eps))
    return np.array(out)


def test_interval_is_the_spread_of_the_documents_central_differences(gazette):
    sl, attr = gazette
    members = np.flatnonzero(sl.weights > 0)
    lin = linear_intervals(attr)
    for which, interval, estimate in (("gap", lin.gap, attr.base.gap), ("effect_size", lin.d, attr.base.effect_size)):
        direct = _central_influences(attr, members, which)
        assert np.sqrt(np.sum((direct - direct.mean()) ** 2)) == pytest.approx(interval.se, rel=1e-4)
        assert interval.estimate == estimate and interval.se > 0
        assert interval.high - interval.low == pytest.approx(2 * 1.959963984540054 * interval.se, rel=1e-9) \
            or which == "effect_size"
    assert lin.d.low < lin.d.high and len(lin.gap_influence) == len(members)
