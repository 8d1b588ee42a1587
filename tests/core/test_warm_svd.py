"""The bootstrap's warm-started SVD against a cold exact SVD of the same replicate."""

import numpy as np
import pytest

from tracer.analysis.measure import bootstrap_weights
from tracer.core.association import unit_rows, weat
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors, ppmi_svd_vectors_warm
from tracer.corpus.slices import slice_from_spec
from tracer.provenance.counts import count_slice
from tracer.provenance.specs import load_tests

from pathlib import Path

TESTS = load_tests(Path(__file__).resolve().parents[2] / "configs" / "demo_tests.toml")
# the tolerance stated in tracer/core/ppmi_svd.py (WARM_ITERATIONS)
D_TOLERANCE, GAP_TOLERANCE = 0.02, 0.002


@pytest.mark.parametrize("slice_spec", ["source=Tribune", "time=1980..1989"])
def test_warm_replicates_match_a_cold_exact_svd_in_d_and_gap(demo_ws, slice_spec):
    sl = slice_from_spec(demo_ws, slice_spec)
    counts, settings = CountSettings(window=5, min_count=5), PpmiSvdSettings(dim=100)
    c = count_slice(demo_ws, sl.weights, counts)
    start = ppmi_svd_vectors(c.matrix, settings)[1]["context_vectors"].astype(np.float64)
    index = c.vocab.index
    rng = np.random.default_rng(3)
    for _ in range(2):
        rc = count_slice(demo_ws, bootstrap_weights(sl, rng), counts, vocab=c.vocab)
        cold = unit_rows(ppmi_svd_vectors(rc.matrix, settings)[0])   # ARPACK, the exact truncated SVD
        warm = unit_rows(ppmi_svd_vectors_warm(rc.matrix, settings, start))
        for name in ("tribune_mix", "gazette_outlet", "rise_and_fall", "control_groups"):
            a, b = weat(cold, index, TESTS[name], with_p=False), weat(warm, index, TESTS[name], with_p=False)
            assert abs(a.effect_size - b.effect_size) <= D_TOLERANCE, (name, a.effect_size, b.effect_size)
            assert abs(a.gap - b.gap) <= GAP_TOLERANCE, (name, a.gap, b.gap)
