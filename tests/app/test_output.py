"""The terminal's rules for tables: one rounding rule, lists one way, 100 columns unless --wide."""

import json
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, strategies as st

from tracer.app.output import (MIN_TEXT_WIDTH, TERMINAL_WIDTH, format_number, render,
                               render_mapping, table_text, wrap)


@pytest.mark.parametrize("value, text", [
    (0.05481699502011322, "0.0548"),  # the unrounded float the terminal used to print
    (2.897e-05, "2.9e-05"),           # small p-values in scientific notation
    (0.0123, "0.0123"),
    (1.9668135034306695, "1.97"),
    (-0.4321, "-0.432"),
    (123.456, "123"),
    (999.4, "999"),
    (999.6, "1000"),                  # 3 significant digits would need an exponent
    (12345.6, "12346"),
    (0.0009996, "0.001"),             # rounds up into the plain range
    (0.000123456, "1.23e-04"),
    (-3.039e-04, "-3.04e-04"),
    (0.0, "0"),
    (float("nan"), ""),
    (None, ""),
])
def test_the_rounding_rule(value, text):
    assert format_number(value) == text


@given(st.floats(min_value=-1e12, max_value=1e12, allow_nan=False).filter(lambda v: v != 0))
def test_a_rounded_number_keeps_three_significant_digits(v):
    # reference: Python's own rounding to 3 significant digits ('.3g' of the format mini-language)
    shown = float(format_number(v))
    if abs(v) < 999.5:
        assert shown == pytest.approx(float(f"{v:.3g}"), rel=1e-9, abs=0)
    else:  # whole numbers from 1000 up: rounded to the integer, never coarser
        assert abs(shown - v) <= 0.5


def test_a_column_of_whole_numbers_prints_as_integers_and_others_by_the_rule():
    df = pd.DataFrame({"count": [12.0, 5.0, np.nan], "pmi": [0.19366, 2.5651, np.nan]})
    lines = table_text(df).splitlines()
    assert lines[1].split() == ["12", "0.194"] and lines[2].split() == ["5", "2.57"]
    assert lines[3].strip() == ""  # missing values print empty


def test_lists_print_as_comma_joined_items_in_table_and_csv_and_stay_lists_in_json():
    df = pd.DataFrame({"test": ["a", "b"], "dropped_words": [["ardo", "kessa"], []]})
    assert table_text(df).splitlines()[1].split() == ["a", "ardo,kessa"]
    assert render(df, "csv").splitlines()[1:] == ['a,"ardo,kessa"', "b,"]
    assert json.loads(render(df, "json"))[0]["dropped_words"] == ["ardo", "kessa"]


def test_a_mapping_prints_missing_values_empty_not_none():
    text = render_mapping({"first_year": None, "documents": 7})
    assert text.splitlines() == ["first_year  ", "documents   7"]


def wide_frame(n_columns=30, rows=3):
    return pd.DataFrame({f"column_{i:02d}": np.linspace(0.001, 1000, rows) + i for i in range(n_columns)})


def test_a_wide_table_fits_the_terminal_and_names_what_it_left_off():
    df = wide_frame()
    text = table_text(df)
    lines = text.splitlines()
    assert max(len(line) for line in lines) <= TERMINAL_WIDTH
    shown = lines[0].split()
    assert shown == list(df.columns[:len(shown)]) and len(shown) < len(df.columns)  # the leftmost kept, in order
    footer = " ".join(lines[len(df) + 1:])
    assert footer.startswith("(not shown: ") and all(c in footer for c in df.columns[len(shown):])
    full = table_text(df, width=None).splitlines()
    assert full[0].split() == list(df.columns) and "(not shown" not in "".join(full)


def test_long_text_is_shortened_into_the_room_left_and_short_ids_are_not():
    df = pd.DataFrame({"doc_id": ["gazette-1966-00161"], "title": ["x" * 300], "tokens": [107]})
    lines = table_text(df).splitlines()
    assert lines[1].startswith("gazette-1966-00161  ") and "…" in lines[1]
    assert max(len(line) for line in lines) <= TERMINAL_WIDTH
    # a text column with less room than MIN_TEXT_WIDTH left is not squeezed in
    narrow = table_text(df, width=len("gazette-1966-00161") + MIN_TEXT_WIDTH - 1).splitlines()
    assert narrow[0].split() == ["doc_id"]


def test_a_shortened_path_keeps_the_file_name():
    df = pd.DataFrame({"input": ["/tmp/" + "deep/" * 20 + "news.jsonl.gz"], "documents": [3]})
    cell = table_text(df).splitlines()[1].split()[0]
    assert cell.startswith("…") and cell.endswith("/news.jsonl.gz") and len(cell) <= 40


def test_prose_wraps_to_the_width():
    text = wrap("word " * 60)
    assert all(len(line) <= TERMINAL_WIDTH for line in text.splitlines()) and len(text.splitlines()) > 1
    assert wrap("a\n\nb") == "a\n\nb\n"


def test_nan_and_infinity_in_json_are_null():
    out = json.loads(render(pd.DataFrame({"x": [math.nan, math.inf, 1.5]}), "json"))
    assert [r["x"] for r in out] == [None, None, 1.5]
