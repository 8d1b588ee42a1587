"""Every bootstrap replicate of PPMI-SVD gets the exact truncated SVD, as the full-data model does.

Recomputed outside measure from the same resampled weights: counts of the replicate, PPMI,
ARPACK (:func:`tracer.core.ppmi_svd.ppmi_svd_vectors`) and WEAT. An approximate replicate
solver (the warm-started subspace iteration used before moved d by 0.01-0.3 on the demo)
fails the comparison, which asks for agreement to 1e-9.
"""

from pathlib import Path

import numpy as np

from tracer.analysis.measure import MeasureSettings, bootstrap_stream, bootstrap_weights, measure
from tracer.core.association import unit_rows, weat
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors
from tracer.corpus.slices import Slice, slice_from_spec
from tracer.provenance.counts import count_slice
from tracer.provenance.specs import load_tests

TESTS = load_tests(Path(__file__).resolve().parents[2] / "configs" / "demo_tests.toml")
NAMES = ("tribune_mix", "gazette_outlet", "control_groups")


def test_measure_replicates_are_exact_svds_of_the_resampled_counts(demo_ws):
    sl = slice_from_spec(demo_ws, "source=Tribune")
    counts, settings = CountSettings(window=5, min_count=5), PpmiSvdSettings(dim=100)
    tests = {n: TESTS[n] for n in NAMES}
    got = measure(demo_ws, tests, "ppmi-svd", [sl], counts, settings, MeasureSettings(bootstrap=3)).replicates
    c = count_slice(demo_ws, sl.weights, counts)
    rng = bootstrap_stream(0, sl.name)
    for k in range(3):
        rc = count_slice(demo_ws, bootstrap_weights(sl, rng), counts, vocab=c.vocab)
        unit = unit_rows(ppmi_svd_vectors(rc.matrix, settings)[0])
        for name in NAMES:
            want = weat(unit, c.vocab.index, tests[name], with_p=False)
            row = got[(got.test == name) & (got.replicate == k)].iloc[0]
            assert abs(row.effect_size - want.effect_size) <= 1e-9, (name, k, row.effect_size, want.effect_size)
            assert abs(row.gap - want.gap) <= 1e-9, (name, k, row.gap, want.gap)


def test_drift_reweighted_replicates_are_exact_svds_of_the_resampled_counts(demo_ws):
    """Drift's replicates of a period reweighted to another's mix, recomputed by hand: the period's
    own resamples (the measure stream), each reweighted, counted on the reweighted period's
    vocabulary, ARPACK, WEAT gap."""
    from tracer.analysis.drift import _Reweighted, reweight_to
    counts, settings = CountSettings(window=5, min_count=5), PpmiSvdSettings(dim=100)
    tests = {n: TESTS[n] for n in NAMES}
    period, other = slice_from_spec(demo_ws, "time=1950..1959"), slice_from_spec(demo_ws, "time=2010..2019")
    shared = _Reweighted(demo_ws, tests, "ppmi-svd", counts, settings, MeasureSettings(bootstrap=2))
    rw = reweight_to(demo_ws, period, other)[0]
    got = shared._replicates(period, other, rw)()
    c = count_slice(demo_ws, rw.weights, counts)
    index = shared.counts_and_model(rw)[1].index
    rng = bootstrap_stream(0, period.name)
    for k in range(2):
        w = bootstrap_weights(period, rng)
        rw_k = reweight_to(demo_ws, Slice(period.name, w, int((w > 0).sum()), period.n_tokens), other)[0]
        rc = count_slice(demo_ws, rw_k.weights, counts, vocab=c.vocab)
        unit = unit_rows(ppmi_svd_vectors(rc.matrix, settings)[0])
        for name in NAMES:
            assert abs(got[name][k] - weat(unit, index, tests[name], with_p=False).gap) <= 1e-9, (name, k)
