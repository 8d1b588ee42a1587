from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.stats.contingency import odds_ratio

from tracer.core.counting import CountSettings
from tracer.provenance.counts import count_slice
from tracer.corpus.slices import resolve_slices, slice_from_spec
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import embedding_from_counts
from tracer.core.embedding import Embedding
from tracer.core.word2vec import Word2VecSettings
from tracer.analysis.measure import MeasureSettings, log_odds_ratio, measure
from tracer.provenance.specs import load_tests
from tracer.core.association import AssociationTest
from tracer.provenance.vectors_io import read_word2vec_format, write_word2vec_format

TESTS = load_tests(Path(__file__).resolve().parents[2] / "configs" / "demo_tests.toml")


@pytest.fixture(scope="module")
def demo_result(demo_ws):
    slices = resolve_slices(demo_ws, ["source", "time:10y"], ["all"])
    return measure(demo_ws, TESTS, "ppmi-svd", slices, CountSettings(), PpmiSvdSettings(),
                   MeasureSettings(bootstrap=5))


def _row(result, test, sl):
    s = result.summary
    return s[(s.test == test) & (s.slice == sl)].iloc[0]


# where each association was planted (corpora_demo/README.md) and its sign
PLANTED = [("gazette_outlet", "source=Gazette"), ("tribune_mix", "source=Tribune"),
           ("rise_and_fall", "time=1970..1979"), ("rise_and_fall", "time=1980..1989"),
           ("rise_and_fall", "time=1990..1999")]


@pytest.mark.parametrize("test, sl", PLANTED)
def test_planted_associations_are_found(demo_result, test, sl):
    r = _row(demo_result, test, sl)
    assert r.measured and r.effect_size > 0.8 and r.p_value < 0.01 and r.pmi_effect_size > 0.8
    assert r.n_bootstrap == 5 and r.ci_low <= r.ci_high


def test_the_outlet_association_is_absent_elsewhere_and_the_rise_falls(demo_result):
    # not found at the level that finds the planted ones (p < 0.01); at 0.05, one of four
    # unplanted outlets crossing the line by chance is what a calibrated test does
    for outlet in ("Ledger", "Courier", "Herald", "Tribune"):
        assert _row(demo_result, "gazette_outlet", f"source={outlet}").p_value > 0.01
    assert _row(demo_result, "rise_and_fall", "time=2010..2019").p_value > 0.05


def test_the_control_finds_nothing(demo_result):
    r = _row(demo_result, "control_groups", "all")
    assert abs(r.effect_size) < 0.5 or r.p_value > 0.05
    rows = demo_result.summary[demo_result.summary.test == "control_groups"]
    assert len(rows) == 13
    # over 13 slices a calibrated test at 0.05 errs about 0.65 times; 3 or more would happen
    # by chance about 2.5% of the time (binomial(13, 0.05))
    assert sum(r.p_value < 0.05 and abs(r.effect_size) >= 0.5 for r in rows.itertuples()) <= 2


def test_conventions_and_guards_are_reported(demo_ws, demo_result):
    s = demo_result.summary
    assert set(s.std_convention) == {"population standard deviation (n) over all target words"}
    assert set(s[s.kind == "two-target"].p_method) == {"exact"}
    # every slice measured above has over 100,000 tokens (the Gazette about 101,000); half a decade has fewer
    small = measure(demo_ws, {"gazette_outlet": TESTS["gazette_outlet"]}, "ppmi-svd",
                    [slice_from_spec(demo_ws, "time=1950..1954")]).summary.iloc[0]
    assert "slice time=1950..1954 has" in small.warning and "fewer than 100000" in small.warning
    assert "fewer than 100000" not in _row(demo_result, "gazette_outlet", "all").warning
    two = s[(s.kind == "two-target") & s.measured.astype(bool)]
    # every estimate inside its interval; five replicates are flagged as too few for a sure width
    assert ((two.ci_low <= two.effect_size) & (two.effect_size <= two.ci_high)).all()
    assert ((two.gap_ci_low <= two.gap) & (two.gap <= two.gap_ci_high)).all()
    assert two.warning.str.contains("interval from 5 replicates, fewer than 10").all()
    occ = _row(demo_result, "occupations", "all")
    assert occ.kind == "one-target" and np.isfinite(occ.mean_score) and np.isnan(occ.effect_size)


def test_a_test_whose_words_are_missing_is_not_measured(demo_ws):
    t = AssociationTest("missing", ("zzq1", "zzq2", "harbour"), ("wheat", "barn", "zzq3"), ("joy",), ("agony",), ())
    r = measure(demo_ws, {"missing": t}, "ppmi-svd", [slice_from_spec(demo_ws, "source=Gazette")]).summary.iloc[0]
    assert not r.measured and np.isnan(r.effect_size)
    assert r.reason == ("too few words in this vocabulary (target sets need 3, attribute sets 1): "
                        "targets_x has 1, targets_y has 2")
    assert r.dropped_words == ["zzq1", "zzq2", "zzq3"]


def test_leave_one_word_out(demo_result):
    loo = demo_result.leave_one_out
    g = loo[(loo.test == "gazette_outlet") & (loo.slice == "source=Gazette")]
    assert len(g) == 6 + 6 + 8 + 8
    full = _row(demo_result, "gazette_outlet", "source=Gazette").effect_size
    np.testing.assert_allclose(g.effect_size - full, g.change)


def test_per_word_table_has_the_log_odds_ratio_of_scipy(demo_ws, demo_result):
    """Reference: scipy.stats.contingency.odds_ratio(kind='sample') and its Woolf interval."""
    c = count_slice(demo_ws, slice_from_spec(demo_ws, "all").weights, CountSettings())
    t = TESTS["occupations"]
    lor = log_odds_ratio(c, "nurse", list(t.attributes_a), list(t.attributes_b))
    table = [[lor["count_a"], lor["count_b"]],
             [c.row_sums[c.vocab.index["she"]] - lor["count_a"], c.row_sums[c.vocab.index["he"]] - lor["count_b"]]]
    ref = odds_ratio(np.rint(table).astype(int), kind="sample")  # unit weights: whole counts
    ci = ref.confidence_interval(0.95)
    assert lor["log_odds_ratio"] == pytest.approx(np.log(ref.statistic), rel=1e-12)
    assert (lor["lor_ci_low"], lor["lor_ci_high"]) == pytest.approx((np.log(ci.low), np.log(ci.high)), rel=1e-9)
    words = demo_result.words
    occ = words[(words.test == "occupations") & (words.slice == "all")].set_index("word")
    assert occ.loc["nurse", "log_odds_ratio"] == pytest.approx(lor["log_odds_ratio"])
    assert occ.loc["nurse", "log_odds_ratio"] > 1 > -1 > occ.loc["carpenter", "log_odds_ratio"]  # planted: she / he


def test_outside_vectors_give_the_same_numbers(demo_ws, tmp_path):
    sl = slice_from_spec(demo_ws, "source=Tribune")
    c = count_slice(demo_ws, sl.weights, CountSettings())
    emb = embedding_from_counts(demo_ws, sl, c, PpmiSvdSettings())
    write_word2vec_format(emb, tmp_path / "v.txt")
    tests = {"tribune_mix": TESTS["tribune_mix"]}
    both = measure(demo_ws, tests, "ppmi-svd", [sl], vectors=read_word2vec_format(tmp_path / "v.txt"))
    ours, r = both.summary.iloc[0], both.summary.iloc[1]  # side by side in one table
    assert (ours.model, ours.slice) == ("ppmi-svd", "source=Tribune")
    assert r.model == "external" and r.slice == "external"
    assert r.effect_size == pytest.approx(ours.effect_size, abs=1e-4) and r.p_value == ours.p_value


def test_word2vec_seeds_report_a_spread(demo_ws):
    sl = slice_from_spec(demo_ws, "source=Gazette")
    r = measure(demo_ws, {"gazette_outlet": TESTS["gazette_outlet"]}, "word2vec", [sl], CountSettings(),
                Word2VecSettings(dim=30, epochs=3), MeasureSettings(seeds=3)).summary.iloc[0]
    assert r.seeds == 3 and r.effect_size_seed_sd >= 0 and r.effect_size > 0.8


def test_a_result_does_not_depend_on_the_other_tests_or_slices_measured_with_it(demo_ws):
    # each slice's bootstrap and each test's sampled permutations have their own random stream
    tests = TESTS
    gazette, herald = slice_from_spec(demo_ws, "source=Gazette"), slice_from_spec(demo_ws, "source=Herald")
    settings = MeasureSettings(bootstrap=3, exact_budget=10, permutations=200)  # p-values sampled, not exact
    svd = PpmiSvdSettings(dim=50)
    alone = measure(demo_ws, {"gazette_outlet": tests["gazette_outlet"]}, "ppmi-svd", [herald], model_settings=svd,
                    settings=settings).summary
    together = measure(demo_ws, {"control_groups": tests["control_groups"], "gazette_outlet": tests["gazette_outlet"]},
                       "ppmi-svd", [gazette, herald], model_settings=svd, settings=settings).summary
    cols = ["effect_size", "p_value", "ci_low", "ci_high", "gap_ci_low", "gap_ci_high"]
    a = alone.set_index(["test", "slice"]).loc[("gazette_outlet", "source=Herald"), cols]
    b = together.set_index(["test", "slice"]).loc[("gazette_outlet", "source=Herald"), cols]
    assert alone.loc[0, "p_method"] != "exact" and a.tolist() == b.tolist()


def test_intervals_are_the_replicates_standard_error_around_the_estimate(demo_result):
    """Gap: half-width t(n-1) * sd of the replicate gaps (scipy.stats.t), centred on the estimate. d:
    the delta method for gap / score_sd, written out here with numpy's covariance of the replicates."""
    s = demo_result.summary.set_index(["test", "slice"])
    reps = demo_result.replicates
    for (test, sl), g in reps.groupby(["test", "slice"]):
        r = s.loc[(test, sl)]
        half = stats.t.ppf(0.975, len(g) - 1) * g.gap.std(ddof=1)
        assert (r.gap_ci_low, r.gap_ci_high) == pytest.approx((r.gap - half, r.gap + half), rel=1e-9)
        # one model per replicate: each replicate's d is its gap over its score sd
        np.testing.assert_allclose(g.gap / g.score_sd, g.effect_size, rtol=1e-9)
        sd = r.gap / r.effect_size                                   # the full-data score sd
        grad = np.array([1 / sd, -r.gap / sd ** 2])                  # d(gap / sd) / d(gap, sd)
        half_d = stats.t.ppf(0.975, len(g) - 1) * np.sqrt(grad @ np.cov(g.gap, g.score_sd) @ grad)
        bound = (r.n_targets_x + r.n_targets_y) / np.sqrt(r.n_targets_x * r.n_targets_y)  # largest |d| possible
        assert (r.ci_low, r.ci_high) == pytest.approx((max(r.effect_size - half_d, -bound),
                                                       min(r.effect_size + half_d, bound)), rel=1e-9)
        assert r.replicate_shift == pytest.approx(g.gap.mean() - r.gap)


def test_q_values_cover_every_test_and_slice_of_the_call(demo_result):
    s = demo_result.summary
    ok = s.p_value.notna()
    # reference: scipy.stats.false_discovery_control, Benjamini-Hochberg
    np.testing.assert_allclose(s.q_value[ok], stats.false_discovery_control(s.p_value[ok], method="bh"))
    assert s.q_value[~ok].isna().all() and ok.sum() == 65


def test_slices_compare_the_words_known_in_every_slice(demo_ws):
    # at min count 41, "family" and "parents" are known in the Ledger but not in the Gazette
    # (occurrences on this archive, Ledger / Gazette: 68/36, 75/40; wedding 90/41 and relatives 76/42
    # stay, at or just above the count)
    t = AssociationTest("partly", ("harbour", "boat", "captain", "marriage", "wedding"),
                        ("wheat", "harvest", "family", "parents", "relatives"), ("joy",), ("agony",), ())
    slices = [slice_from_spec(demo_ws, "source=Ledger"), slice_from_spec(demo_ws, "source=Gazette")]
    counts, svd = CountSettings(min_count=41), PpmiSvdSettings(dim=50)
    common = measure(demo_ws, {"partly": t}, "ppmi-svd", slices, counts, svd).summary.set_index("slice")
    own = measure(demo_ws, {"partly": t}, "ppmi-svd", slices, counts, svd,
                  MeasureSettings(per_slice_words=True)).summary.set_index("slice")
    assert set(common.word_sets) == {"common"} and set(own.word_sets) == {"per slice"}
    assert (common.n_targets_x.tolist(), common.n_targets_y.tolist()) == ([5, 5], [3, 3])
    assert common.loc["source=Ledger", "not_in_every_slice"] == ["family", "parents"]
    assert common.loc["source=Gazette", "dropped_words"] == ["family", "parents"]
    assert (own.loc["source=Ledger", "n_targets_x"], own.loc["source=Ledger", "n_targets_y"]) == (5, 5)
    assert own.loc["source=Ledger", "effect_size"] != common.loc["source=Ledger", "effect_size"]
    assert own.loc["source=Gazette", "effect_size"] == pytest.approx(common.loc["source=Gazette", "effect_size"])
