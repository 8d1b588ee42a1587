"""Files written whole or not at all, and outputs that cannot overwrite what they came from."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Iterable

from tracer.errors import SettingError


def fsync_dir(path: Path) -> None:
    """Flush a folder's entries (names made by rename or create) to disk."""
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def fsync_tree(folder: Path) -> None:
    """Flush every file below a folder, then the folders themselves, to disk."""
    folder = Path(folder)
    for root, _dirs, files in os.walk(folder):
        for name in files:
            fd = os.open(os.path.join(root, name), os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        fsync_dir(Path(root))


def write_atomic(path: Path, data: bytes | str) -> None:
    """Write a file through a temporary name and a rename, so readers never see half of it.

    The file is flushed before the rename and its folder after it, so once this
    returns the new content survives a power cut too.
    """
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    mode = "wb" if isinstance(data, bytes) else "w"
    with open(tmp, mode, **({} if isinstance(data, bytes) else {"encoding": "utf-8"})) as f:
        f.write(data)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)
    fsync_dir(path.parent)


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def check_output_path(out: str | os.PathLike, protected: Iterable[str | os.PathLike]) -> None:
    """Refuse an output path that would write over (or into) one of the protected paths.

    Parameters
    ----------
    out : path
        Where a command is about to write.
    protected : paths
        Files the command reads (its inputs) and the workspace's own files and
        folders; an output may equal none of them nor lie inside a protected
        folder. Symbolic links and ``..`` are resolved first, so another spelling
        of the same file is caught too.

    Raises
    ------
    SettingError
        Naming the protected path and what to do instead.
    """
    target = Path(out).resolve()
    for p in protected:
        p = Path(p)
        real = p.resolve()
        same = target.exists() and real.exists() and os.path.samefile(target, real)
        # a protected folder protects what lies inside it, whether it exists yet or not
        if same or _inside(target, real):
            raise SettingError(f"will not write the output to {out}: it would overwrite {p}, which this "
                               f"command reads or the workspace keeps; choose another -o path")
