"""Render result tables for people (aligned text) and programs (CSV, JSON).

The terminal rules, one for every command:

- numbers: a column of whole numbers prints as integers; other numbers get 3 significant
  digits, written plainly from 0.001 to 999 (``0.0548``, ``1.86``, ``123``), as rounded
  integers from 1000 up (``12345``), and in scientific notation below 0.001 (``2.9e-05``);
- a list prints as its items joined by commas without spaces (``a,b``), the way lists are
  given on the command line, in the terminal and in CSV alike (JSON keeps the list); a
  passage's marks print as ``start-end:word:set`` joined by ``;``;
- missing values (None, NaN, NA) print empty;
- a table fits ``width`` columns (100 unless asked for every column): long text is shortened
  (ending in an ellipsis; a file path keeps its end instead), columns that do not fit are left off from the right (commands put
  the columns that matter first), and a line under the table names them;
- prose (notes, legends, cautions) is wrapped to the same width.

Every CSV the tool writes (``--format csv`` and a run's tables) is safe to open in a spreadsheet:
a text cell, column names included, that begins with ``=``, ``+``, ``-``, ``@``, a tab or a carriage
return gets a single quote (``'``) in front, so it is shown as text and never evaluated as a formula.
Numbers are written as numbers, a negative one included (see ``spreadsheet_safe``).
"""

from __future__ import annotations

import csv
import json
import math
import textwrap

import numpy as np
import pandas as pd

FORMATS = ("table", "csv", "json")
TERMINAL_WIDTH = 100
# in a fitted table, a text column is shortened to at most MAX_TEXT_WIDTH, and a column that
# does not fit is shown shortened only if at least MIN_TEXT_WIDTH characters of room are left
MAX_TEXT_WIDTH = 40
MIN_TEXT_WIDTH = 12
ELLIPSIS = "…"
# first characters a spreadsheet may read as the start of a formula (or, tab and CR, of a cell
# that an importer shifts so that the formula starts it)
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def plain_values(value):
    """A value (or nested dicts and lists of them) with numpy scalars, NaN and NA made JSON-ready."""
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return None if math.isnan(v) or math.isinf(v) else v
    if isinstance(value, np.bool_):
        return bool(value)
    if value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, dict):
        return {k: plain_values(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain_values(v) for v in value]
    return value


def to_records(df: pd.DataFrame) -> list[dict]:
    """Rows as dicts with plain Python values; NaN and infinities become None."""
    return [{k: plain_values(v) for k, v in row.items()} for row in df.to_dict(orient="records")]


def format_number(v) -> str:
    """One number by the terminal's rounding rule (see the module docstring); '' when missing."""
    if v is None or v is pd.NA:
        return ""
    v = float(v)
    if math.isnan(v):
        return ""
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    if v == 0:
        return "0"
    a = abs(v)
    if a >= 999.5:  # 3 significant digits would need an exponent: print the whole number
        return f"{v:.0f}"
    if a >= 0.000_999_5:
        return f"{v:.3g}"
    mantissa, exponent = f"{v:.2e}".split("e")
    return f"{mantissa.rstrip('0').rstrip('.')}e{exponent}"


def format_list(items) -> str:
    """A list field: its items joined by commas, the way lists are given on the command line; a
    passage's marks (dicts with start, end, word, set) as ``start-end:word:set`` joined by ``;``."""
    items = list(items)
    if items and all(isinstance(i, dict) and {"start", "end", "word", "set"} <= set(i) for i in items):
        from tracer.analysis.passages import marks_text
        return marks_text(items)
    return ",".join(str(plain_values(i)) for i in items)


def _cell(v) -> str:
    if isinstance(v, (list, tuple, np.ndarray)):
        return format_list(list(v))
    v = plain_values(v)
    if v is None:
        return ""
    if isinstance(v, float):
        return format_number(v)
    return str(v)


def safe_text(value):
    """``value`` with a single quote in front when it is text beginning with FORMULA_STARTS;
    anything else (numbers, None, other text) unchanged."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def spreadsheet_safe(df: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``df`` whose text cells and column names cannot start a spreadsheet formula.

    Only ``str`` cells change (by ``safe_text``); numeric columns, and numbers inside a mixed
    column, are left as they are, so ``pandas.read_csv`` reads them back unchanged.
    """
    out = df.copy()
    for c in out.columns:
        if not (pd.api.types.is_numeric_dtype(out[c]) or pd.api.types.is_bool_dtype(out[c])):
            out[c] = out[c].map(safe_text)
    out.columns = [safe_text(c) for c in out.columns]
    return out


def csv_text(df: pd.DataFrame) -> str:
    """The table as CSV without the index, its text cells made spreadsheet-safe.

    Python's csv writer (below 3.12) leaves a field holding a lone carriage return unquoted
    when rows end in ``\n``, and an importer would start a new row there (a quoted ``'\r=...``
    would become a row beginning ``=...``); a table with a carriage return in its text is
    therefore written with every text cell quoted.
    """
    return _to_csv(spreadsheet_safe(df))


def _to_csv(safe: pd.DataFrame) -> str:
    """CSV of a table already made safe, quoting every text cell when one holds a carriage return."""
    texts = [str(c) for c in safe.columns] + [v for c in safe.columns if not pd.api.types.is_numeric_dtype(safe[c])
                                              for v in safe[c] if isinstance(v, str)]
    quoting = csv.QUOTE_NONNUMERIC if any("\r" in t for t in texts) else csv.QUOTE_MINIMAL
    return safe.to_csv(index=False, quoting=quoting)


def _column_cells(col: pd.Series) -> tuple[list[str], bool]:
    """(the cells as text, whether they are numbers and so right-aligned)."""
    if pd.api.types.is_bool_dtype(col):
        return [str(bool(v)) for v in col], False
    if pd.api.types.is_numeric_dtype(col):
        values = col.to_numpy(dtype=float)
        finite = values[np.isfinite(values)]
        if len(finite) and np.all(finite == np.round(finite)) and np.all(np.abs(finite) < 1e15):
            return ["" if not np.isfinite(v) else str(int(v)) for v in values], True
        return [format_number(v) for v in values], True
    return [_cell(v) for v in col], False


def _shorten(text: str, width: int) -> str:
    """``text`` cut to ``width`` with an ellipsis; a file path keeps its end (the file's name)."""
    if len(text) <= width:
        return text
    if "/" in text and " " not in text:
        return ELLIPSIS + text[len(text) - width + 1:]
    return text[: width - 1] + ELLIPSIS


def wrap(text: str, width: int | None = TERMINAL_WIDTH) -> str:
    """Prose wrapped to ``width`` columns, paragraph by paragraph (lines of the input kept apart)."""
    if width is None:
        return text if text.endswith("\n") or not text else text + "\n"
    lines = []
    for line in text.splitlines():
        lines.append(textwrap.fill(line, width, subsequent_indent="  " if line.startswith("- ") else "",
                                   break_on_hyphens=False) if line else "")
    return "\n".join(lines) + "\n"


def _fit(widths: list[int], texty: list[bool], width: int) -> tuple[list[int], int]:
    """Column widths within ``width`` and how many columns (from the left) are shown.

    Text columns are first capped at MAX_TEXT_WIDTH; then columns are taken from the left while
    they fit; a text column that does not fit is shortened into the room left (if at least
    MIN_TEXT_WIDTH) and is the last one shown.
    """
    widths = [min(w, MAX_TEXT_WIDTH) if t else w for w, t in zip(widths, texty)]
    used = 0
    for i, (w, t) in enumerate(zip(widths, texty)):
        room = width - used - (2 if i else 0)
        if w <= room:
            used += w + (2 if i else 0)
            continue
        if t and room >= MIN_TEXT_WIDTH:
            widths[i] = room
            return widths, i + 1
        if i == 0:  # even the first column is too wide: show it shortened
            widths[0] = width
            return widths, 1
        return widths, i
    return widths, len(widths)


def table_text(df: pd.DataFrame, *, width: int | None = TERMINAL_WIDTH) -> str:
    """Aligned text of a table: numbers right-aligned, text left-aligned, fitted to ``width``
    columns (None: every column at full width)."""
    if df.empty:
        return "(no rows)\n"
    names = [str(c) for c in df.columns]
    columns = [_column_cells(df[c]) for c in df.columns]
    widths = [max([len(n)] + [len(s) for s in cells]) for n, (cells, _) in zip(names, columns)]
    texty = [not numeric for _, numeric in columns]
    shown = len(names)
    if width is not None:
        widths, shown = _fit(widths, texty, width)

    def line(values):
        parts = []
        for i in range(shown):
            v = _shorten(values[i], widths[i])
            parts.append(v.ljust(widths[i]) if texty[i] else v.rjust(widths[i]))
        return "  ".join(parts).rstrip()

    rows = [line(names)] + [line([cells[r] for cells, _ in columns]) for r in range(len(df))]
    text = "\n".join(rows) + "\n"
    if shown < len(names):
        text += wrap(f"(not shown: {', '.join(names[shown:])}; --wide shows every column)", width)
    return text


def render(df: pd.DataFrame, fmt: str = "table", *, width: int | None = TERMINAL_WIDTH) -> str:
    """The table as text in one of FORMATS (JSON: a list of objects; CSV and table: lists as ``a,b``)."""
    if fmt == "json":
        return json.dumps(to_records(df), indent=1, ensure_ascii=False) + "\n"
    if fmt == "csv":
        listy = [c for c in df.columns if df[c].map(lambda v: isinstance(v, (list, tuple))).any()]
        out = df.copy()
        for c in listy:
            out[c] = out[c].map(lambda v: format_list(v) if isinstance(v, (list, tuple)) else v)
        return csv_text(out)
    if fmt != "table":
        raise ValueError(f"unknown format {fmt!r}")
    return table_text(df, width=width)


def render_mapping(data: dict, fmt: str = "table", *, width: int | None = TERMINAL_WIDTH) -> str:
    """A flat mapping (a summary) as key-value lines, CSV or a JSON object."""
    if fmt == "json":
        return json.dumps(plain_values(data), indent=1, ensure_ascii=False) + "\n"
    values = [_cell(v) for v in data.values()]
    if fmt == "csv":
        # a number stays a number (its text is not quoted); text and lists are made safe
        cells = [safe_text(v) if isinstance(raw, (str, list, tuple)) else v for raw, v in zip(data.values(), values)]
        return _to_csv(pd.DataFrame({"key": [safe_text(k) for k in data], "value": cells}))
    key_width = max(len(k) for k in data) if data else 0
    lines = [f"{k.ljust(key_width)}  {v}" for k, v in zip(data, values)]
    if width is not None:
        lines = [_shorten(line, width) for line in lines]
    return "".join(line + "\n" for line in lines)
