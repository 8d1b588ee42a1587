"""Render result tables for people (aligned text) and programs (CSV, JSON)."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd

FORMATS = ("table", "csv", "json")


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


def _format_float(v: float, digits: int) -> str:
    if pd.isna(v):
        return ""
    if float(v).is_integer() and abs(v) < 1e15:
        return str(int(v))
    if 1e-3 <= abs(v) < 1e6:
        return f"{v:.{digits}f}"
    return f"{v:.{digits}g}"


def render(df: pd.DataFrame, fmt: str = "table", *, float_digits: int = 4) -> str:
    """The table as text in one of FORMATS (JSON: a list of objects)."""
    if fmt == "json":
        return json.dumps(to_records(df), indent=1, ensure_ascii=False) + "\n"
    if fmt == "csv":
        return df.to_csv(index=False)
    if fmt != "table":
        raise ValueError(f"unknown format {fmt!r}")
    if df.empty:
        return "(no rows)\n"
    shown = df.copy()
    for col in shown.columns:
        if pd.api.types.is_float_dtype(shown[col]):
            shown[col] = shown[col].map(lambda v: _format_float(v, float_digits))
        else:
            shown[col] = shown[col].map(lambda v: "" if plain_values(v) is None else v)
    return shown.to_string(index=False) + "\n"


def render_mapping(data: dict, fmt: str = "table") -> str:
    """A flat mapping (a summary) as key-value lines, CSV or a JSON object."""
    if fmt == "json":
        return json.dumps(plain_values(data), indent=1, ensure_ascii=False) + "\n"
    df = pd.DataFrame({"key": list(data.keys()), "value": [str(v) for v in data.values()]})
    if fmt == "csv":
        return df.to_csv(index=False)
    width = max(len(k) for k in data) if data else 0
    return "".join(f"{k.ljust(width)}  {v}\n" for k, v in data.items())
