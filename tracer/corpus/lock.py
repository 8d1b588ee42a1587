"""One writer at a time per workspace: an exclusive lock on the file ``WORKSPACE/LOCK``.

The lock is an ``flock`` on an open file, so the kernel releases it when its
holder exits in any way (kill -9 included): a dead holder never blocks the next
writer. The file holds the holder's pid, host, command and start time as JSON,
only so the message a waiting writer prints can name who holds it; the lock
itself is the ``flock``, never the file's existence, so the file is not removed
at release (removing it would let two writers lock two different files).

A process may take the lock again while it holds it (``tracer run`` holds it and
calls ingest, which takes it too); the count of nested holds is kept per
workspace in this process.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import errno
import fcntl
import json
import os
import socket
import sys
import threading
import time
from pathlib import Path
from typing import Callable, Iterator

from tracer.errors import WorkspaceBusy

LOCK_FILE = "LOCK"
_POLL_SECONDS = 0.2

# workspace (resolved path) -> [file descriptor, nested holds]; guarded by _HELD_GUARD
_HELD: dict[Path, list[int]] = {}
_HELD_GUARD = threading.Lock()


def _stderr(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


def lock_holder(workspace: str | os.PathLike) -> dict | None:
    """What the lock file says about its last holder (pid, host, command, since), or None."""
    try:
        text = (Path(workspace) / LOCK_FILE).read_text(encoding="utf-8")
        return json.loads(text) if text.strip() else None
    except (OSError, ValueError):
        return None


def is_locked(workspace: str | os.PathLike) -> bool:
    """Whether some process (this one included) holds the workspace's lock now."""
    path = Path(workspace)
    if path.resolve() in _HELD:
        return True
    try:
        fd = os.open(path / LOCK_FILE, os.O_RDWR)
    except FileNotFoundError:
        return False
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as e:
        if e.errno in (errno.EWOULDBLOCK, errno.EAGAIN):
            return True
        raise
    else:
        fcntl.flock(fd, fcntl.LOCK_UN)
        return False
    finally:
        os.close(fd)


def _describe(holder: dict | None) -> str:
    if not holder:
        return "another process"
    return (f"process {holder.get('pid')} on {holder.get('host')} "
            f"({holder.get('command') or 'unknown command'}, since {holder.get('since')})")


def _holder_soon(path: Path, tries: int = 25) -> dict | None:
    """The holder's record; a holder that has just taken the lock writes it a moment later."""
    for _ in range(tries):
        holder = lock_holder(path)
        if holder:
            return holder
        time.sleep(0.02)
    return None


def _try_lock(fd: int) -> bool:
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        return True
    except OSError as e:
        if e.errno in (errno.EWOULDBLOCK, errno.EAGAIN):
            return False
        raise


def _acquire(path: Path, command: str, wait: bool, timeout: float | None,
             say: Callable[[str], None]) -> int:
    path.mkdir(parents=True, exist_ok=True)
    fd = os.open(path / LOCK_FILE, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        if not _try_lock(fd):
            holder = _describe(_holder_soon(path))
            if not wait:
                raise WorkspaceBusy(f"workspace {path} is in use by {holder}; try again when it has "
                                    f"finished (without --no-wait this command waits for it)")
            say(f"workspace {path} is in use by {holder}; waiting for it to finish (Ctrl-C to stop)")
            deadline = None if timeout is None else time.monotonic() + timeout
            while not _try_lock(fd):
                if deadline is not None and time.monotonic() > deadline:
                    raise WorkspaceBusy(f"workspace {path} is still in use by {holder} after "
                                        f"{timeout:g} s; try again later")
                time.sleep(_POLL_SECONDS)
        record = {"pid": os.getpid(), "host": socket.gethostname(), "command": command or " ".join(sys.argv),
                  "since": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")}
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(record).encode("utf-8") + b"\n", 0)
        return fd
    except BaseException:
        os.close(fd)
        raise


@contextlib.contextmanager
def workspace_lock(workspace: str | os.PathLike, *, command: str = "", wait: bool = True,
                   timeout: float | None = None,
                   say: Callable[[str], None] = _stderr) -> Iterator[None]:
    """Hold the workspace's exclusive write lock for the duration of a ``with`` block.

    Parameters
    ----------
    workspace : path
        The workspace folder (created if missing, so the lock can be taken before
        a first ingest).
    command : str
        What the holder is doing, shown to a writer that has to wait.
    wait : bool
        Wait for another holder to finish (saying so once through ``say``); with
        False raise :class:`tracer.errors.WorkspaceBusy` at once.
    timeout : float, optional
        Give up waiting after this many seconds (default: wait as long as it takes).
    say : callable
        Where the waiting message goes (default: standard error).
    """
    path = Path(workspace)
    path.mkdir(parents=True, exist_ok=True)
    key = path.resolve()
    with _HELD_GUARD:
        held = _HELD.get(key)
        if held is not None:
            held[1] += 1
    if held is None:
        fd = _acquire(path, command, wait, timeout, say)
        with _HELD_GUARD:
            _HELD[key] = held = [fd, 1]
    try:
        yield
    finally:
        with _HELD_GUARD:
            held[1] -= 1
            last = held[1] == 0
            if last:
                del _HELD[key]
        if last:
            # empty the record before unlocking, so the file never names a holder that has left
            os.ftruncate(held[0], 0)
            fcntl.flock(held[0], fcntl.LOCK_UN)
            os.close(held[0])


def holds_lock(workspace: str | os.PathLike) -> bool:
    """Whether this process holds the workspace's lock."""
    return Path(workspace).resolve() in _HELD
