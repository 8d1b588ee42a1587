import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from tests.conftest import DEMO_CORPUS
from tracer.app.cli import cli

ROOT = Path(__file__).resolve().parents[2]
TESTS = ROOT / "configs" / "demo_tests.toml"


def run(*args):
    res = CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    return res


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("m") / "ws"
    run("ingest", DEMO_CORPUS, "-w", d)
    return d


def test_measure_json_has_the_documented_keys(demo_dir):
    out = json.loads(run("measure", "-w", demo_dir, "--tests", TESTS, "--test", "gazette_outlet", "--test",
                         "occupations", "--slice", "source=Gazette", "--bootstrap", "3", "--format", "json").stdout)
    assert len(out) == 2
    keys = {"test", "model", "slice", "effect_size", "p_value", "ci_low", "ci_high", "n_targets_x", "n_targets_y",
            "n_attributes_a", "n_attributes_b", "dropped_words"}
    assert keys <= set(out[0])
    g = out[0]
    assert (g["test"], g["model"], g["slice"], g["n_bootstrap"]) == ("gazette_outlet", "ppmi-svd", "source=Gazette", 3)
    assert g["effect_size"] > 0.8 and g["p_value"] < 0.01 and g["dropped_words"] == []
    assert g["std_convention"].startswith("population standard deviation")
    assert out[1]["effect_size"] is None and out[1]["n_targets_y"] is None


def test_measure_table_states_conventions_and_cautions(demo_dir):
    out = run("measure", "-w", demo_dir, "--tests", TESTS, "--test", "control_groups", "--slice", "all",
              "--bootstrap", "2").stdout
    assert max(len(line) for line in out.splitlines()) <= 100
    text = " ".join(out.split())  # the legend is wrapped to the terminal
    assert "population standard deviation (n)" in text and "one-sided permutation" in text
    assert "2 document-bootstrap replicates" in text and "0.2 small, 0.5 medium, 0.8 large" in text
    assert "not proof of discrimination" in text


def test_measure_per_word_and_leave_one_out_tables(demo_dir):
    words = json.loads(run("measure", "-w", demo_dir, "--tests", TESTS, "--test", "occupations", "--slice", "all",
                           "--show", "words", "--format", "json").stdout)
    assert len(words) == 12 and {"word", "score", "ripa", "log_odds_ratio", "lor_ci_low", "lor_ci_high"} <= set(words[0])
    loo = run("measure", "-w", demo_dir, "--tests", TESTS, "--test", "tribune_mix", "--slice", "source=Tribune",
              "--show", "leave-one-out", "--bootstrap", "0", "--format", "csv").stdout.splitlines()
    assert loo[0] == "test,model,slice,left_out,set,effect_size,change" and len(loo) == 1 + 28


def test_measure_errors(demo_dir, tmp_path):
    res = CliRunner().invoke(cli, ["measure", "-w", str(demo_dir), "--tests", str(TESTS), "--test", "nope"])
    assert res.exit_code == 1 and res.stderr.startswith(f"Error: {TESTS}: no test named 'nope'; the tests are gazette_outlet")
    bad = tmp_path / "bad.toml"
    bad.write_text("[tests.t]\ntargets_x = [1]\n", encoding="utf-8")
    res = CliRunner().invoke(cli, ["measure", "-w", str(demo_dir), "--tests", str(bad)])
    assert res.exit_code == 1 and res.stderr.startswith(f"Error: {bad}: test 't': missing attributes_a")


def test_correlate_on_the_invented_occupation_table(demo_dir, tmp_path):
    out = json.loads(run("correlate", "-w", demo_dir, "--tests", TESTS, "--test", "occupations", "--table",
                         ROOT / "corpora_demo" / "occupation_shares.csv", "--word-column", "occupation",
                         "--value-column", "share_women", "--slice", "all", "--resamples", "200",
                         "--plot", tmp_path / "s.png", "--format", "json").stdout)
    views = {r["view"]: r for r in out}
    assert set(views) == {"embedding", "pmi"}
    pmi = views["pmi"]
    # planted: "she" follows the invented share of women, so the first-order view tracks it closely
    assert pmi["n_words"] == 12 and pmi["spearman_rho"] > 0.9 and pmi["pearson_ci_low"] > 0.5
    assert pmi["pearson_ci_low"] <= pmi["pearson_r"] <= pmi["pearson_ci_high"]
    # and the default model (PPMI-SVD, dim 100) recovers it too: each pronoun comes with its
    # possessive and reflexive, contexts an occupation shares with the pronoun it is written with
    emb = views["embedding"]
    assert emb["model"] == "ppmi-svd" and emb["n_words"] == 12
    assert emb["pearson_r"] > 0.8 and emb["pearson_ci_low"] > 0.5 and emb["spearman_rho"] > 0.8
    assert (tmp_path / "s.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    res = CliRunner().invoke(cli, ["correlate", "-w", str(demo_dir), "--tests", str(TESTS), "--test", "occupations",
                                   "--table", str(ROOT / "corpora_demo" / "occupation_shares.csv"),
                                   "--value-column", "share_women"])
    assert res.exit_code == 1 and "no column 'word'" in res.stderr


def test_correlate_normalises_table_words_by_the_workspaces_case_rule(tmp_path):
    # an invented corpus in Turkish spelling, ingested under the Turkish case rule: the table's
    # upper-case "KIZ" must become the corpus's "kız" (I -> dotless ı), which plain case folding
    # ("kiz") would miss
    import numpy as np
    from tests.conftest import write_jsonl
    rng = np.random.default_rng(5)
    vocab = ["kız", "ışık", "ılık", "sıcak", "anne", "baba", "yol", "ev", "su", "kar"]
    records = [{"id": f"t{i}", "source": "Kuzey", "text": " ".join(rng.choice(vocab, 40))} for i in range(60)]
    write_jsonl(tmp_path / "t.jsonl", records)
    run("ingest", tmp_path / "t.jsonl", "-w", tmp_path / "ws", "--case-rule", "turkish")
    (tmp_path / "tests.toml").write_text('[tests.sicak]\ntargets_x = ["kız", "ışık", "ılık", "sıcak"]\n'
                                         'attributes_a = ["anne"]\nattributes_b = ["baba"]\n', encoding="utf-8")
    (tmp_path / "table.csv").write_text("word,value\nKIZ,1\nIŞIK,2\nILIK,3\nSICAK,4\n", encoding="utf-8")
    out = json.loads(run("correlate", "-w", tmp_path / "ws", "--tests", tmp_path / "tests.toml", "--test", "sicak",
                         "--table", tmp_path / "table.csv", "--value-column", "value", "--dim", "4",
                         "--resamples", "0", "--format", "json").stdout)
    assert [(r["n_words"], r["words_missing"]) for r in out] == [(4, []), (4, [])]
