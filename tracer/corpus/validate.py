"""The validate step of ingest: a raw record becomes a document row or a reason to reject it.

Beside the check of each record, :class:`FieldUse` counts which fields the
records of an input have, so ingest can say when a field it was told (or
defaulted) to use is absent in most records, and what it used instead.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

from tracer.corpus.readers import RawRecord
from tracer.corpus.timeparse import TimeParseError, parse_time

# distinct field names counted per input; more are lumped together, so a file of
# records with ever-new keys cannot fill memory
_MAX_FIELD_NAMES = 200


@dataclasses.dataclass(frozen=True)
class FieldMap:
    """Which field of a record holds what.

    ``time=None`` means: use ``time`` if the record has it, else ``date``, and
    accept records with neither. Naming a time field makes it required.
    """

    text: str = "text"
    id: str = "id"
    source: str = "source"
    time: str | None = None
    title: str = "title"

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


class RecordValidator:
    """Turn a raw record into a document row (a dict), or say why it cannot be one (a str)."""

    def __init__(self, fields: FieldMap, default_source: str | None):
        self.f = fields
        self.default_source = default_source

    def __call__(self, rec: RawRecord) -> dict | str:
        f, d = self.f, rec.fields
        text = d.get(f.text)
        if text is None:
            return f"no {f.text!r} field (set the text field with --text-field)"
        if not isinstance(text, str):
            return f"field {f.text!r} is not a string"
        if not text.strip():
            return "empty text"
        doc_id = d.get(f.id)
        if doc_id is None or doc_id == "":
            doc_id = f"{Path(rec.file).stem}:{rec.line}"
        elif isinstance(doc_id, (dict, list, float)):
            return f"field {f.id!r} must be a string or an integer, found {doc_id!r}"
        source = d.get(f.source)
        if source is None or source == "":
            source = self.default_source or Path(rec.file).stem
        parsed = self._time(d)
        if isinstance(parsed, str):
            return parsed
        title = d.get(f.title)
        extra = {k: v for k, v in d.items() if k != f.text}
        return {
            "doc_id": str(doc_id), "source": str(source),
            "time": parsed.iso if parsed else None,
            "year": parsed.year if parsed else None,
            "time_value": parsed.value if parsed else None,
            "title": None if title is None else str(title),
            "text": text, "input_file": rec.file, "input_line": rec.line,
            "fields": json.dumps(extra, ensure_ascii=False, default=str),
        }

    def _time(self, d: dict):
        """The parsed time of a record, None if it has none, or the reason it is rejected."""
        time_field = self.f.time
        required = time_field is not None
        if time_field is None:
            time_field = "time" if "time" in d else "date" if "date" in d else None
        raw_time = d.get(time_field) if time_field else None
        if raw_time is None or raw_time == "":
            return f"missing time (field {time_field!r})" if required else None
        try:
            return parse_time(raw_time)
        except TimeParseError as e:
            return f"field {time_field!r}: {e}"


class FieldUse:
    """How many records of one input have each field, and what that means for the mapping."""

    def __init__(self, fields: FieldMap, default_source: str | None, input_name: str, *,
                 max_names: int | None = _MAX_FIELD_NAMES):
        self.f = fields
        self.default_source = default_source
        self.input_name = input_name
        self.max_names = max_names if max_names is not None else float("inf")
        self.records = 0
        self.found: dict[str, int] = {}

    def add(self, rec: RawRecord) -> None:
        self.records += 1
        for k, v in rec.fields.items():
            if v is None or v == "":
                continue
            if k in self.found or len(self.found) < self.max_names:
                self.found[k] = self.found.get(k, 0) + 1

    def merge(self, records: int, found: dict[str, int]) -> None:
        """Add the counts of a later run of records, counted by a :class:`FieldUse` of their own
        made with ``max_names=None``.

        Gives the counts :meth:`add` gives record by record: the names kept are the first
        ``max_names`` by first appearance (``found`` lists its names in that order), each with
        every record that has it. The run's own count must keep every name: one that is not
        among the run's first ``max_names`` may be kept here already, from an earlier run.
        """
        self.records += records
        for k, c in found.items():
            if k in self.found or len(self.found) < self.max_names:
                self.found[k] = self.found.get(k, 0) + c

    def _present(self, *names: str) -> int:
        if len(names) == 1:
            return self.found.get(names[0], 0)
        # auto time: a record counts once whichever of the two it has; the larger count is a lower bound
        return max(self.found.get(n, 0) for n in names)

    def warnings(self) -> list[str]:
        """One line per mapped field that most records (more than half) lack, saying what was used."""
        if not self.records:
            return []
        f, n = self.f, self.records
        source_default = (f"the default source {self.default_source!r}" if self.default_source
                          else f"the file name {Path(self.input_name).stem!r}")
        checks = [
            ("text", (f.text,), "those records are rejected (set the text field with --text-field)"),
            ("id", (f.id,), "ids were made from the file name and line (set the id field with --id-field)"),
            ("source", (f.source,), f"the source is {source_default} (set the source field with --source-field)"),
            ("time", (f.time,) if f.time else ("time", "date"),
             "those records are rejected (a named time field is required)" if f.time else
             "documents have no time (name the time field with --time-field)"),
            ("title", (f.title,), "documents have no title (set the title field with --title-field)"),
        ]
        out = []
        for role, names, used in checks:
            absent = n - self._present(*names)
            if 2 * absent > n:
                shown = " or ".join(repr(x) for x in names)
                out.append(f"{role}: no {shown} field in {absent} of {n} records; {used}")
        return out

    def fields_found(self) -> str:
        """The field names seen, most common first, with their counts."""
        ranked = sorted(self.found.items(), key=lambda kv: (-kv[1], kv[0]))
        return ", ".join(f"{k} ({c})" for k, c in ranked) or "none"


def reason_kind(reason: str) -> str:
    """A reject's reason without the details that differ from record to record."""
    for prefix in ("duplicate id", "malformed JSON", "not valid UTF-8", "missing time"):
        if reason.startswith(prefix):
            return prefix
    if reason.startswith("field "):
        return reason.split(":")[0] + " unreadable"
    return reason.split(" (")[0]
