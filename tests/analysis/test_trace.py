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
from tracer.provenance.counts import count_slice
from tracer.corpus.ingest import ingest
from tracer.corpus.slices import slice_from_spec
from tracer.corpus.workspace import Workspace
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import embedding_from_counts
from tracer.analysis import influence as attribute
from tracer.analysis.influence import Attribution
from tracer.core.pmi import Marginals
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


@pytest.mark.parametrize("name, sl, association, outlet", CASES)
def test_trace_finds_the_planted_outlet_and_documents(traced, name, sl, association, outlet):
    r = traced[name]
    if outlet is not None:
        assert r.sources.source.iloc[0] == outlet
    top10 = list(r.documents.doc_id[:10])
    assert sum(d in planted(association) for d in top10) >= 8, top10
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


def test_tribune_mix_verification_is_not_confirmed_although_pearson_is_high(traced):
    """The reproduction: one large source (the Tribune) carries Pearson r while the others are out of
    order, so the trace must say its estimates are not confirmed."""
    v = traced["tribune_mix"].verification
    assert v.pearson_r > 0.9 and v.largest == "source=Tribune"
    assert not v.confirmed and v.pearson_r_without_largest < 0.5
    assert traced["tribune_mix"].headline().splitlines()[1].startswith("estimates not confirmed")


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
    for row in p.head(10).itertuples():
        text = demo_ws.texts([index[row.doc_id]])[index[row.doc_id]]
        assert text[row.start:row.end] == row.text
        assert row.marked.lower().count("[[") == 2
        assert f"[[{row.target}]]" in row.marked.lower() and f"[[{row.attribute}]]" in row.marked.lower()


def test_first_order_values_equal_a_recount_without_the_document(demo_ws):
    """Exact leave-one-out PMI against a brute-force recount with the document's weight set to 0."""
    sl = slice_from_spec(demo_ws, "source=Gazette")
    s = CountSettings()
    c = count_slice(demo_ws, sl.weights, s)
    emb = embedding_from_counts(demo_ws, sl, c, PpmiSvdSettings())
    attr = Attribution(demo_ws, sl.weights, c, emb, TESTS["gazette_outlet"], alpha=0.75, shift=1, eig_power=0.5)
    full, loo = attr.leave_one_out_pmi("velmari", "agony")
    # documents chosen from the text, not from loo: a leave-one-out that leaves nothing out must fail
    i_v, i_a = demo_ws.vocab.index["velmari"], demo_ws.vocab.index["agony"]
    both = [d for d in np.flatnonzero(sl.weights > 0)[:300]
            if {i_v, i_a} <= set(demo_ws.document_tokens(int(d)).tolist())]
    assert len(both) >= 4
    for d in both[:4]:
        w = sl.weights.copy()
        w[d] = 0
        rc = count_slice(demo_ws, w, s, vocab=c.vocab)
        m = Marginals.of(rc.matrix, 0.75)
        i, j = c.vocab.index["velmari"], c.vocab.index["agony"]
        expected = np.log(rc.matrix[i, j]) - np.log(m.rows[i]) - 0.75 * np.log(m.cols[j]) + m.log_z
        assert loo[d] == pytest.approx(expected, rel=1e-10) and expected != pytest.approx(full, rel=1e-6)


@pytest.mark.parametrize("weighting", ["uniform", "harmonic"])
def test_one_pass_linear_score_equals_the_per_document_matrices(demo_ws, weighting, monkeypatch):
    """The fused one-pass score against -<K, C^d> + <u, r^d> written out with the per-document
    matrices (C^d of the probe rows, r^d), on resampling-style weights 0, 1, 2."""
    rng = np.random.default_rng(3)
    w = rng.integers(0, 3, demo_ws.n_documents).astype(float)
    s = CountSettings(weighting=weighting)
    c = count_slice(demo_ws, w, s)
    sl = slice_from_spec(demo_ws, "all")
    emb = embedding_from_counts(demo_ws, sl, c, PpmiSvdSettings())
    attr = Attribution(demo_ws, w, c, emb, TESTS["gazette_outlet"], alpha=0.75, shift=1, eig_power=0.5)
    for which in ("gap", "effect_size"):
        g = attr._dB_dM(which)
        act = sp.coo_array(attr.M_P)
        gv = g[act.row, act.col]
        expected = np.zeros(demo_ws.n_documents)
        for i in range(len(attr.probe_ids)):
            K_i = np.zeros(len(attr.r))
            sel = act.row == i
            K_i[act.col[sel]] = gv[sel] / attr.C_P[i, act.col[sel]]
            expected -= attr.P[i * demo_ws.n_documents:(i + 1) * demo_ws.n_documents] @ K_i
        u = np.zeros(len(attr.r))
        np.add.at(u, attr.probe_ids[act.row], gv / attr.r[attr.probe_ids[act.row]])
        np.add.at(u, act.col, 0.75 * gv / attr.r[act.col])
        u -= 0.75 * gv.sum() * attr.r ** -0.25 / np.exp(attr.log_z)
        expected += attr.R @ u
        got = attr.linear(which)
        assert np.count_nonzero(expected) > 100 and np.all(got[w == 0] == 0)
        np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12 * np.abs(expected).max())
        with monkeypatch.context() as m:  # the pass split over three threads gives the same numbers
            m.setattr(attribute, "LINEAR_THREADS_FROM", 0)
            m.setattr(attribute, "default_workers", lambda: 3)
            np.testing.assert_array_equal(attr.linear(which), got)


def test_batched_exact_rerank_equals_one_document_at_a_time(demo_ws):
    sl = slice_from_spec(demo_ws, "all")
    c = count_slice(demo_ws, sl.weights, CountSettings())
    emb = embedding_from_counts(demo_ws, sl, c, PpmiSvdSettings())
    attr = Attribution(demo_ws, sl.weights, c, emb, TESTS["gazette_outlet"], alpha=0.75, shift=1, eig_power=0.5)
    docs = np.argsort(-np.abs(attr.linear("gap")))[:7]
    one = [attr.exact([d]) for d in docs]
    for max_cells in (1, 4_000_000):  # one document per batch, and all in one
        each = attr.exact_each(docs, max_cells=max_cells)
        np.testing.assert_allclose([e.gap for e in each], [e.gap for e in one], rtol=1e-10)
        np.testing.assert_allclose([e.effect_size for e in each], [e.effect_size for e in one], rtol=1e-10)
    assert max(abs(e.gap - attr.base.gap) for e in one) > 1e-3  # the removals do move the gap


@pytest.mark.parametrize("which", ["gap", "effect_size"])
def test_gradient_matches_central_differences(demo_ws, which):
    # checking an analytic derivative against central differences is common practice
    sl = slice_from_spec(demo_ws, "source=Gazette")
    c = count_slice(demo_ws, sl.weights, CountSettings())
    emb = embedding_from_counts(demo_ws, sl, c, PpmiSvdSettings())
    attr = Attribution(demo_ws, sl.weights, c, emb, TESTS["gazette_outlet"], alpha=0.75, shift=1, eig_power=0.5)
    G = attr.gradient(which)
    rng = np.random.default_rng(5)
    for _ in range(6):
        D = rng.standard_normal(attr.W_P.shape)
        h = 1e-6 * np.linalg.norm(attr.W_P) / np.linalg.norm(D)
        up, down = attr.effect(attr.W_P + h * D), attr.effect(attr.W_P - h * D)
        numeric = (getattr(up, which) - getattr(down, which)) / (2 * h)
        assert np.sum(G * D) == pytest.approx(numeric, rel=1e-5, abs=1e-9)


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
    assert v["confirmed"] is False and v["headline"].startswith("estimates not confirmed (")
    assert {"removed", "predicted", "actual"} <= set(v["rows"][0])
    assert "estimates" in out and out["sources"][0]["source"] == "Tribune"


def test_trace_errors(demo_ws):
    res = CliRunner().invoke(cli, ["trace", "-w", str(demo_ws.path), "--tests", str(ROOT / "configs" / "demo_tests.toml"),
                                   "--test", "occupations"])
    assert res.exit_code == 1 and "has one target set; trace takes two-target tests" in res.stderr
    res = CliRunner().invoke(cli, ["passages", "zzqx", "--with", "agony", "-w", str(demo_ws.path)])
    assert res.exit_code == 1 and res.stderr.startswith("Error: not in the vocabulary of slice all (min count 5): zzqx")
