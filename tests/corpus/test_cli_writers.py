"""The command line over the writer side: -o that cannot overwrite, --no-wait, --replace, verify, warnings."""

import multiprocessing
import os
import signal

import pytest
from click.testing import CliRunner

from tests.conftest import write_jsonl
from tracer.app.cli import cli
from tracer.corpus.lock import workspace_lock
from tracer.errors import SettingError
from tracer.files import check_output_path

FORK = multiprocessing.get_context("fork")


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture
def ws(tmp_path, small_jsonl):
    assert run("ingest", small_jsonl, "-w", tmp_path / "ws").exit_code == 0
    return tmp_path / "ws"


@pytest.mark.parametrize("target", ["CURRENT", "store-0001/manifest.json", "LOCK", "models/x.txt"])
def test_info_will_not_write_over_the_workspace(ws, target):
    # issue 17: tracer info -w ws -o ws/CURRENT wrote over it
    before = (ws / "CURRENT").read_bytes()
    res = run("info", "-w", ws, "-o", ws / target)
    assert res.exit_code == 1 and res.stderr.startswith(f"Error: will not write the output to {ws / target}")
    assert (ws / "CURRENT").read_bytes() == before
    assert run("info", "-w", ws, "-o", ws / "summary.txt").exit_code == 0  # a file of the user's own is fine


def test_ingest_will_not_write_its_table_over_its_input(ws, small_jsonl):
    before = small_jsonl.read_bytes()
    res = run("ingest", small_jsonl, "-w", ws, "-o", small_jsonl)
    assert res.exit_code == 1 and "it would overwrite" in res.stderr
    assert small_jsonl.read_bytes() == before


def test_another_spelling_of_a_protected_file_is_caught(tmp_path):
    (tmp_path / "data").mkdir()
    f = tmp_path / "data" / "in.jsonl"
    f.write_text("{}\n", encoding="utf-8")
    (tmp_path / "alias").symlink_to(tmp_path / "data")
    for spelling in (tmp_path / "alias" / "in.jsonl", tmp_path / "data" / ".." / "data" / "in.jsonl"):
        with pytest.raises(SettingError, match="would overwrite"):
            check_output_path(spelling, [f])
    with pytest.raises(SettingError, match="would overwrite"):
        check_output_path(tmp_path / "alias" / "new.txt", [tmp_path / "data"])  # inside a protected folder
    check_output_path(tmp_path / "other.txt", [f, tmp_path / "data"])  # raises nothing


def _hold(ws, taken):
    with workspace_lock(ws, command="tracer run demo.toml"):
        taken.set()
        signal.pause()


def test_no_wait_fails_at_once_when_another_process_writes(ws, tmp_path):
    taken = FORK.Event()
    p = FORK.Process(target=_hold, args=(ws, taken))
    p.start()
    try:
        assert taken.wait(30)
        more = write_jsonl(tmp_path / "more.jsonl", [{"id": "m", "text": "more words"}])
        res = run("ingest", more, "-w", ws, "--no-wait")
        assert res.exit_code == 1
        assert f"in use by process {p.pid}" in res.stderr and "tracer run demo.toml" in res.stderr
    finally:
        os.kill(p.pid, signal.SIGKILL)
        p.join()
    assert run("ingest", more, "-w", ws, "--no-wait").exit_code == 0


def test_verify_passes_a_sound_workspace_and_names_damage(ws):
    res = run("verify", "-w", ws)
    assert res.exit_code == 0 and "PROBLEM" not in res.stdout and "ok       postings" in res.stdout
    (ws / "CURRENT").write_text("../elsewhere\n", encoding="utf-8")
    res = run("verify", "-w", ws)
    assert res.exit_code == 1 and "PROBLEM  workspace" in res.stdout and "1 problem(s)" in res.stderr


def test_ingest_warns_of_missing_fields_and_replace_rebuilds(tmp_path):
    p = write_jsonl(tmp_path / "o.jsonl", [{"doc_id": "a", "outlet": "North Herald", "year": 1971, "body": "x y"}])
    res = run("ingest", p, "-w", tmp_path / "ws", "--text-field", "body")
    assert res.exit_code == 0 and "Warning: o.jsonl: source: no 'source' field in 1 of 1 records" in res.stderr
    res = run("ingest", p, "-w", tmp_path / "ws", "--text-field", "body", "--source-field", "outlet")
    assert res.exit_code == 1 and "add --replace" in res.stderr
    res = run("ingest", p, "-w", tmp_path / "ws", "--text-field", "body", "--source-field", "outlet", "--replace")
    assert res.exit_code == 0 and "replaced the corpus" in res.stderr
    assert "source=outlet" in run("info", "-w", tmp_path / "ws").stdout


def test_tracer_run_holds_the_workspace_lock_throughout(tmp_path, monkeypatch):
    from types import SimpleNamespace

    from tracer.app import pipeline
    from tracer.corpus.lock import holds_lock, is_locked
    seen = []
    monkeypatch.setattr(pipeline, "_run_locked", lambda exp, **kw: seen.append(holds_lock(exp.workspace)))
    exp = SimpleNamespace(workspace=tmp_path / "ws", path=tmp_path / "exp.toml")
    pipeline.run_experiment(exp, command="tracer run exp.toml")
    assert seen == [True] and not is_locked(tmp_path / "ws")
