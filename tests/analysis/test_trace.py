import csv
import json
import random
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tests.conftest import LEE_SOURCES, lee_documents, write_jsonl
from tracer.app.cli import cli
from tracer.corpus.ingest import ingest
from tracer.corpus.slices import slice_from_spec
from tracer.corpus.workspace import Workspace
from tracer.provenance.specs import load_tests
from tracer.core.association import AssociationTest
from tracer.analysis.trace import TraceSettings, pair_passages, trace

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
    # target of the design: predicted versus retrained change, Pearson r >= 0.9 for PPMI-SVD
    assert v.pearson_r >= 0.9 and len(v.rows) == 5 + 3
    assert set(v.rows.removed) >= {"top 5 documents", "5 random documents"}


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
    assert {"rows", "pearson_r", "spearman_rho", "sign_agreement"} <= set(v)
    assert {"removed", "predicted", "actual"} <= set(v["rows"][0])
    assert "estimates" in out and out["sources"][0]["source"] == "Tribune"


def test_trace_errors(demo_ws):
    res = CliRunner().invoke(cli, ["trace", "-w", str(demo_ws.path), "--tests", str(ROOT / "configs" / "demo_tests.toml"),
                                   "--test", "occupations"])
    assert res.exit_code == 1 and "has one target set; trace takes two-target tests" in res.stderr
    res = CliRunner().invoke(cli, ["passages", "zzqx", "--with", "agony", "-w", str(demo_ws.path)])
    assert res.exit_code == 1 and res.stderr.startswith("Error: not in the vocabulary of slice all (min count 5): zzqx")
