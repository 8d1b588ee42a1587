"""Tables of the report as data for the template: chosen columns, rounded cells, notes as footnotes.

Nothing here writes HTML: a :class:`Table` holds the header, the rows of formatted cell text
and the footnotes; the template renders it (and escapes every cell). A column is chosen with
a :class:`Col` that names its format, so counts print as integers, effect sizes with two
decimals, p-values with two significant digits and shares as percentages.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Callable

import pandas as pd


@dataclasses.dataclass
class Cell:
    text: str
    num: bool = False
    link: str | None = None
    nowrap: bool = False  # identifiers and dates stay on one line


@dataclasses.dataclass
class Table:
    head: list[str]
    rows: list[list[Cell]]
    notes: list[str]
    more: int = 0  # rows of the stored table not shown
    stored: str = ""  # the stored table's name, named when rows are left out


@dataclasses.dataclass(frozen=True)
class Col:
    """A shown column: ``key`` (or two keys for an interval), its header and its format."""

    key: str | tuple[str, str]
    label: str
    fmt: str = "text"


def _missing(v) -> bool:
    if v is None:
        return True
    if isinstance(v, (list, tuple, dict)):  # a list is a value, even an empty one (pd.isna would map over it)
        return False
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def significant(v: float, digits: int = 3) -> str:
    """``v`` with ``digits`` significant digits, in positional notation from 1e-4 to 1e6."""
    if v == 0:
        return "0"
    a = abs(v)
    if 1e-4 <= a < 1e6:
        decimals = digits - 1 - math.floor(math.log10(a))
        return f"{v:.{decimals}f}" if decimals >= 0 else f"{round(v, decimals):.0f}"
    return f"{v:.{digits - 1}e}"


def _fixed(v, decimals: int) -> str:
    text = f"{float(v):.{decimals}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text  # no "-0.00"


def _integer(v) -> str:
    return f"{int(round(float(v))):,}"


def _listed(v) -> str:
    if isinstance(v, (list, tuple)):
        return ", ".join(map(str, v))
    return str(v)


FORMATS: dict[str, Callable[[object], str]] = {
    "text": str,
    "id": str,  # kept on one line
    "int": _integer,  # counts: 810,661
    "year": lambda v: str(int(round(float(v)))),
    "d": lambda v: _fixed(v, 2),  # effect sizes, correlations: two decimals
    "g3": lambda v: significant(float(v), 3),  # gaps, contributions, slopes
    "p": lambda v: significant(float(v), 2),  # p- and q-values
    "pct": lambda v: f"{100 * float(v):.1f}%",
    "bool": lambda v: "yes" if bool(v) else "no",
    "list": _listed,
}
NUMERIC = {"int", "year", "d", "g3", "p", "pct"}


def cell_text(v, fmt: str) -> str:
    """One value as text in format ``fmt``; a missing value is an empty cell."""
    if _missing(v) or (fmt == "list" and not v):
        return ""
    if fmt in NUMERIC and isinstance(v, str):
        return v
    return FORMATS[fmt](v)


def _cell(row: dict, col: Col) -> Cell:
    if isinstance(col.key, tuple):
        lo, hi = (row.get(k) for k in col.key)
        text = "" if _missing(lo) or _missing(hi) else f"[{cell_text(lo, col.fmt)}, {cell_text(hi, col.fmt)}]"
        return Cell(text, num=True)
    return Cell(cell_text(row.get(col.key), col.fmt), num=col.fmt in NUMERIC, nowrap=col.fmt == "id")


def present(df: pd.DataFrame | None, columns: list[Col], keep: str | None = None) -> list[Col]:
    """The columns whose keys ``df`` has and that hold at least one value (and the column ``keep``)."""
    if df is None:
        return []
    out = []
    for col in columns:
        keys = col.key if isinstance(col.key, tuple) else (col.key,)
        if col.key == keep or all(k in df.columns for k in keys) and any(
                df[k].map(lambda v: not _missing(v)).any() for k in keys):
            out.append(col)
    return out


def make_table(df: pd.DataFrame | None, columns: list[Col], *, notes: tuple[str, ...] = ("warning",),
               limit: int | None = None, stored: str = "", link: Callable[[dict], str | None] | None = None,
               unmeasured: str | None = None) -> Table | None:
    """The rows of ``df`` in the chosen columns (those it has), with ``notes`` columns as footnotes.

    A row's notes (a warning, a reason) are numbered once per table and referred to in a last
    column "notes", so a long sentence never stretches a narrow column.

    ``unmeasured``: the key of the first value column, which reads "not measured" in a row whose
    ``measured`` is false (its ``reason`` becomes a footnote). ``link(row)`` gives the first cell's
    link target. ``limit`` rows are shown; the table says how many more the stored one has.
    """
    if df is None or len(df) == 0:
        return None
    cols = present(df, columns, keep=unmeasured if "measured" in df.columns else None)
    footnotes: list[str] = []
    rows, refs = [], []
    records = df.to_dict(orient="records")
    for row in records[:limit] if limit else records:
        cells = [_cell(row, c) for c in cols]
        mine = []
        for key in notes + (("reason",) if "reason" not in notes else ()):
            text = row.get(key)
            if isinstance(text, (list, tuple)) and text:  # a list of words: named by its column
                text = f"{key.replace('_', ' ')}: {', '.join(map(str, text))}"
            if isinstance(text, str) and text.strip():
                if text not in footnotes:
                    footnotes.append(text)
                mine.append(str(footnotes.index(text) + 1))
        refs.append(mine)
        if unmeasured and not _missing(row.get("measured")) and not bool(row["measured"]):
            for c, cell in zip(cols, cells):
                if c.key == unmeasured:
                    cell.text, cell.num = "not measured", False
        if link and cells:
            cells[0].link = link(row)
        rows.append(cells)
    head = [c.label for c in cols]
    if footnotes:
        head.append("notes")
        for cells, mine in zip(rows, refs):
            cells.append(Cell(", ".join(mine), nowrap=True))
    more = max(0, len(records) - limit) if limit else 0
    return Table(head, rows, footnotes, more, stored)


def key_values(pairs: list[tuple[str, str]]) -> Table:
    """A two-column table of labels and values (the experiment as it ran)."""
    return Table(["setting", "value"], [[Cell(k), Cell(v)] for k, v in pairs], [])
