"""Words typed by a user meet the corpus under the workspace's one normalisation rule.

German (ß, ä), Turkish (İ/ı), French typed in NFD and right-to-left scripts (Arabic, Hebrew),
through the library entries (pmi_table, pair_passages, word_drift, measure) and one command each.
"""

import json
import unicodedata

import pytest
from click.testing import CliRunner

from tests.conftest import lee_documents, write_jsonl
from tracer.analysis.drift import word_drift
from tracer.analysis.measure import MeasureSettings, measure
from tracer.analysis.pmi_table import pmi_table
from tracer.analysis.trace import pair_passages
from tracer.app.cli import cli
from tracer.core.counting import CountSettings
from tracer.corpus.ingest import ingest
from tracer.corpus.slices import slice_from_spec, slices_by
from tracer.corpus.tokenize import TokenizerSettings
from tracer.corpus.workspace import Workspace
from tracer.errors import InputError
from tracer.provenance.specs import load_tests, normalized_test

PHRASES = [
    "Das Mädchen geht über die Straße zur Schule.",
    "Les élèves du lycée boivent un café.",
    "İstanbul ve KIZ kulesi, kız ve ISPARTA.",
    "الطالب في مدرسة يقرأ كتاب جديد.",
    "שלום לך ספר חדש.",
    "They don’t stop; it’s well‐known.",
]


def _corpus(folder):
    records = []
    for i, text in enumerate(t for t in lee_documents() if t.strip()):
        if i % 3 == 0:
            text = text + " " + " ".join(PHRASES)
        records.append({"id": f"d{i}", "time": 1990 + i % 20, "text": text})
    return write_jsonl(folder / "multi.jsonl", records)


@pytest.fixture(scope="module")
def multi(tmp_path_factory):
    folder = tmp_path_factory.mktemp("words")
    path = _corpus(folder)
    ingest(folder / "fold", [path])
    ingest(folder / "turkish", [path], tokenizer=TokenizerSettings(case_rule="turkish"))
    return folder


def nfd(word):
    out = unicodedata.normalize("NFD", word)
    assert out != word or word.isascii() or not any(unicodedata.decomposition(c) for c in word)
    return out


def test_german_words_as_typed_find_the_corpus_words(multi):
    ws = Workspace(multi / "fold")
    assert "strasse" in ws.vocab.index and "straße" not in ws.vocab.index  # case folding: ß -> ss
    df = pmi_table(ws, "Mädchen", ["Straße", nfd("ÜBER")], [slice_from_spec(ws, "all")])
    assert list(df["word"]) == ["mädchen", "mädchen"] and list(df["context"]) == ["strasse", "über"]
    assert (df["count"] > 0).all()
    out = json.loads(_run("pmi", "-w", multi / "fold", "Mädchen", "--with", "Straße", "--format", "json").stdout)
    assert out[0]["context"] == "strasse" and out[0]["count"] > 0


def test_turkish_rule_and_passages(multi):
    fold, tr = Workspace(multi / "fold"), Workspace(multi / "turkish")
    assert tr.manifest["tokenizer"]["case_rule"] == "turkish"
    # Turkish: KIZ and kız are one word, ISPARTA is ısparta; folding: kiz and kız differ
    assert {"kız", "istanbul", "ısparta"} <= set(tr.vocab.index) and "kiz" not in tr.vocab.index
    assert {"kiz", "kız", "istanbul", "isparta"} <= set(fold.vocab.index)
    assert tr.vocab.counts[tr.vocab.index["kız"]] == 2 * fold.vocab.counts[fold.vocab.index["kız"]]
    assert tr.normalize_words(["İSTANBUL", "KIZ"]) == ["istanbul", "kız"]
    df = pair_passages(tr, "İstanbul", ["KIZ"], slice_from_spec(tr, "all"))
    assert len(df) > 0 and (df["pair_count"] > 0).all()
    out = _run("passages", "-w", multi / "turkish", "İSTANBUL", "--with", "KIZ", "--format", "json")
    assert len(json.loads(out.stdout)) > 0


def test_french_in_nfd_through_a_tests_file(multi, tmp_path):
    ws = Workspace(multi / "fold")
    words = {k: [nfd(w) for w in v] for k, v in {
        "targets_x": ["Élèves", "lycée", "café"], "targets_y": ["police", "fire", "government"],
        "attributes_a": ["Mädchen", "Straße"], "attributes_b": ["said", "people"]}.items()}
    toml = tmp_path / "t.toml"
    toml.write_text("[tests.fr]\n" + "".join(f"{k} = {json.dumps(v, ensure_ascii=False)}\n"
                                             for k, v in words.items()), encoding="utf-8")
    test = load_tests(toml)["fr"]
    assert normalized_test(test, ws).targets_x == ("élèves", "lycée", "café")
    res = measure(ws, {"fr": test}, "ppmi-svd", [slice_from_spec(ws, "all")], settings=MeasureSettings())
    row = res.summary.iloc[0]
    assert row["measured"] and row["dropped_words"] == [] and row["n_targets_x"] == 3
    out = json.loads(_run("measure", "-w", multi / "fold", "--tests", toml, "--bootstrap", "0",
                          "--format", "json").stdout)
    assert out[0]["dropped_words"] == [] and out[0]["n_targets_x"] == 3


def test_right_to_left_words_in_word_drift(multi):
    ws = Workspace(multi / "fold")
    periods = slices_by(ws, "time:10y")
    # Arabic typed in presentation forms (NFKC gives the letters), Hebrew as written
    change, near, _ = word_drift(ws, ["ﻛﺘﺎﺏ", "ספר"], periods, CountSettings())
    assert set(change["word"]) == {"كتاب", "ספר"} and change["in_vocabulary"].all()
    out = json.loads(_run("drift", "-w", multi / "fold", "--words", "ﻣﺪﺭﺳﺔ,שלום", "--format", "json").stdout)
    assert {r["word"] for r in out["change"]} == {"مدرسة", "שלום"}


def test_words_that_become_one_are_an_error(multi, tmp_path):
    toml = tmp_path / "dup.toml"
    toml.write_text('[tests.d]\ntargets_x = ["Straße", "strasse"]\nattributes_a = ["a"]\nattributes_b = ["b"]\n',
                    encoding="utf-8")
    with pytest.raises(InputError, match="strasse more than once"):
        normalized_test(load_tests(toml)["d"], Workspace(multi / "fold"))


def test_an_old_workspace_keeps_its_old_rule(multi, tmp_path):
    # a manifest written before the case rule was recorded: str.lower, old pattern, no typographic marks
    import shutil
    shutil.copytree(multi / "fold", tmp_path / "old")
    ws = Workspace(tmp_path / "old")
    manifest = ws.store / "manifest.json"
    m = json.loads(manifest.read_text(encoding="utf-8"))
    m["tokenizer"] = {"lowercase": True, "normalization": "NFKC", "pattern": r"\w+(?:[-']\w+)*"}
    manifest.write_text(json.dumps(m), encoding="utf-8")
    old = Workspace(tmp_path / "old")
    assert old.normalize_words(["Straße", "don’t", nfd("Élève")]) == ["straße", "don’t", "élève"]


def _run(*args):
    result = CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result


def test_an_old_workspace_takes_appends_under_its_own_rule(multi, tmp_path):
    import shutil

    from tracer.errors import WorkspaceError
    shutil.copytree(multi / "fold", tmp_path / "old")
    manifest = Workspace(tmp_path / "old").store / "manifest.json"
    m = json.loads(manifest.read_text(encoding="utf-8"))
    m["tokenizer"] = {"lowercase": True, "normalization": "NFKC", "pattern": r"\w+(?:[-']\w+)*"}
    manifest.write_text(json.dumps(m), encoding="utf-8")
    more = write_jsonl(tmp_path / "more.jsonl", [{"id": "new", "text": "Straße don’t"}])
    # an experiment states the defaults of its release: they fit the workspace the older release made
    ingest(tmp_path / "old", [more], tokenizer=TokenizerSettings())
    ws = Workspace(tmp_path / "old")
    assert ws.tokenizer_settings.case_rule == "lower" and {"straße", "don", "t"} <= set(ws.vocab.index)
    with pytest.raises(WorkspaceError, match="tokenizer settings"):
        ingest(tmp_path / "old", [write_jsonl(tmp_path / "m2.jsonl", [{"text": "x"}])],
               tokenizer=TokenizerSettings(case_rule="turkish"))
