"""The workspace lock: exclusive between processes, released by a dead holder, re-entrant within one."""

import multiprocessing
import os
import signal
import time

import pytest

from tracer.corpus.lock import holds_lock, is_locked, lock_holder, workspace_lock
from tracer.errors import WorkspaceBusy

FORK = multiprocessing.get_context("fork")


def _hold(ws, taken, release_after):
    with workspace_lock(ws, command="holder for a test"):
        taken.set()
        time.sleep(release_after)


def _start_holder(ws, release_after):
    taken = FORK.Event()
    p = FORK.Process(target=_hold, args=(ws, taken, release_after))
    p.start()
    assert taken.wait(30)
    return p


def test_a_second_writer_fails_at_once_with_no_wait_and_is_told_who_holds_it(tmp_path):
    p = _start_holder(tmp_path / "ws", 60)
    try:
        assert is_locked(tmp_path / "ws")
        holder = lock_holder(tmp_path / "ws")
        assert holder["pid"] == p.pid and holder["command"] == "holder for a test"
        started = time.monotonic()
        with pytest.raises(WorkspaceBusy, match=rf"in use by process {p.pid} on .*holder for a test"):
            with workspace_lock(tmp_path / "ws", wait=False):
                pass
        assert time.monotonic() - started < 5
    finally:
        os.kill(p.pid, signal.SIGKILL)
        p.join()


def test_a_holder_killed_with_signal_9_releases_the_lock(tmp_path):
    p = _start_holder(tmp_path / "ws", 60)
    os.kill(p.pid, signal.SIGKILL)
    p.join()
    assert not is_locked(tmp_path / "ws")
    with workspace_lock(tmp_path / "ws", wait=False, command="next"):
        assert lock_holder(tmp_path / "ws")["pid"] == os.getpid()


def test_a_waiting_writer_says_so_once_and_goes_on_when_the_holder_finishes(tmp_path):
    p = _start_holder(tmp_path / "ws", 1.0)
    said = []
    started = time.monotonic()
    with workspace_lock(tmp_path / "ws", say=said.append):
        waited = time.monotonic() - started
    p.join()
    assert waited > 0.5  # the holder kept it for 1 s after it took it
    assert len(said) == 1 and "waiting for it to finish" in said[0] and str(p.pid) in said[0]


def test_waiting_can_time_out(tmp_path):
    p = _start_holder(tmp_path / "ws", 60)
    try:
        with pytest.raises(WorkspaceBusy, match="still in use .* after 0.5 s"):
            with workspace_lock(tmp_path / "ws", timeout=0.5, say=lambda s: None):
                pass
    finally:
        os.kill(p.pid, signal.SIGKILL)
        p.join()


def test_the_lock_is_reentrant_in_one_process_and_empties_its_record_at_release(tmp_path):
    ws = tmp_path / "ws"
    with workspace_lock(ws):
        with workspace_lock(ws, wait=False):  # e.g. tracer run holding it, then ingest taking it
            assert holds_lock(ws)
        assert holds_lock(ws) and is_locked(ws)
    assert not holds_lock(ws) and not is_locked(ws)
    assert lock_holder(ws) is None  # the file stays, but names no holder
