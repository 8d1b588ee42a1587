import gzip
import importlib.util
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats
from scipy.linalg import orthogonal_procrustes

from tracer.app.cli import cli
from tracer.corpus.ingest import ingest
from tracer.corpus.slices import slices_by
from tracer.corpus.workspace import Workspace
from tracer.analysis.drift import _trend, aligned, drift, drift_tests, procrustes_rotation, reweight_to, source_shares, word_drift
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.core.embedding import Embedding
from tracer.analysis.measure import MeasureSettings
from tracer.provenance.specs import load_tests

ROOT = Path(__file__).resolve().parents[2]
TESTS = load_tests(ROOT / "configs" / "demo_tests.toml")


def test_rotation_equals_scipy_orthogonal_procrustes():
    rng = np.random.default_rng(0)
    a, b = rng.normal(size=(40, 6)), rng.normal(size=(40, 6))
    np.testing.assert_allclose(procrustes_rotation(a, b), orthogonal_procrustes(a, b)[0], atol=1e-12)


def test_alignment_undoes_a_rotation():
    rng = np.random.default_rng(1)
    words = [f"w{i}" for i in range(30)]
    v = rng.normal(size=(30, 5))
    q, _ = np.linalg.qr(rng.normal(size=(5, 5)))
    ref = Embedding(words, v.astype(np.float32), {})
    turned = Embedding(words, (v @ q).astype(np.float32), {})
    (back, _), shared = aligned([turned, ref])
    np.testing.assert_allclose(back.vectors, ref.unit_vectors, atol=1e-5)
    assert shared == [30, 30]


@pytest.fixture(scope="module")
def drifts(demo_ws):
    periods = slices_by(demo_ws, "time:10y")
    return {name: drift(demo_ws, TESTS[name], "ppmi-svd", periods, settings=MeasureSettings(bootstrap=5))
            for name in ("rise_and_fall", "tribune_mix")}


def test_several_tests_at_once_give_what_each_gives_alone(demo_ws, drifts):
    together = drift_tests(demo_ws, {n: TESTS[n] for n in drifts}, "ppmi-svd", slices_by(demo_ws, "time:10y"),
                           settings=MeasureSettings(bootstrap=5))
    for name, alone in drifts.items():
        both = together[name]
        for part in ("periods", "changes", "source_parts"):
            pd.testing.assert_frame_equal(getattr(both, part), getattr(alone, part))
        assert both.trend == alone.trend and both.notes == alone.notes


def test_rise_and_fall_peaks_inside_the_planted_peak(drifts):
    p = drifts["rise_and_fall"].periods
    peak = p.loc[p.gap.idxmax(), "period"]
    # planted strength by decade 0, .3, .8, 1, .6, .2, 0 (corpora_demo/README.md): the peak is the
    # 1980s, with the 1970s at 0.8 within reach of it
    assert peak in ("time=1970..1979", "time=1980..1989")
    assert p.gap.iloc[0] < 0.1 and p.gap.iloc[-1] < 0.1 and p.gap.max() > 0.25
    assert {"period", "effect_size", "ci_low", "ci_high", "gap", "gap_ci_low", "gap_ci_high", "tokens"} <= set(p.columns)


def test_a_change_through_one_outlets_share_is_mostly_mix(drifts):
    ch = drifts["tribune_mix"].changes
    overall = ch[ch.overall].iloc[0]
    # symmetric split: the parts add up to the change, and each is the mean of the two directions
    np.testing.assert_allclose(ch.mix_part + ch.within_part, ch.total, atol=1e-12)
    np.testing.assert_allclose((ch.mix_part_at_from_mix + ch.mix_part_at_to_mix) / 2, ch.mix_part, atol=1e-12)
    np.testing.assert_allclose(ch.mix_share, ch.mix_part / ch.total)
    # planted through the Tribune's share only (one rate inside the Tribune, corpora_demo/README.md):
    # the symmetric split puts more than 70% of the first-to-last change in the mix, with its interval
    # above 0, and each reweighting direction alone puts more than half there
    assert overall.total > 0.2 and overall.mix_ci_low > 0 and overall.mix_part / overall.total > 0.7
    assert min(overall.mix_part_at_from_mix, overall.mix_part_at_to_mix) / overall.total > 0.5
    assert overall.mix_ci_low <= overall.mix_part <= overall.mix_ci_high
    assert drifts["tribune_mix"].trend["slope"] > 0 and drifts["tribune_mix"].trend["p_value"] < 0.05


def test_changes_are_significant_where_the_independent_intervals_exclude_0(drifts):
    p = drifts["rise_and_fall"].periods.iloc[1:]
    gaps = drifts["rise_and_fall"].periods.gap.to_numpy()
    np.testing.assert_allclose(p.change, np.diff(gaps))
    excludes = (p.change_ci_low > 0) | (p.change_ci_high < 0)
    assert (p.change_significant.astype(bool) == excludes).all()
    # the planted strength moves by 0.4 or more in three steps (0.3 -> 0.8, 1 -> 0.6, 0.6 -> 0.2;
    # corpora_demo/README.md): each is significant, in the planted direction. (The first step,
    # 0 -> 0.3, gave the interval -0.006 to 0.495 on this archive with 5 replicates.)
    assert p.change_significant.iloc[[1, 3, 4]].all()
    assert p.change_ci_low.iloc[1] > 0 and p.change_ci_high.iloc[3] < 0 and p.change_ci_high.iloc[4] < 0
    assert ((p.change_ci_low <= p.change) & (p.change <= p.change_ci_high)).all()


def test_the_slope_is_per_decade_and_its_interval_combines_the_periods():
    """A gap rising by 0.1 per decade: slope 0.1 gap per decade (scipy.stats.linregress as the reference),
    standard error sqrt(sum c_i^2 se_i^2) from each period's replicates."""
    names = [f"time={y}..{y + 9}" for y in range(1950, 2020, 10)]
    gaps = 0.1 * np.arange(7) + np.array([0.01, -0.02, 0.0, 0.015, -0.01, 0.0, 0.005])
    rng = np.random.default_rng(0)
    reps = {n: g + rng.normal(0, 0.02, 10) for n, g in zip(names, gaps)}
    t = _trend(pd.DataFrame({"period": names, "gap": gaps}), reps)
    x = np.array([(y + y + 9) / 2 / 10 for y in range(1950, 2020, 10)])
    assert t["slope"] == pytest.approx(stats.linregress(x, gaps).slope, rel=1e-12)
    assert t["slope"] == pytest.approx(0.1, abs=0.01) and t["slope_unit"] == "gap per decade"
    c = (x - x.mean()) / np.sum((x - x.mean()) ** 2)
    se = np.sqrt(np.sum(c ** 2 * np.array([reps[n].var(ddof=1) for n in names])))
    assert t["slope_ci_low"] < t["slope"] < t["slope_ci_high"]
    assert (t["slope_ci_high"] - t["slope_ci_low"]) / 2 == pytest.approx(1.96 * se, rel=0.15)
    assert t["p_floor"] == pytest.approx(2 / 5040) and t["p_value"] == pytest.approx(t["p_floor"])


def test_a_change_inside_the_outlets_is_mostly_within(drifts):
    ch = drifts["rise_and_fall"].changes
    big = ch[~ch.overall & (ch.total.abs() > 0.05)]
    assert len(big) >= 3
    assert (big.within_part.abs() > big.mix_part.abs()).all()
    assert ((big.within_part / big.total) > 0.7).all()


def test_reweighting_gives_the_earlier_source_mix(demo_ws):
    periods = slices_by(demo_ws, "time:10y")
    early, late = periods[0], periods[-1]
    rw, only_late, only_early = reweight_to(demo_ws, late, early)
    np.testing.assert_allclose(source_shares(demo_ws, rw.weights).sort_index(),
                               source_shares(demo_ws, early.weights).sort_index(), rtol=1e-12)
    assert only_late == [] and only_early == []


def test_short_periods_are_not_measured(demo_ws):
    periods = slices_by(demo_ws, "time:10y")
    cutoff = sorted(p.n_tokens for p in periods)[2] + 1  # the three shortest periods fall below
    r = drift(demo_ws, TESTS["tribune_mix"], "ppmi-svd", periods, settings=MeasureSettings(bootstrap=0),
              min_tokens=cutoff)
    skipped = r.periods[~r.periods.measured.astype(bool)]
    assert len(skipped) == 3
    assert all(reason.endswith(f"fewer than the {cutoff} a period needs") for reason in skipped.reason)


def test_word_drift_compares_shared_words_only(demo_ws):
    periods = slices_by(demo_ws, "time:10y")[:3]
    change, near, notes = word_drift(demo_ws, ["harbour", "wheat"], periods, settings=PpmiSvdSettings(dim=50),
                                     neighbours=4)
    assert len(change) == 6 and change.distance_from_previous.iloc[:2].isna().all()
    later = change.iloc[2:]
    assert (later.distance_from_previous.between(0, 2)).all() and (later.words_compared > 100).all()
    assert len(near) == 6 * 4 and len(notes) == 3
    # each change read against every shared word's change between the same two periods
    assert later.distance_percentile.between(0, 100).all() and (later.median_distance_all_words > 0).all()
    assert (later.distance_95th_all_words >= later.median_distance_all_words).all()


def test_drift_cli_json_keys(demo_ws):
    res = CliRunner().invoke(cli, ["drift", "-w", str(demo_ws.path), "--tests", str(ROOT / "configs" / "demo_tests.toml"),
                                   "--test", "control_groups", "--bootstrap", "3", "--format", "json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    assert {"period", "effect_size", "ci_low", "ci_high", "gap", "gap_ci_low", "gap_ci_high", "tokens"} <= set(out["periods"][0])
    assert {"slope", "slope_ci_low", "slope_ci_high", "p_value"} <= set(out["trend"])
    assert {"from", "to", "total", "mix_part", "within_part"} <= set(out["changes"][0])
    res = CliRunner().invoke(cli, ["drift", "-w", str(demo_ws.path), "--tests", str(ROOT / "configs" / "demo_tests.toml"),
                                   "--test", "occupations"])
    assert res.exit_code == 1 and "has one target set; drift takes two-target tests" in res.stderr


_spec = importlib.util.spec_from_file_location("gen", ROOT / "corpora_demo" / "generate_demo_corpus.py")
gen = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(gen)


@pytest.mark.slow
def test_no_trend_in_corpora_with_nothing_planted(tmp_path):
    """Periods drawn alike (nothing planted): Kendall's trend test at 0.05 fires in about 5% of corpora."""
    hits, n = 0, 0
    for seed in range(60):
        docs, _ = gen.generate(20_000 + seed, docs_per_year=25, plant=False)
        path = tmp_path / f"c{seed}.jsonl.gz"
        with gzip.open(path, "wt", encoding="utf-8") as f:
            f.writelines(json.dumps(d) + "\n" for d in docs)
        ingest(tmp_path / f"w{seed}", [path])
        ws = Workspace(tmp_path / f"w{seed}")
        r = drift(ws, TESTS["control_groups"], "ppmi-svd", slices_by(ws, "time:10y"),
                  model_settings=PpmiSvdSettings(dim=50), settings=MeasureSettings(bootstrap=0), min_tokens=1000)
        n += 1
        hits += r.trend["p_value"] < 0.05
    print(f"significant trends: {hits} of {n}")
    assert hits / n <= 0.12  # 5% expected; 7 of 60 or fewer (binomial upper tail about 3%)


def test_each_source_gets_a_share_of_the_within_change(drifts):
    sp = drifts["rise_and_fall"].source_parts
    first = sp[(sp["from"] == "time=1950..1959") & (sp["to"] == "time=1960..1969")]
    assert sorted(first.source) == ["Courier", "Gazette", "Herald", "Ledger", "Tribune"]
    assert np.isfinite(first.within_contribution.astype(float)).all()
    assert first.share_from.sum() == pytest.approx(1.0) and first.share_to.sum() == pytest.approx(1.0)


def test_word2vec_changes_say_there_is_no_split(tmp_path):
    """word2vec trains on whole-number document weights only, so the source-mix reweighting of the split
    cannot be trained: the total change keeps its interval, the parts are empty and a note says why."""
    from tracer.core.word2vec import Word2VecSettings
    docs, _ = gen.generate(31, docs_per_year=12)
    path = tmp_path / "small.jsonl.gz"
    with gzip.open(path, "wt", encoding="utf-8") as f:
        f.writelines(json.dumps(d) + "\n" for d in docs)
    ingest(tmp_path / "ws", [path])
    ws = Workspace(tmp_path / "ws")
    periods = slices_by(ws, "time:35y")[1:]
    r = drift(ws, TESTS["tribune_mix"], "word2vec", periods, model_settings=Word2VecSettings(dim=16, epochs=2),
              settings=MeasureSettings(bootstrap=3), min_tokens=1000)
    ch = r.changes.iloc[0]
    p = r.periods.set_index("period")
    assert ch.total == pytest.approx(p.gap.iloc[1] - p.gap.iloc[0])
    assert ch.total_ci_low < ch.total < ch.total_ci_high
    assert ch[["mix_part", "within_part", "mix_ci_low", "within_ci_high"]].isna().all() and r.source_parts.empty
    assert any("no mix/within split and no interval for its parts with word2vec" in n for n in r.notes)
