"""Files written whole or not at all."""

from __future__ import annotations

import os
from pathlib import Path


def write_atomic(path: Path, data: bytes | str) -> None:
    """Write a file through a temporary name and a rename, so readers never see half of it."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    mode = "wb" if isinstance(data, bytes) else "w"
    with open(tmp, mode, **({} if isinstance(data, bytes) else {"encoding": "utf-8"})) as f:
        f.write(data)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)
