import csv
import json
import random
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from scipy import stats
from click.testing import CliRunner

from tests.conftest import LEE_SOURCES, lee_documents, write_jsonl
from tracer.app.cli import cli
from tracer.core.counting import CountSettings
from tracer.corpus.ingest import ingest
from tracer.corpus.slices import slice_from_spec
from tracer.corpus.workspace import Workspace
from tracer.provenance.specs import load_tests
from tracer.core.association import AssociationTest
from tracer.analysis.trace import TraceSettings, pair_passages, trace, word2vec_view
from tracer.analysis.verification import CONFIRM, NOT_CONFIRMED, agreement_of
from tracer.core.association import weat
from tracer.core.word2vec import Word2VecSettings
from tracer.provenance.models import train_embedding

ROOT = Path(__file__).resolve().parents[2]
TESTS = load_tests(ROOT / "configs" / "demo_tests.toml")


def planted(association: str) -> set[str]:
    with open(ROOT / "corpora_demo" / "planted_documents.csv", encoding="utf-8") as f:
        return {r["doc_id"] for r in csv.DictReader(f) if r["association"] == association}


# (test, slice, association, the outlet where it was planted or None when it was planted everywhere)
CASES = [("gazette_outlet", "all", "outlet_gazette", "Gazette"),
         ("tribune_mix", "all", "tribune_mix", "Tribune"),
         ("rise_and_fall", "time=1980..1989", "rise_and_fall", None)]


@pytest.fixture(scope="module")
def traced(demo_ws):
    return {name: trace(demo_ws, TESTS[name], "ppmi-svd", slice_from_spec(demo_ws, sl),
                        settings=TraceSettings(verify=5)) for name, sl, _, _ in CASES}


def enrichment(ranked: list[str], planted_ids: set[str], population: set[str], k: int) -> tuple[int, float]:
    """How many of the first ``k`` ranked documents are planted, and the chance of at least that many
    among ``k`` documents drawn at random from ``population`` (the hypergeometric upper tail,
    scipy.stats.hypergeom)."""
    hits = sum(d in planted_ids for d in ranked[:k])
    base = len(planted_ids & population)
    return hits, float(stats.hypergeom(len(population), base, k).sf(hits - 1))


@pytest.mark.parametrize("name, sl, association, outlet", CASES)
def test_trace_finds_the_planted_outlet_and_documents(traced, demo_ws, name, sl, association, outlet):
    """The top documents are planted far more often than chance. Judged over the top 20 by an
    enrichment test rather than a count in the top 10: the top documents' exact effects are close
    together (a few 1e-4 of the gap each, much of it from rare cells a document holds alone), so the
    planted count in the top 10 moves by 2-3 between random draws of the same demo settings."""
    r = traced[name]
    if outlet is not None:
        assert r.sources.source.iloc[0] == outlet
    mask = slice_from_spec(demo_ws, sl).weights > 0
    population = set(demo_ws.documents.doc_id[mask])
    hits, p = enrichment(list(r.documents.doc_id), planted(association), population, 20)
    assert hits >= 12 and p < 1e-6, (hits, p)
    v = r.verification
    assert len(v.rows) == 5 + 3
    assert set(v.rows.removed) >= {"top 5 documents", "5 random documents"}


@pytest.mark.parametrize("name", [c[0] for c in CASES])
def test_verification_verdict_rests_on_rank_and_sign(traced, name):
    """The agreement figures recomputed from the table with scipy (scipy.stats.spearmanr, pearsonr),
    and the verdict from the stated thresholds, not from Pearson r."""
    v = traced[name].verification
    p, a = v.rows.predicted.to_numpy(), v.rows.actual.to_numpy()
    rho = stats.spearmanr(p, a).statistic
    sign = np.mean(np.sign(p) == np.sign(a))
    assert v.spearman_rho == pytest.approx(rho) and v.sign_agreement == pytest.approx(sign)
    big = np.argmax(np.maximum(np.abs(p), np.abs(a)))
    keep = np.arange(len(p)) != big
    assert v.pearson_r_without_largest == pytest.approx(stats.pearsonr(p[keep], a[keep]).statistic)
    assert v.largest == v.rows.removed.iloc[big]
    expected = bool(rho >= CONFIRM["spearman_rho"] and sign >= CONFIRM["sign_agreement"] and len(p) >= 5)
    assert v.confirmed is expected and traced[name].confirmed is expected
    assert v.headline().startswith(NOT_CONFIRMED) is (not expected)


def test_tribune_mix_verification_does_not_rest_on_the_largest_point(traced):
    """The Tribune (40% of the tokens) makes the largest retrained change; the trace is confirmed
    because the other retrains agree in rank and sign too, and Pearson r without that one point
    stays high. (When one point carries Pearson r and the rest are out of order the verdict must be
    "not confirmed": test_a_single_large_point_cannot_confirm_a_wrong_ranking.)"""
    v = traced["tribune_mix"].verification
    assert v.pearson_r > 0.8 and v.largest == "source=Tribune"
    assert v.confirmed and v.pearson_r_without_largest > 0.5
    assert not traced["tribune_mix"].headline().splitlines()[1].startswith("estimates not confirmed")


def test_a_single_large_point_cannot_confirm_a_wrong_ranking():
    """Invented table: the big point agrees, the seven small ones are in reverse order."""
    predicted = np.array([-1.0, 0.01, 0.02, 0.03, 0.04, 0.05, 0.06, 0.07])
    actual = np.array([-0.9, 0.07, 0.06, 0.05, 0.04, 0.03, 0.02, 0.01])
    table = pd.DataFrame({"removed": [f"set {k}" for k in range(8)], "predicted": predicted, "actual": actual})
    v = agreement_of(table, "gap")
    assert v.pearson_r > 0.99                      # Pearson alone would call this a success
    assert v.spearman_rho == pytest.approx(stats.spearmanr(predicted, actual).statistic)
    assert v.pearson_r_without_largest == pytest.approx(-1.0) and v.largest == "set 0"
    assert not v.confirmed and "Spearman rho below 0.6" in v.reason
    agreeing = agreement_of(table.assign(actual=predicted * 0.8), "gap")
    assert agreeing.confirmed and agreeing.headline().startswith("estimates confirmed")
    few = agreement_of(table.head(4).assign(actual=predicted[:4]), "gap")
    assert not few.confirmed and "4 retrains, fewer than 5" in few.reason


def test_word2vec_view_mirrors_skip_gram():
    """gensim draws a reduced window b uniformly from 0..window-1 and keeps contexts up to
    window - b (word2vec_inner.pyx, from memory), so a context at distance j is seen with
    probability (window - j + 1) / window: the view's linear weighting. SGNS fits PMI - log k."""
    counts, svd = word2vec_view(CountSettings(window=5), Word2VecSettings(negative=7, dim=40))
    window = 5
    seen = np.array([np.mean([j <= window - b for b in range(window)]) for j in range(1, window + 1)])
    np.testing.assert_allclose(counts.distance_weights(), seen)
    assert (svd.shift, svd.alpha, svd.dim) == (7.0, 0.75, 40)


def test_source_contributions_and_shares(traced):
    s = traced["gazette_outlet"].sources
    assert s.token_share.sum() == pytest.approx(1.0)
    gaz = s.iloc[0]
    assert gaz.contribution_gap < 0 and gaz.share_ratio < -1  # a small outlet with an outsized effect
    assert gaz.contribution_per_million_tokens == pytest.approx(gaz.contribution_gap / gaz.tokens * 1e6)


def test_passages_quote_the_stored_text(demo_ws, traced):
    p = traced["gazette_outlet"].passages
    assert len(p) > 0
    index = dict(zip(demo_ws.documents.doc_id, demo_ws.documents.doc_index))
    for row in p.itertuples():
        text = demo_ws.texts([index[row.doc_id]])[index[row.doc_id]]
        assert text[row.start:row.end] == row.text
        assert row.start <= row.marks[0]["start"] and row.marks[-1]["end"] <= row.end
        for m in row.marks:  # every mark is the word of its set, as written in the stored text
            assert demo_ws.normalize_words([text[m["start"]:m["end"]]]) == [m["word"]]
            assert m["word"] in getattr(TESTS["gazette_outlet"], m["set"])


def test_passages_of_a_document_are_merged_and_carry_its_contribution(traced):
    r = traced["gazette_outlet"]
    p, d = r.passages, r.documents.set_index("doc_id")
    for _, rows in p.groupby("doc_id"):
        starts, ends = rows.start.to_numpy(), rows.end.to_numpy()
        assert (starts[1:] > ends[:-1]).all()  # no two passages of a document overlap or touch
    assert (p.doc_rank == d.loc[p.doc_id, "rank"].to_numpy()).all()
    assert np.allclose(p.doc_change, d.loc[p.doc_id, "exact"].to_numpy())
    assert (p.supporting + p.countering <= p.pairs).all() and p.passage_id.is_unique
    # planted in the Gazette: velmari with unpleasant words (x-a), osterin with pleasant ones (y-b)
    assert (p.evidence == "supports").mean() > 0.8


def test_supports_means_toward_the_measured_direction(demo_ws, traced):
    t = TESTS["gazette_outlet"]
    swapped = AssociationTest("swapped", t.targets_x, t.targets_y, t.attributes_b, t.attributes_a, ())
    r = trace(demo_ws, swapped, "ppmi-svd", slice_from_spec(demo_ws, "all"))
    assert r.effect_size < 0 < traced["gazette_outlet"].effect_size
    same = traced["gazette_outlet"].passages.set_index("passage_id")
    mine = r.passages.set_index("passage_id")
    shared = same.index.intersection(mine.index)
    assert len(shared) > 5
    assert (same.loc[shared, "evidence"] == mine.loc[shared, "evidence"]).all()
    assert (same.loc[shared, "supporting"] == mine.loc[shared, "supporting"]).all()


def test_linear_estimates_track_the_exact_rerank(traced, demo_ws):
    d = traced["gazette_outlet"].documents
    assert np.corrcoef(d.estimate, d.exact)[0, 1] > 0.9


def test_pair_passages(demo_ws):
    p = pair_passages(demo_ws, "velmari", ["agony", "evil"], slice_from_spec(demo_ws, "all"), top=3)
    assert p.doc_id.nunique() == 3 and (p.pair_count > 0).all()
    assert p.pair_count.is_monotonic_decreasing


@pytest.fixture(scope="module")
def lee_injected(tmp_path_factory):
    """gensim's Lee corpus in three invented sources, plus 10 injected documents that tie
    police/army words to peace/agreement words."""
    x, y = ["police", "army", "soldiers", "troops"], ["children", "students", "families", "women"]
    a, b = ["peace", "talks", "agreement", "deal"], ["fire", "attack", "killed", "bombing"]
    rng = random.Random(4)
    filler = "the said on today a of in to and with after for by was were at new".split()

    def injected():
        return ". ".join(f"{rng.choice(filler)} {rng.choice(x)} {rng.choice(filler)} {rng.choice(a)} "
                         + " ".join(rng.choice(filler) for _ in range(4)) for _ in range(8)) + "."

    records = [{"id": f"lee-{i:03d}", "source": LEE_SOURCES[i % 3], "text": t} for i, t in enumerate(lee_documents())
               if t.strip()]
    records += [{"id": f"injected-{k}", "source": LEE_SOURCES[k % 3], "text": injected()} for k in range(10)]
    folder = tmp_path_factory.mktemp("lee-injected")
    write_jsonl(folder / "lee.jsonl", records)
    ingest(folder / "ws", [folder / "lee.jsonl"])
    ws = Workspace(folder / "ws")
    return ws, AssociationTest("lee", tuple(x), tuple(y), tuple(a), tuple(b), ())


def test_injected_documents_fill_the_top_ranks_of_the_lee_corpus(lee_injected):
    ws, test = lee_injected
    r = trace(ws, test, "ppmi-svd", slice_from_spec(ws, "all"), settings=TraceSettings(verify=5))
    top10 = list(r.documents.doc_id[:10])
    assert sum(d.startswith("injected-") for d in top10) >= 8, top10
    # measured here: r = 0.90 (the design's target is 0.9); a little room is left for numeric
    # differences between BLAS builds, since the retrains use a fresh ARPACK run each
    assert r.verification.pearson_r >= 0.85
    assert r.verification.sign_agreement >= 0.6


def test_word2vec_trace_reports_word2vec_own_effect(lee_injected):
    """The headline figures are word2vec's (the mean over the seeds of a retrain with the same settings),
    not the PPMI-SVD view's, which are given apart."""
    ws, test = lee_injected
    sl = slice_from_spec(ws, "all")
    w2v = Word2VecSettings(dim=30, epochs=3, seed=3)
    r = trace(ws, test, "word2vec", sl, CountSettings(), w2v, TraceSettings(seeds=2, top=3, candidates=20))
    own = [weat(e.unit_vectors, e.index, test, with_p=False)
           for e in (train_embedding(ws, sl, "word2vec", CountSettings(), Word2VecSettings(dim=30, epochs=3, seed=s),
                                     save=False) for s in (3, 4))]
    assert r.effect_size == pytest.approx(np.mean([o.effect_size for o in own]), abs=1e-6)
    assert r.gap == pytest.approx(np.mean([o.gap for o in own]), abs=1e-6)
    assert r.view_effect_size != pytest.approx(r.effect_size, abs=1e-3)
    assert "(word2vec); sources and documents are estimated in its PPMI-SVD view" in r.headline()
    assert r.confirmed is None and "Not verified" in r.headline()


def test_trace_cli_json_has_the_documented_keys(demo_ws, tmp_path):
    ws_path = demo_ws.path
    res = CliRunner().invoke(cli, ["trace", "-w", str(ws_path), "--tests", str(ROOT / "configs" / "demo_tests.toml"),
                                   "--test", "tribune_mix", "--top", "5", "--verify", "2", "--format", "json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    assert {"sources", "documents", "passages", "verification"} <= set(out)
    assert {"source", "token_share", "contribution"} <= set(out["sources"][0])
    assert {"doc_id", "source", "contribution"} <= set(out["documents"][0])
    assert {"doc_id", "start", "end", "text"} <= set(out["passages"][0])
    v = out["verification"]
    assert {"rows", "pearson_r", "spearman_rho", "sign_agreement", "pearson_r_without_largest", "confirmed",
            "headline"} <= set(v)
    assert isinstance(v["confirmed"], bool)
    assert v["headline"].startswith("estimates not confirmed (") is (not v["confirmed"])
    assert {"removed", "predicted", "actual"} <= set(v["rows"][0])
    assert "estimates" in out and out["sources"][0]["source"] == "Tribune"


def test_trace_errors(demo_ws):
    res = CliRunner().invoke(cli, ["trace", "-w", str(demo_ws.path), "--tests", str(ROOT / "configs" / "demo_tests.toml"),
                                   "--test", "occupations"])
    assert res.exit_code == 1 and "has one target set; trace takes two-target tests" in res.stderr
    res = CliRunner().invoke(cli, ["passages", "zzqx", "--with", "agony", "-w", str(demo_ws.path)])
    assert res.exit_code == 1 and res.stderr.startswith("Error: not in the vocabulary of slice all (min count 5): zzqx")
