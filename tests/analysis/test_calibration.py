"""Calibration: over corpora with nothing planted, p < 0.05 about 5% of the time (slow: -m slow)."""

import gzip
import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest

from tracer.core.counting import CountSettings
from tracer.corpus.ingest import ingest
from tracer.corpus.slices import slice_from_spec
from tracer.corpus.workspace import Workspace
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.analysis.measure import measure
from tracer.provenance.specs import load_tests

DEMO = Path(__file__).resolve().parents[2] / "corpora_demo"
_spec = importlib.util.spec_from_file_location("gen", DEMO / "generate_demo_corpus.py")
gen = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(gen)
TESTS = load_tests(Path(__file__).resolve().parents[2] / "configs" / "demo_tests.toml")


def null_p_values(tmp_path, n_corpora: int) -> np.ndarray:
    """p-values of the planted tests on corpora generated with every group sentence balanced."""
    tests = {k: TESTS[k] for k in ("gazette_outlet", "rise_and_fall", "tribune_mix", "control_groups")}
    ps = []
    for seed in range(n_corpora):
        docs, planted = gen.generate(10_000 + seed, docs_per_year=8, plant=False)
        assert not planted
        path = tmp_path / f"c{seed}.jsonl.gz"
        with gzip.open(path, "wt", encoding="utf-8") as f:
            f.writelines(json.dumps(d) + "\n" for d in docs)
        ingest(tmp_path / f"w{seed}", [path])
        ws = Workspace(tmp_path / f"w{seed}")
        r = measure(ws, tests, "ppmi-svd", [slice_from_spec(ws, "all")], CountSettings(), PpmiSvdSettings(dim=50))
        ps.extend(r.summary.p_value.to_list())
    return np.array(ps)


@pytest.mark.slow
def test_false_positive_rate_is_near_five_percent(tmp_path):
    ps = null_p_values(tmp_path, 200)  # 200 corpora x 4 exchangeable test pairs = 800 p-values
    rate = float(np.mean(ps < 0.05))
    print(f"share of p < 0.05 over {len(ps)} null p-values: {rate:.3f}")
    # binomial standard error at 5% over 800 values is 0.77 points; allow about three of them
    # (the four tests of one corpus are not independent, so the real spread is a little wider)
    assert 0.025 <= rate <= 0.075, rate
