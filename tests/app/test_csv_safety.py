"""Every CSV the tool writes is safe to open in a spreadsheet: text that could start a formula gets a
single quote in front (the rule of OWASP's CSV-injection guidance: cells beginning with = + - @, tab
or carriage return), while numbers, negative ones included, are written and read back unchanged."""

import csv
import io
import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from tests.conftest import LEE_TESTS, lee_documents, write_jsonl
from tracer.app.cli import cli
from tracer.app.output import render, render_mapping, spreadsheet_safe
from tracer.app.pipeline import run_experiment
from tracer.provenance.experiment import load_experiment

HOSTILE = ['=HYPERLINK("http://evil.example","see")', "-cmd"]
SOURCES = HOSTILE + ["Plain Post"]

EXPERIMENT = """
[corpus]
inputs = ["lee.jsonl"]
workspace = "ws"
[counts]
min_count = 3
[models]
ppmi_svd = { dim = 20 }
[measure]
tests = "tests.toml"
bootstrap = 0
[trace]
tests = ["power"]
verify = 0
"""


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    """A run of the Lee corpus whose sources are named like formulas."""
    folder = tmp_path_factory.mktemp("hostile")
    records = [{"id": f"n{i}", "source": SOURCES[i % 3], "time": 1990 + i % 20, "text": t}
               for i, t in enumerate(lee_documents()) if t.strip()]
    write_jsonl(folder / "lee.jsonl", records)
    (folder / "tests.toml").write_text(LEE_TESTS, encoding="utf-8")
    (folder / "exp.toml").write_text(EXPERIMENT, encoding="utf-8")
    return run_experiment(load_experiment(folder / "exp.toml"))


def _cells(text: str) -> list[list[str]]:
    # the standard library's csv reader: the cells exactly as a spreadsheet importer receives them
    return list(csv.reader(io.StringIO(text)))


def test_a_run_table_quotes_formula_like_source_names_and_keeps_its_numbers(hostile_run):
    tables = hostile_run.folder / "tables"
    rows = _cells((tables / "trace_power_sources.csv").read_text(encoding="utf-8"))
    header = rows[0]
    names = [r[header.index("source")] for r in rows[1:]]
    assert sorted(names) == sorted(["'" + s for s in HOSTILE] + ["Plain Post"])
    # numbers: the CSV read back by pandas equals the JSON twin written from the same table (read with
    # pandas' exact float parser: before pandas 2.2 its default fast parser may be off by one ulp)
    back = pd.read_csv(tables / "trace_power_sources.csv", float_precision="round_trip")
    twin = pd.DataFrame(json.loads((tables / "trace_power_sources.json").read_text(encoding="utf-8")))
    numeric = [c for c in twin.columns if pd.api.types.is_numeric_dtype(twin[c])]
    assert "contribution" in numeric and (twin["contribution"] < 0).any()  # a negative number is there
    for c in numeric:
        assert pd.api.types.is_numeric_dtype(back[c]), c
        np.testing.assert_array_equal(back[c].to_numpy(float), twin[c].to_numpy(float), err_msg=c)


def test_the_csv_format_of_a_command_quotes_formula_like_source_names(hostile_run):
    ws = hostile_run.folder.parent.parent  # WORKSPACE/runs/RUN_ID
    res = CliRunner().invoke(cli, ["info", "-w", str(ws), "--sources", "--format", "csv"])
    assert res.exit_code == 0, res.output
    rows = _cells(res.stdout)
    assert sorted(r[0] for r in rows[1:]) == sorted(["'" + s for s in HOSTILE] + ["Plain Post"])
    back = pd.read_csv(io.StringIO(res.stdout))
    assert pd.api.types.is_integer_dtype(back["documents"]) and back["documents"].tolist() == [100, 100, 100]


@pytest.mark.parametrize("text", ["=1+1", "+1", "-x", "@SUM(A1)", "\tx", "\rx"])
def test_every_formula_start_is_quoted_in_cells_and_column_names(text):
    df = pd.DataFrame({"word": [text, "plain"], text: [1, 2]})
    rows = _cells(render(df, "csv"))
    assert rows[0] == ["word", "'" + text] and rows[1][0] == "'" + text and rows[2][0] == "plain"


def test_a_carriage_return_inside_a_cell_cannot_start_a_new_row():
    df = pd.DataFrame({"word": ["a\r=cmd", "b"], "score": [-1.5, 2.0]})
    out = render(df, "csv")
    assert _cells(out)[1:] == [["a\r=cmd", "-1.5"], ["b", "2.0"]]
    pd.testing.assert_frame_equal(pd.read_csv(io.StringIO(out), float_precision="round_trip"), df)


def test_numbers_are_never_quoted_and_read_back_unchanged():
    df = pd.DataFrame({"word": ["a", "b", "c"], "score": [-0.5, 1e-300, -123456.789012345],
                       "count": [-3, 0, 7], "mixed": ["-y", -2.5, None]})
    out = render(df, "csv")
    back = pd.read_csv(io.StringIO(out), float_precision="round_trip")
    pd.testing.assert_frame_equal(back[["word", "score", "count"]], df[["word", "score", "count"]])
    assert [r[3] for r in _cells(out)[1:]] == ["'-y", "-2.5", ""]
    assert spreadsheet_safe(df)["score"].dtype == np.float64


def test_a_summary_in_csv_keeps_numbers_and_quotes_text():
    rows = _cells(render_mapping({"statistic": -0.5, "name": "-cmd", "=key": "x", "words": ["-a", "b"]}, "csv"))
    assert rows[1:] == [["statistic", "-0.5"], ["name", "'-cmd"], ["'=key", "x"], ["words", "'-a,b"]]
    assert _cells(render_mapping({"name": "a\r=b", "n": 2}, "csv"))[1:] == [["name", "a\r=b"], ["n", "2"]]
