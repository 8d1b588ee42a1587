"""Bootstrap replicates on worker processes give the tables one process gives, bit for bit.

measure's and drift's replicate SVDs go through :func:`tracer.core.replicate_pool.map_replicates`;
with ``TRACER_REPLICATE_WORKERS`` = 1 they run in the calling process, with 2 on two spawned
workers. The tables must be equal exactly (``pandas.testing.assert_frame_equal`` with
``check_exact``): a pool that handed results back in the order they finish, or drew the resample
weights per worker, fails these.
"""

import functools
import operator

import numpy as np
import pandas as pd
import pytest

from tracer.analysis.drift import drift_tests
from tracer.analysis.measure import MeasureSettings, measure
from tracer.core import replicate_pool
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors, word_vectors
from tracer.core.replicate_pool import WORKERS_ENV, map_replicates, workers_for
from tracer.corpus.slices import slice_from_spec, slices_by
from tracer.errors import SettingError
from tracer.provenance.specs import load_tests

from pathlib import Path

TESTS = load_tests(Path(__file__).resolve().parents[2] / "configs" / "demo_tests.toml")

COUNTS, SVD = CountSettings(window=5, min_count=5), PpmiSvdSettings(dim=50)


def _measured(ws, monkeypatch, workers):
    monkeypatch.setenv(WORKERS_ENV, str(workers))
    sl = slice_from_spec(ws, "time=1960..1969")
    tests = {n: TESTS[n] for n in ("rise_and_fall", "tribune_mix", "gazette_outlet")}
    return measure(ws, tests, "ppmi-svd", [sl], COUNTS, SVD, MeasureSettings(bootstrap=4))


def test_measure_gives_the_same_tables_on_one_and_two_workers(demo_ws, monkeypatch):
    one, two = _measured(demo_ws, monkeypatch, 1), _measured(demo_ws, monkeypatch, 2)
    assert 2 in replicate_pool._pools  # the second run did use worker processes
    assert len(one.replicates) == 12 and one.replicates["gap"].notna().all()
    for part in ("summary", "replicates", "words", "leave_one_out"):
        pd.testing.assert_frame_equal(getattr(one, part), getattr(two, part), check_exact=True)


def _drifted(ws, monkeypatch, workers):
    monkeypatch.setenv(WORKERS_ENV, str(workers))
    periods = slices_by(ws, "time:10y")[:3]
    tests = {n: TESTS[n] for n in ("rise_and_fall", "tribune_mix")}
    return drift_tests(ws, tests, "ppmi-svd", periods, COUNTS, SVD, MeasureSettings(bootstrap=3))


def test_drift_gives_the_same_tables_on_one_and_two_workers(demo_ws, monkeypatch):
    one, two = _drifted(demo_ws, monkeypatch, 1), _drifted(demo_ws, monkeypatch, 2)
    for name in one:
        # the reweighted replicates give the mix and within intervals: present, and equal
        assert one[name].changes[["mix_ci_low", "within_ci_low"]].notna().all().all()
        for part in ("periods", "changes", "source_parts"):
            pd.testing.assert_frame_equal(getattr(one[name], part), getattr(two[name], part), check_exact=True)
        assert one[name].trend == two[name].trend


def test_map_keeps_the_order_of_the_items():
    items = list(range(40))
    # against Python's own map of the same function
    assert map_replicates(functools.partial(operator.mul, 3), items, 2) == list(map(lambda i: 3 * i, items))


def test_worker_vectors_equal_the_svd_in_this_process(demo_ws):
    from tracer.provenance.counts import count_slice
    c = count_slice(demo_ws, slice_from_spec(demo_ws, "time=1950..1959").weights, COUNTS)
    got = map_replicates(functools.partial(word_vectors, settings=SVD), [c.matrix, c.matrix], 2)
    want = ppmi_svd_vectors(c.matrix, SVD)[0]  # scipy's ARPACK in this process
    for g in got:
        np.testing.assert_array_equal(g, want)


def test_an_error_in_a_worker_is_raised_in_the_caller():
    with pytest.raises(ZeroDivisionError):
        map_replicates(functools.partial(operator.truediv, 1), [1, 0, 2], 2)


def test_workers_follow_the_setting_the_tasks_and_the_memory(monkeypatch):
    monkeypatch.setenv(WORKERS_ENV, "3")
    monkeypatch.setenv("TRACER_AVAILABLE_MB", "1000")
    assert workers_for(100 * 2 ** 20, 10) == 3
    assert workers_for(100 * 2 ** 20, 2) == 2
    assert workers_for(400 * 2 ** 20, 10) == 2  # two fit in 1,000 MB, three do not
    assert workers_for(4000 * 2 ** 20, 10) == 1
    monkeypatch.setenv(WORKERS_ENV, "none")
    with pytest.raises(SettingError, match="TRACER_REPLICATE_WORKERS must be a whole number"):
        workers_for(1, 10)
