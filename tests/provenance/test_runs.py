"""The run store: run keys from everything that made a run, runs visible only when whole (kill -9 at
fixed points), unique temporary folders, parts that fail alone, checks before the heavy work, and
names that never reach a file path raw."""

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

import tracer.app.pipeline as pipeline
from tracer.app.pipeline import run_experiment
from tracer.errors import InputError, WorkspaceError
from tracer.provenance.experiment import load_experiment
from tracer.provenance.runs import (KILL_HOOK, TMP_PREFIX, RunFolder, clean_abandoned, find_run, stored_runs,
                                    table_stem)

from tests.conftest import LEE_SOURCES, LEE_TESTS, lee_documents, write_jsonl

EXPERIMENT = """
[corpus]
inputs = ["lee.jsonl"]
workspace = "ws"
[counts]
min_count = 3
[models]
ppmi_svd = { dim = 20 }
[measure]
tests = "tests.toml"
by = ["source"]
bootstrap = 0
"""


def _lee_folder(folder: Path, year_of=lambda i: 1990 + i % 20) -> Path:
    records = [{"id": f"lee-{i:03d}", "source": LEE_SOURCES[i % 3], "time": year_of(i), "text": t}
               for i, t in enumerate(lee_documents()) if t.strip()]
    write_jsonl(folder / "lee.jsonl", records)
    (folder / "tests.toml").write_text(LEE_TESTS, encoding="utf-8")
    (folder / "exp.toml").write_text(EXPERIMENT, encoding="utf-8")
    return folder / "exp.toml"


@pytest.fixture
def lee_exp(tmp_path) -> Path:
    return _lee_folder(tmp_path)


def _measure_rows(folder: Path) -> list[dict]:
    return json.loads((folder / "tables" / "measure.json").read_text(encoding="utf-8"))


def test_an_edited_tests_file_gives_a_new_run(lee_exp):
    first = run_experiment(load_experiment(lee_exp))
    assert not first.reused and first.status == "complete"
    assert run_experiment(load_experiment(lee_exp)).reused  # nothing changed: reused
    tests = lee_exp.parent / "tests.toml"
    tests.write_text(LEE_TESTS.replace('"government", "police"', '"government", "minister"'), encoding="utf-8")
    again = run_experiment(load_experiment(lee_exp))
    assert not again.reused and again.folder != first.folder
    words = {r["word"] for r in json.loads((again.folder / "tables" / "measure_words.json").read_text())}
    assert "minister" in words and "police" not in words


def test_an_edited_corpus_input_gives_a_new_run(lee_exp):
    first = run_experiment(load_experiment(lee_exp))
    with open(lee_exp.parent / "lee.jsonl", "a", encoding="utf-8") as f:
        f.write(json.dumps({"id": "extra", "source": "Ashford Post", "time": 2001,
                            "text": "The government and the police met."}) + "\n")
    again = run_experiment(load_experiment(lee_exp))
    assert not again.reused and again.folder != first.folder


def _cli_run(exp: Path, point: str) -> subprocess.CompletedProcess:
    env = {**os.environ, KILL_HOOK: point}
    return subprocess.run([sys.executable, "-m", "tracer.app.cli", "run", str(exp)], env=env, capture_output=True,
                          text=True, timeout=600)


def test_a_run_killed_at_any_point_is_never_reused_half_made(lee_exp):
    runs = lee_exp.parent / "ws" / "runs"
    for point in ("started", "measured", "tables", "run-json", "report"):
        res = _cli_run(lee_exp, point)
        assert res.returncode == -signal.SIGKILL, (point, res.stderr[-2000:])
        assert stored_runs(runs) == [], point  # nothing half-made is visible
        with pytest.raises(WorkspaceError, match="no run stored"):
            find_run(lee_exp.parent / "ws")
        # this killed run's own folder is left; the one before was removed at the start of this run
        assert len(list(runs.glob(f"{TMP_PREFIX}*"))) == 1, point
    again = run_experiment(load_experiment(lee_exp))
    assert not again.reused and again.status == "complete"
    assert (again.folder / "report.html").is_file() and not again.folder.name.startswith(".")
    assert list(runs.glob(f"{TMP_PREFIX}*")) == []  # cleaned: their writers are dead


def test_two_runs_in_one_second_get_their_own_folders(tmp_path):
    a, b = RunFolder(tmp_path, "k" * 32), RunFolder(tmp_path, "k" * 32)
    assert a.run_id != b.run_id and a.tmp != b.tmp and a.tmp.is_dir() and b.tmp.is_dir()
    # a live writer's folder is kept, a dead writer's folder removed
    dead = tmp_path / f"{TMP_PREFIX}20000101T000000-kkkkkkkk-000000.{2 ** 22 + 12345}"
    dead.mkdir()
    live = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        other = tmp_path / f"{TMP_PREFIX}20000101T000000-kkkkkkkk-111111.{live.pid}"
        other.mkdir()
        removed = clean_abandoned(tmp_path)
    finally:
        live.kill()
        live.wait()
    assert dead in removed and not dead.exists() and other.is_dir()
    assert a.publish() == tmp_path / a.run_id and (tmp_path / a.run_id / "tables").is_dir()


def test_table_stems_are_safe_file_names_and_distinct():
    assert table_stem("trace_gazette_outlet_sources") == "trace_gazette_outlet_sources"  # plain names unchanged
    names = ["a/b", "a_b", "../up", "x\x00y", "é" * 200, ".hidden", "", "con:x", "a b"]
    stems = [table_stem(n) for n in names]
    assert len(set(stems)) == len(names)
    for s in stems:
        assert "/" not in s and "\x00" not in s and not s.startswith(".") and 0 < len(s.encode()) <= 100


def test_test_names_that_cannot_be_file_names_are_stored(lee_exp):
    folder = lee_exp.parent
    hostile = ["a/b", "nul\x00name", "w" * 300]
    text = "".join(LEE_TESTS.replace("[tests.power]", f'[tests."{n}"]'.replace("\x00", "\\u0000")) for n in hostile)
    (folder / "tests.toml").write_text(text, encoding="utf-8")
    (folder / "exp.toml").write_text(EXPERIMENT + '[drift]\ntests = ["a/b", "nul\\u0000name", "' + "w" * 300
                                     + '"]\nby = "time:10y"\nbootstrap = 0\n', encoding="utf-8")
    result = run_experiment(load_experiment(folder / "exp.toml"))
    info = json.loads((result.folder / "run.json").read_text(encoding="utf-8"))
    for n in hostile:
        stem = info["tables"][f"drift_{n}_periods"]
        assert (result.folder / "tables" / f"{stem}.json").is_file() and stem == table_stem(f"drift_{n}_periods")
    assert {r["test"] for r in _measure_rows(result.folder)} == set(hostile)


def test_a_drift_word_missing_from_the_corpus_fails_before_any_measuring(lee_exp, monkeypatch):
    folder = lee_exp.parent
    (folder / "exp.toml").write_text(EXPERIMENT + '[drift]\nwords = ["government", "zqxjv"]\n', encoding="utf-8")
    called = []
    monkeypatch.setattr(pipeline, "measure", lambda *a, **k: called.append(1))
    with pytest.raises(InputError, match=r"drift.words: 'zqxjv' occur fewer than min_count = 3"):
        run_experiment(load_experiment(folder / "exp.toml"))
    assert called == []


def test_unknown_trace_test_fails_before_any_measuring(lee_exp, monkeypatch):
    folder = lee_exp.parent
    (folder / "exp.toml").write_text(EXPERIMENT + '[trace]\ntests = ["nope"]\n', encoding="utf-8")
    monkeypatch.setattr(pipeline, "measure", lambda *a, **k: pytest.fail("measured before the check"))
    with pytest.raises(InputError, match="no test named 'nope'"):
        run_experiment(load_experiment(folder / "exp.toml"))


def test_small_periods_store_a_partial_run_with_drift_not_measured(tmp_path):
    # two decades of about 4,500 tokens (under drift's 20,000-token minimum) and one large decade
    exp = _lee_folder(tmp_path, year_of=lambda i: 1975 + i % 10 if i < 50 else 1990 + i % 10)
    exp.write_text(EXPERIMENT + '[drift]\ntests = ["power"]\nby = "time:10y"\nbootstrap = 0\n', encoding="utf-8")
    result = run_experiment(load_experiment(exp))
    assert result.status == "partial" and not result.reused
    info = json.loads((result.folder / "run.json").read_text(encoding="utf-8"))
    assert info["status"] == "partial"
    drift = [p for p in info["not_measured"] if p["part"] == "drift"]
    assert drift and "fewer than the 20000 a period needs" in drift[0]["reason"]
    table = json.loads((result.folder / "tables" / "not_measured.json").read_text(encoding="utf-8"))
    assert [r["part"] for r in table] == [p["part"] for p in info["not_measured"]]
    assert len(_measure_rows(result.folder)) == 4  # the measurements are kept
    assert find_run(tmp_path / "ws") == result.folder
    assert not run_experiment(load_experiment(exp)).reused  # a partial run is made again, never reused


def test_a_failing_report_or_slice_does_not_lose_the_run(lee_exp, monkeypatch):
    import tracer.app.report.html as html

    def broken(*a, **k):
        raise KeyError("mix_part")

    monkeypatch.setattr(html, "write_report", broken)
    real = pipeline.measure

    def measure_failing_in_one_slice(ws, tests, model, slices, *a, **k):
        if slices[0].name == "source=Bramble Wire":
            raise ValueError("cannot measure here")
        return real(ws, tests, model, slices, *a, **k)

    monkeypatch.setattr(pipeline, "measure", measure_failing_in_one_slice)
    result = run_experiment(load_experiment(lee_exp))
    assert result.status == "partial"
    reasons = {(p["part"], p["name"]): p["reason"] for p in result.not_measured}
    assert reasons[("report", "report.html")] == "KeyError: 'mix_part'"
    assert reasons[("measure", "ppmi-svd source=Bramble Wire")] == "ValueError: cannot measure here"
    rows = {r["slice"]: r for r in _measure_rows(result.folder)}
    assert rows["source=Bramble Wire"]["measured"] is False
    assert rows["source=Bramble Wire"]["reason"] == "ValueError: cannot measure here"
    assert rows["source=Ashford Post"]["measured"] is True


def test_experiment_keys_choose_the_case_rule_and_the_word_sets(tmp_path):
    # "metres" occurs 4, 28 and 2 times in the three sources (counted from gensim's Lee corpus):
    # below min_count 3 in Cinder Daily only
    exp_file = _lee_folder(tmp_path)
    (tmp_path / "tests.toml").write_text(LEE_TESTS.replace('"security"]', '"security", "metres"]'), encoding="utf-8")
    text = EXPERIMENT.replace('workspace = "ws"', 'workspace = "ws"\ncase_rule = "turkish"')
    exp_file.write_text(text, encoding="utf-8")  # the default: the words known in every slice
    common = run_experiment(load_experiment(exp_file))
    manifest = json.loads((common.folder / "run.json").read_text(encoding="utf-8"))["manifest"]
    assert manifest["tokenizer"]["case_rule"] == "turkish"  # the ingest used the experiment's rule
    rows = {r["slice"]: r for r in _measure_rows(common.folder)}
    assert set(rows) == {"all", "source=Ashford Post", "source=Bramble Wire", "source=Cinder Daily"}
    # under the Turkish rule the corpus's "Israeli" is "ısraeli" (dotless), so the typed "israeli" is unknown
    assert rows["all"]["dropped_words"] == ["israeli"]
    for name, r in rows.items():  # every slice compares the words known in all of them
        assert r["word_sets"] == "common" and r["n_targets_x"] == 3, name
    assert rows["source=Ashford Post"]["not_in_every_slice"] == ["metres"]
    assert rows["source=Cinder Daily"]["dropped_words"] == ["metres", "israeli"]
    exp_file.write_text(text.replace("bootstrap = 0", "bootstrap = 0\nper_slice_words = true"), encoding="utf-8")
    own = run_experiment(load_experiment(exp_file))
    assert not own.reused and own.folder != common.folder
    rows = {r["slice"]: r for r in _measure_rows(own.folder)}
    assert rows["source=Ashford Post"]["word_sets"] == "per slice" and rows["source=Ashford Post"]["n_targets_x"] == 4
    assert rows["source=Cinder Daily"]["n_targets_x"] == 3


def test_drift_takes_its_own_per_slice_words_key(lee_exp, monkeypatch):
    import tracer.analysis.drift as drift
    measure_part = EXPERIMENT.replace("bootstrap = 0", "bootstrap = 0\nper_slice_words = false")
    (lee_exp.parent / "exp.toml").write_text(measure_part + '[drift]\ntests = ["power"]\nby = "time:10y"\n'
                                             'bootstrap = 0\nper_slice_words = true\n', encoding="utf-8")
    seen = {}
    real_measure = pipeline.measure

    def measure(*args, **kwargs):
        seen["measure"] = args[6].per_slice_words
        return real_measure(*args, **kwargs)

    def drift_tests(ws, tests, model, periods, counts, svd, settings, progress=False):
        seen["drift"] = settings.per_slice_words
        return {}

    monkeypatch.setattr(pipeline, "measure", measure)
    monkeypatch.setattr(drift, "drift_tests", drift_tests)
    run_experiment(load_experiment(lee_exp.parent / "exp.toml"))
    assert seen == {"measure": False, "drift": True}
