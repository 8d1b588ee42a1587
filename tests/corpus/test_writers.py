"""Writers that cannot destroy data: concurrent appends, kill -9 at fixed points, damaged CURRENT.

Only the public API (ingest, Workspace, the named errors) is used where a test
reproduces a reported loss, so the same test also shows the loss on code
without the fix.
"""

import json
import multiprocessing
import os
import random
import shutil
import signal
import time

import pytest

from tests.conftest import write_jsonl
from tracer.corpus.ingest import ingest
from tracer.corpus.workspace import Workspace
from tracer.errors import TracerError, WorkspaceError

FORK = multiprocessing.get_context("fork")
N_APPEND = 800  # documents per appended file: enough that two appends overlap in time


def _records(prefix: str, n: int) -> list[dict]:
    words = ["harbour", "lantern", "meadow", "copper", "thistle", "beacon", "orchard", "quarry"]
    return [{"id": f"{prefix}{i}", "source": prefix, "time": 1950 + i % 40,
             "text": " ".join(words[(i * 7 + k) % len(words)] for k in range(40))} for i in range(n)]


def _append(ws, path, barrier, delay, wait, result):
    """Child process: wait for the other writer, sleep a little, append; report the outcome."""
    barrier.wait()
    time.sleep(delay)
    try:
        kwargs = {} if wait else {"wait": False}
        s = ingest(ws, [path], **kwargs)
        result.put(("ok", s.documents_total))
    except TracerError as e:
        result.put(("error", str(e)))
    except BaseException as e:  # anything else is a traceback the user would see
        result.put(("crash", f"{type(e).__name__}: {e}"))


def _two_appends(tmp_path, trial, wait):
    ws = tmp_path / f"ws{trial}"
    base = write_jsonl(tmp_path / f"base{trial}.jsonl", _records("base", 50))
    ingest(ws, [base])
    files = [write_jsonl(tmp_path / f"{p}{trial}.jsonl", _records(f"{p}{trial}-", N_APPEND)) for p in ("a", "b")]
    barrier, result = FORK.Barrier(2), FORK.Queue()
    rng = random.Random(trial)
    procs = [FORK.Process(target=_append, args=(ws, f, barrier, rng.uniform(0, 0.05), wait, result))
             for f in files]
    for p in procs:
        p.start()
    outcomes = [result.get(timeout=120) for _ in procs]
    for p in procs:
        p.join(timeout=60)
    return ws, outcomes


@pytest.mark.parametrize("wait", [True, False], ids=["waiting", "no-wait"])
def test_two_concurrent_appends_never_lose_the_corpus(tmp_path, wait):
    # issue 17: two appends 1-3 s apart deleted the whole corpus in 5 of 10 trials
    for trial in range(10):
        ws, outcomes = _two_appends(tmp_path, trial, wait)
        kinds = sorted(k for k, _ in outcomes)
        assert "crash" not in kinds, outcomes
        docs = Workspace(ws).documents
        sources = set(docs["source"])
        assert "base" in sources, f"trial {trial}: the corpus was lost ({outcomes})"
        if wait:
            # the second writer waits for the first: both files end up in the corpus
            assert kinds == ["ok", "ok"], outcomes
            assert len(docs) == 50 + 2 * N_APPEND and sources == {"base", f"a{trial}-", f"b{trial}-"}
        else:
            # both, or one plus a clear error naming the holder
            assert kinds in (["ok", "ok"], ["error", "ok"]), outcomes
            added = len(sources) - 1
            assert added == kinds.count("ok") and len(docs) == 50 + N_APPEND * added
            for kind, message in outcomes:
                if kind == "error":
                    # names the holder, or "another process" if it left before its record was read
                    assert "is in use by" in message and "--no-wait" in message
        assert len(list(ws.glob("store-*"))) == 1


# ---- kill -9 at fixed points ------------------------------------------------------------------


def _kill_at(point, ws, path):
    os.environ["TRACER_TEST_KILL_AT"] = point
    ingest(ws, [path])


def _kill_after_switch(ws, path):
    """Child: kill itself right after the rename that makes CURRENT name the new store."""
    real = os.replace

    def replace(src, dst, *a, **k):
        real(src, dst, *a, **k)
        if os.path.basename(dst) == "CURRENT":
            os.kill(os.getpid(), signal.SIGKILL)

    os.replace = replace
    ingest(ws, [path])


def _run_child(target, *args):
    p = FORK.Process(target=target, args=args)
    p.start()
    p.join(timeout=120)
    return p.exitcode


def _rejects(ws: Workspace) -> list[int]:
    """Lines of the rejected records of the current corpus (from the rejects file of its store)."""
    f = ws.rejects_file if hasattr(ws, "rejects_file") else ws.path / "rejects.jsonl"
    return [json.loads(line)["line"] for line in open(f, encoding="utf-8")] if f.is_file() else []


@pytest.fixture
def two_inputs(tmp_path):
    base = tmp_path / "base.jsonl"
    base.write_text('{"id": "b1", "text": "the old corpus"}\n{"id": "b2", "text": ""}\n', encoding="utf-8")
    more = tmp_path / "more.jsonl"
    more.write_text('{"id": "m1", "text": "a new document"}\n{"id": "m2", "text": "", "x": 1}\n'
                    '{"id": "m3", "text": ""}\n', encoding="utf-8")
    return base, more


def test_a_kill_right_after_the_switch_keeps_the_new_rejects(tmp_path, two_inputs):
    # issue 17: an ingest killed right after the switch lost its rejects for good
    base, more = two_inputs
    ws_path = tmp_path / "ws"
    ingest(ws_path, [base])
    assert _run_child(_kill_after_switch, ws_path, more) == -signal.SIGKILL
    ws = Workspace(ws_path)
    assert ws.n_documents == 2
    assert _rejects(ws) == [2, 2, 3]  # the base file's line 2, then the new file's lines 2 and 3


@pytest.mark.parametrize("point,new", [("generation-made", False), ("documents-written", False),
                                       ("manifest-written", False), ("switched", True), ("cleaned", True)])
def test_a_kill_at_any_point_leaves_the_old_or_the_new_corpus_with_its_rejects(tmp_path, two_inputs, point, new):
    from tracer.corpus.store import KILL_POINTS
    assert point in KILL_POINTS
    base, more = two_inputs
    ws_path = tmp_path / "ws"
    ingest(ws_path, [base])
    assert _run_child(_kill_at, point, ws_path, more) == -signal.SIGKILL
    ws = Workspace(ws_path)
    assert (ws.n_documents, _rejects(ws)) == ((2, [2, 2, 3]) if new else (1, [2]))
    # the next ingest removes what the killed one left and works as usual
    again = ingest(ws_path, [more])
    assert [i.status for i in again.inputs] == ["already ingested" if new else "added"]
    assert len(list(ws_path.glob("store-*"))) == 1
    assert Workspace(ws_path).n_documents == 2


def test_a_killed_first_ingest_leaves_no_corpus_and_the_next_one_works(tmp_path, two_inputs):
    base, _ = two_inputs
    ws_path = tmp_path / "ws"
    assert _run_child(_kill_at, "manifest-written", ws_path, base) == -signal.SIGKILL
    assert not (ws_path / "CURRENT").exists()
    assert ingest(ws_path, [base]).documents_total == 1
    assert [p.name for p in ws_path.glob("store-*")] == [Workspace(ws_path).store.name]


# ---- CURRENT damaged --------------------------------------------------------------------------


@pytest.mark.parametrize("content", ["", "\n", "store-9999\n", "garbage\n", "store-0001/../store-0001\n"],
                         ids=["empty", "newline", "missing-store", "garbage", "dotdot"])
def test_a_damaged_current_is_an_error_and_nothing_is_removed(tmp_path, small_jsonl, content):
    # issue 17: ": > ws/CURRENT; tracer ingest new.jsonl -w ws" kept only the new document
    ws_path = tmp_path / "ws"
    ingest(ws_path, [small_jsonl])
    store = Workspace(ws_path).store
    (ws_path / "CURRENT").write_text(content, encoding="utf-8")
    new = write_jsonl(tmp_path / "new.jsonl", [{"id": "n1", "text": "a new document"}])
    with pytest.raises(WorkspaceError, match=r"damaged: .*CURRENT.*write the name of the store folder"):
        ingest(ws_path, [new])
    with pytest.raises(WorkspaceError, match="damaged"):
        Workspace(ws_path)
    assert store.is_dir()
    (ws_path / "CURRENT").write_text(store.name + "\n", encoding="utf-8")
    assert Workspace(ws_path).n_documents == 4  # writing the name back restores the corpus


def test_current_pointing_outside_the_workspace_is_not_followed(tmp_path, small_jsonl):
    # issue 17: CURRENT containing ../elsewhere was followed outside the workspace
    ws_path = tmp_path / "ws"
    ingest(ws_path, [small_jsonl])
    shutil.copytree(Workspace(ws_path).store, tmp_path / "elsewhere")
    (ws_path / "CURRENT").write_text("../elsewhere\n", encoding="utf-8")
    with pytest.raises(WorkspaceError, match=r"holds '../elsewhere', not the name of a store folder"):
        Workspace(ws_path)
    # a store name that is a link to a folder outside is refused too
    (ws_path / "store-0100").symlink_to(tmp_path / "elsewhere")
    (ws_path / "CURRENT").write_text("store-0100\n", encoding="utf-8")
    with pytest.raises(WorkspaceError, match="not a folder inside the workspace"):
        Workspace(ws_path)


def test_store_folders_without_current_are_not_deleted(tmp_path, small_jsonl):
    ws_path = tmp_path / "ws"
    ingest(ws_path, [small_jsonl])
    store = Workspace(ws_path).store
    (ws_path / "CURRENT").unlink()
    new = write_jsonl(tmp_path / "new.jsonl", [{"id": "n1", "text": "a new document"}])
    with pytest.raises(WorkspaceError, match=rf"store folders \({store.name}\) but no CURRENT"):
        ingest(ws_path, [new])
    assert store.is_dir()
