"""A stored run as the report reads it: run.json, its tables, and what could not be measured.

Nothing here assumes a table or a column: a part that was not measured may have left no table,
an empty one (a JSON ``[]`` has no columns), or rows with ``measured`` false and a ``reason``.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd


class RunData:
    """The run folder ``folder``: ``info`` (run.json), ``experiment`` (as resolved), tables by name."""

    def __init__(self, folder: str | Path):
        self.folder = Path(folder)
        self.info: dict = json.loads((self.folder / "run.json").read_text(encoding="utf-8"))
        self.experiment: dict = self.info.get("experiment") or {}
        # run.json may map table names to file stems (names that cannot be file names are hashed)
        self._stems: dict = self.info.get("tables") if isinstance(self.info.get("tables"), dict) else {}
        self._cache: dict[str, pd.DataFrame | None] = {}

    def table(self, name: str) -> pd.DataFrame | None:
        """The stored table ``name``, or None when the run has none; an empty table has no rows."""
        if name not in self._cache:
            path = self.folder / "tables" / f"{self._stems.get(name, name)}.json"
            try:
                self._cache[name] = pd.DataFrame(json.loads(path.read_text(encoding="utf-8")))
            except (OSError, ValueError):
                self._cache[name] = None
        return self._cache[name]

    def table_names(self) -> list[str]:
        """Every stored table's name."""
        by_stem = {stem: name for name, stem in self._stems.items()}
        folder = self.folder / "tables"
        stems = sorted(p.stem for p in folder.glob("*.json")) if folder.is_dir() else []
        return [by_stem.get(s, s) for s in stems]

    def tests_of(self, key: str) -> list[str]:
        """The tests the experiment named under ``key`` (trace_tests, drift_tests)."""
        value = self.experiment.get(key) or []
        return [str(v) for v in value] if isinstance(value, (list, tuple)) else [str(value)]

    def not_measured(self, part: str, name: str | None = None) -> str | None:
        """The reason a part (and test) was not measured, when run.json records one.

        Entries are ``{"part", "name", "reason"}``; a name may list several tests (``"a, b"``) when
        they were attempted together; the most specific entry (the last) wins.
        """
        entries = self.info.get("not_measured")
        if not isinstance(entries, list):
            return None
        found = None
        for e in entries:
            if not isinstance(e, dict) or e.get("part") != part:
                continue
            names = [n.strip() for n in str(e.get("name", "")).split(",")]
            if name is None or name in names or str(e.get("name")) == name:
                found = str(e.get("reason") or "not measured")
        return found

    @property
    def status(self) -> str:
        """"complete", "partial" (some parts not measured) or "" when the run does not say."""
        return str(self.info.get("status") or "")

    def experiment_text(self) -> str:
        path = self.folder / "experiment.toml"
        return path.read_text(encoding="utf-8") if path.is_file() else ""
