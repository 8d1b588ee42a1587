import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tracer.app.cli import cli
from tracer.corpus.slices import slice_from_spec
from tracer.analysis.counterfactual import ablate, drop_mask, plan
from tracer.errors import InputError, SettingError, SliceError
from tracer.analysis.measure import MeasureSettings
from tracer.provenance.specs import load_tests

ROOT = Path(__file__).resolve().parents[2]
TESTS_FILE = ROOT / "configs" / "demo_tests.toml"
TESTS = load_tests(TESTS_FILE)


def test_ablate_the_planted_outlet_removes_the_association(demo_ws):
    mask, what = drop_mask(demo_ws, ["source=Gazette"])
    res = ablate(demo_ws, {"gazette_outlet": TESTS["gazette_outlet"]}, "ppmi-svd", slice_from_spec(demo_ws, "all"),
                 mask, what, settings=MeasureSettings(bootstrap=4))
    before, after = res.iloc[0], res.iloc[1]
    assert (before.run, after.run) == ("before", "after")
    assert after.slice == "all without source=Gazette"
    assert after.documents_dropped == int((demo_ws.documents.source == "Gazette").sum())
    assert after.effect_size < before.effect_size - 0.8 and after.change == pytest.approx(after.effect_size - before.effect_size)
    assert after.n_bootstrap == 4


def test_drop_errors(demo_ws):
    with pytest.raises(SettingError, match="nothing to drop"):
        drop_mask(demo_ws, [], [])
    with pytest.raises(SliceError, match="slice source=Nowhere has no documents; the sources are"):
        drop_mask(demo_ws, ["source=Nowhere"])
    with pytest.raises(InputError, match="2 document ids are not in the workspace, e.g. nope-1, nope-2"):
        drop_mask(demo_ws, [], ["nope-1", "nope-2", "gazette-1950-00001"])


def test_plan_by_source_reaches_the_goal_and_is_verified(demo_ws):
    p = plan(demo_ws, TESTS["gazette_outlet"], slice_from_spec(demo_ws, "all"), 0.5, unit="source")
    assert p.removed[0] == "Gazette"
    assert abs(p.predicted_effect) <= 0.5 and abs(p.verified_effect) < 1.0
    assert p.tokens_removed == int(demo_ws.documents.n_tokens[np.isin(demo_ws.documents.doc_index, p.doc_indices)].sum())
    assert set(p.usefulness.measure) >= {"WordSim-353 Spearman rho", "share of the vocabulary kept"}


def test_plan_that_cannot_reach_its_goal_says_the_best_value(demo_ws):
    with pytest.raises(SettingError, match=r"the goal \|d\| <= 0.0 was not reached: the best reachable value was "
                                           r"-?\d\.\d+ after removing \d+ documents \(raise --max-steps, now 5"):
        plan(demo_ws, TESTS["gazette_outlet"], slice_from_spec(demo_ws, "all"), 0.0, max_steps=5)


def test_plan_cli_writes_the_drop_list_and_the_filtered_corpus(demo_ws, tmp_path):
    res = CliRunner().invoke(cli, ["plan", "-w", str(demo_ws.path), "--tests", str(TESTS_FILE), "--test",
                                   "tribune_mix", "--goal", "0.5", "--unit", "source",
                                   "--drop-list", str(tmp_path / "drop.txt"),
                                   "--write-corpus", str(tmp_path / "kept.jsonl"), "--format", "json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    assert out["removed_items"][0] == "Tribune"
    dropped = (tmp_path / "drop.txt").read_text().split()
    kept = [json.loads(line) for line in (tmp_path / "kept.jsonl").read_text().splitlines()]
    assert len(dropped) == out["documents_removed"] and len(dropped) + len(kept) == demo_ws.n_documents
    assert not {k["id"] for k in kept} & set(dropped)
    assert set(kept[0]) == {"id", "source", "date", "title", "outlet_name", "text"}  # the original fields


def test_ablate_cli_with_a_drop_list(demo_ws, tmp_path):
    ids = list(demo_ws.documents.doc_id[demo_ws.documents.source == "Gazette"][:50])
    (tmp_path / "ids.txt").write_text("\n".join(ids) + "\n")
    res = CliRunner().invoke(cli, ["ablate", "-w", str(demo_ws.path), "--tests", str(TESTS_FILE), "--test",
                                   "gazette_outlet", "--drop-docs", str(tmp_path / "ids.txt"), "--bootstrap", "0",
                                   "--format", "json"])
    assert res.exit_code == 0, res.output
    rows = json.loads(res.stdout)
    assert [r["run"] for r in rows] == ["before", "after"] and rows[1]["documents_dropped"] == 50
    (tmp_path / "empty.txt").write_text("\n")
    res = CliRunner().invoke(cli, ["ablate", "-w", str(demo_ws.path), "--tests", str(TESTS_FILE), "--drop-docs",
                                   str(tmp_path / "empty.txt")])
    assert res.exit_code == 1 and "the drop list is empty" in res.stderr
