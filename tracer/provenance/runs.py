"""The run store: ``WORKSPACE/runs/RUN_ID/`` folders, the keys that say what made them, and finding them.

A run is keyed by everything that made it: the experiment text, the content of every
file it reads (tests file, corpus inputs), the corpus hash, the resolved settings and the
versions of the packages its numbers depend on. A stored run is reused only when its key
is the same and it is complete.

A run is written into a temporary folder ``runs/.tmp-RUN_ID.PID`` and renamed to
``runs/RUN_ID`` when whole, so a run folder is visible only when complete. Temporary
folders are never read or reused; one whose writer is no longer alive is removed by
the next run. Run ids carry a random part, so two runs started in the same second get
their own folders.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
import os
import re
import secrets
import shutil
import signal
from pathlib import Path

from tracer.errors import WorkspaceError

RUNS_DIR = "runs"
TMP_PREFIX = ".tmp-"
# Test hook: ``TRACER_KILL_AT=POINT`` kills the process with SIGKILL at that checkpoint of a run,
# as a ``kill -9`` would, so tests can check that no half-made run is ever reused.
KILL_HOOK = "TRACER_KILL_AT"
_SAFE_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.=-]{0,99}")


@dataclasses.dataclass(frozen=True)
class RunResult:
    """A stored run: its id and folder, whether it was reused, its status and what was not measured."""

    run_id: str
    folder: Path
    reused: bool
    status: str = "complete"
    not_measured: tuple[dict, ...] = ()


def checkpoint(point: str) -> None:
    """Die as ``kill -9`` would when the test hook names this point (see ``KILL_HOOK``)."""
    if os.environ.get(KILL_HOOK) == point:
        os.kill(os.getpid(), signal.SIGKILL)


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, read in blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def run_key(experiment_text: str, files: dict[str, str], corpus_hash: str, settings: dict,
            versions: dict[str, str]) -> str:
    """The key of a run: a hash of everything that made it.

    Parameters
    ----------
    experiment_text : str
        The experiment file as written.
    files : dict
        Every file the run reads (label, e.g. ``"tests"`` or ``"input 0"``) -> SHA-256 of its content.
    corpus_hash : str
    settings : dict
        The resolved settings, as plain data.
    versions : dict
        Package name -> version.
    """
    made_of = {"experiment": experiment_text, "files": files, "corpus": corpus_hash, "settings": settings,
               "versions": versions}
    return hashlib.sha256(json.dumps(made_of, sort_keys=True, default=str).encode("utf-8")).hexdigest()[:32]


def table_stem(name: str) -> str:
    """The file stem of a run table or figure named ``name``.

    A name of plain letters, digits and ``_ . = -`` (up to 100 characters, starting with a
    letter or digit) is used as it is; any other (``/``, NUL, names over 255 bytes, leading
    dots) becomes its readable part plus a hash of the whole name, so no name reaches a
    file path raw and two names never share a file.
    """
    if _SAFE_NAME.fullmatch(name):
        return name
    readable = re.sub(r"[^A-Za-z0-9_.=-]+", "_", name)[:60].strip("._") or "name"
    return f"{readable}-{hashlib.sha256(name.encode('utf-8', 'surrogatepass')).hexdigest()[:12]}"


def read_run_info(folder: Path) -> dict | None:
    """A run folder's run.json, or None when it is missing or damaged."""
    try:
        info = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return None
    return info if isinstance(info, dict) and isinstance(info.get("run_id"), str) else None


def stored_runs(runs_dir: Path) -> list[tuple[Path, dict]]:
    """Completed run folders (temporary ones never) with their run.json, by folder name."""
    if not runs_dir.is_dir():
        return []
    out = []
    for folder in sorted(runs_dir.iterdir()):
        if folder.name.startswith(".") or not folder.is_dir():
            continue
        info = read_run_info(folder)
        if info is not None:
            out.append((folder, info))
    return out


def reusable_run(runs_dir: Path, key: str) -> RunResult | None:
    """A stored complete run with this key, if there is one."""
    for folder, info in stored_runs(runs_dir):
        if info.get("run_key") == key and info.get("status", "complete") == "complete":
            return RunResult(info["run_id"], folder, True)
    return None


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # a live process of another user
        return True
    return True


def clean_abandoned(runs_dir: Path) -> list[Path]:
    """Remove temporary run folders whose writer is dead (or that name no writer); return them."""
    removed = []
    if not runs_dir.is_dir():
        return removed
    for folder in runs_dir.glob(f"{TMP_PREFIX}*"):
        pid = folder.name.rsplit(".", 1)[-1]
        if pid.isdigit() and _alive(int(pid)):
            continue  # a run is writing it (perhaps in this process)
        shutil.rmtree(folder, ignore_errors=True)
        removed.append(folder)
    return removed


def new_run_id(key: str) -> str:
    """Time (UTC, to the second), the key's start and a random part: unique even within one second."""
    return f"{dt.datetime.now(dt.timezone.utc):%Y%m%dT%H%M%S}-{key[:8]}-{secrets.token_hex(3)}"


class RunFolder:
    """A run being written: files go to ``tmp``; :meth:`publish` renames it to ``runs/RUN_ID``."""

    def __init__(self, runs_dir: Path, key: str):
        self.runs_dir = runs_dir
        self.run_id = new_run_id(key)
        self.tmp = runs_dir / f"{TMP_PREFIX}{self.run_id}.{os.getpid()}"
        runs_dir.mkdir(parents=True, exist_ok=True)
        self.tmp.mkdir()  # never an existing folder: a temporary folder is never reused
        (self.tmp / "tables").mkdir()

    @property
    def final(self) -> Path:
        return self.runs_dir / self.run_id

    def publish(self) -> Path:
        """Make the run visible, whole (one rename, then the folder's entry made durable)."""
        if self.final.exists():
            raise WorkspaceError(f"run folder {self.final} exists already; run again")
        os.replace(self.tmp, self.final)
        try:
            fd = os.open(self.runs_dir, os.O_RDONLY)
        except OSError:  # a platform without directory handles: the rename is still atomic
            return self.final
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
        return self.final

    def discard(self) -> None:
        shutil.rmtree(self.tmp, ignore_errors=True)


def find_run(workspace: str | Path, run: str = "latest") -> Path:
    """A stored run's folder: its id, or "latest" (the last finished)."""
    done = stored_runs(Path(workspace) / RUNS_DIR)
    if not done:
        raise WorkspaceError(f"no run stored in {workspace}; run  tracer run EXPERIMENT.toml  first")
    if run == "latest":
        return max(done, key=lambda fi: str(fi[1].get("finished_at", "")))[0]
    for folder, _ in done:
        if folder.name == run:
            return folder
    raise WorkspaceError(f"no run {run!r} in {workspace}; the runs are {', '.join(f.name for f, _ in done)}")
