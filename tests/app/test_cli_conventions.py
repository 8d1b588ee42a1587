"""The conventions every command keeps (the README's list), checked by walking every command.

A small workspace (every fifth document of the demo archive) gives each command a run that takes
seconds; each run is made once per format and shared by the checks below.
"""

import csv
import gzip
import io
import json
import warnings
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

from tests.conftest import DEMO_CORPUS, write_jsonl
from tracer.app.cli import cli
from tracer.app.output import TERMINAL_WIDTH

ROOT = Path(__file__).resolve().parents[2]
README = ROOT / "README.md"
TESTS = ROOT / "configs" / "demo_tests.toml"
SHARES = ROOT / "corpora_demo" / "occupation_shares.csv"

# commands whose result is a file or a run, not a table
NO_TABLE = {"export", "report", "run", "demo", "verify", "cache"}

# a small run of every table command ({ws}: the workspace); ingest runs in the fixture
SMALL_RUNS = {
    "info": ["info", "-w", "{ws}"],
    "models": ["models", "-w", "{ws}"],
    "pmi": ["pmi", "-w", "{ws}", "nurse", "--with", "he,she", "--by", "source"],
    "train": ["train", "-w", "{ws}", "--dim", "10", "--slice", "source=Gazette"],
    "neighbours": ["neighbours", "-w", "{ws}", "harbour,wheat", "-n", "3"],
    "passages": ["passages", "-w", "{ws}", "velmari", "--with", "agony,evil", "--top", "2"],
    "measure": ["measure", "-w", "{ws}", "--tests", str(TESTS), "--test", "gazette_outlet", "--test",
                "occupations", "--dim", "20", "--bootstrap", "2"],
    "correlate": ["correlate", "-w", "{ws}", "--tests", str(TESTS), "--test", "occupations", "--table", str(SHARES),
                  "--word-column", "occupation", "--value-column", "share_women", "--dim", "20",
                  "--resamples", "20"],
    "ablate": ["ablate", "-w", "{ws}", "--tests", str(TESTS), "--test", "gazette_outlet", "--drop",
               "source=Gazette", "--dim", "20", "--bootstrap", "0"],
    "plan": ["plan", "-w", "{ws}", "--tests", str(TESTS), "--test", "tribune_mix", "--goal", "1.0", "--unit",
             "source", "--dim", "20"],
    "drift": ["drift", "-w", "{ws}", "--tests", str(TESTS), "--test", "tribune_mix", "--by", "time:20y", "--dim",
              "20", "--bootstrap", "2", "--min-tokens", "1000"],
    "trace": ["trace", "-w", "{ws}", "--tests", str(TESTS), "--test", "gazette_outlet", "--dim", "20", "--top", "3",
              "--per-doc", "1", "--verify", "1"],
}


def invoke(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    folder = tmp_path_factory.mktemp("conventions")
    with gzip.open(DEMO_CORPUS, "rt", encoding="utf-8") as f:
        records = [json.loads(line) for line in f][::5]
    write_jsonl(folder / "small.jsonl", records)
    ingested = invoke("ingest", folder / "small.jsonl", "-w", folder / "ws")
    assert ingested.exit_code == 0, ingested.output
    trained = invoke("train", "-w", folder / "ws", "--dim", "20")
    assert trained.exit_code == 0, trained.output
    return {"ws": folder / "ws", "ingest": ingested}


@pytest.fixture(scope="module")
def outputs(small):
    """name -> format -> the result of the small run (computed on first use)."""
    cache: dict = {}

    def get(name, fmt="table"):
        if (name, fmt) not in cache:
            args = [a.format(ws=small["ws"]) for a in SMALL_RUNS[name]]
            cache[name, fmt] = invoke(*args, "--format", fmt)
        return cache[name, fmt]

    return get


def test_the_lists_of_commands_are_complete():
    assert set(SMALL_RUNS) | NO_TABLE | {"ingest"} == set(cli.commands)


@pytest.mark.parametrize("name", sorted(cli.commands))
def test_every_command_has_a_summary_line_an_example_and_a_place_in_the_readme(name):
    command = cli.commands[name]
    summary = command.help.split("\n\n")[0]
    assert "\n" not in summary.strip() and summary.strip().endswith("."), name
    assert "Example:  tracer " + name in command.help, name
    assert f"tracer {name}" in README.read_text(encoding="utf-8"), f"README does not show tracer {name}"


def _option(command, name):
    found = [p for p in command.params if p.name == name]
    return found[0] if found else None


@pytest.mark.parametrize("name", sorted(set(cli.commands) - NO_TABLE))
def test_every_table_command_takes_the_shared_output_options(name):
    command = cli.commands[name]
    fmt, out, wide = (_option(command, n) for n in ("fmt", "out", "wide"))
    assert fmt is not None and list(fmt.type.choices) == ["table", "csv", "json"] and fmt.default == "table"
    assert out is not None and out.opts == ["-o", "--out"] and not out.required
    assert wide is not None and wide.is_flag


# options that take a different default or form on purpose, and why
DIFFERENT_ON_PURPOSE = {
    "slice_spec": "one slice (default all) where a command works on one, --slice repeatable where on several",
    "by": "drift needs periods and defaults to time:10y; elsewhere --by is optional",
    "model": "train/measure choose the model to train; export/neighbours the stored model to read",
    "out": "required where the result is a file (export, report)",
    "workspace": "demo makes its own workspace when none is given",
    "tests_file": "drift can run on --words instead",
    "test_name": "one test for trace, plan and correlate, with its own help",
    "picks": "several slices: the same in every command that takes them",
    "show": "the tables differ by command; measure prints one of its tables, trace, drift and plan several",
}


def test_an_option_means_the_same_in_every_command():
    seen: dict[str, tuple] = {}
    for name, command in sorted(cli.commands.items()):
        for p in command.params:
            if p.name in DIFFERENT_ON_PURPOSE or not isinstance(p, click.Option):
                continue
            key = (tuple(p.opts), p.default, p.help, getattr(p.type, "choices", None), p.multiple)
            first = seen.setdefault(p.name, (name, key))
            assert first[1] == key, f"{p.opts} differs between {first[0]} and {name}"
    assert seen["seeds"][1][1] == 3 and seen["bootstrap"][1][1] is None  # None: 20 for ppmi-svd, 0 for word2vec


def test_correlate_resamples_words_and_has_no_document_bootstrap():
    params = {p.name for p in cli.commands["correlate"].params}
    assert "resamples" in params and "bootstrap" not in params


@pytest.mark.parametrize("name", sorted(SMALL_RUNS))
def test_default_table_output_of_a_small_run_fits_100_columns(outputs, name):
    res = outputs(name)
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert lines, name
    too_wide = [line for line in lines if len(line) > TERMINAL_WIDTH]
    assert not too_wide, f"{name}: {len(too_wide)} lines over {TERMINAL_WIDTH} columns, e.g. {too_wide[0]!r}"


def test_ingest_output_fits_100_columns(small):
    assert all(len(line) <= TERMINAL_WIDTH for line in small["ingest"].stdout.splitlines())


@pytest.mark.parametrize("name", sorted(SMALL_RUNS))
def test_csv_and_json_of_a_small_run_are_machine_readable(outputs, name):
    as_csv, as_json = outputs(name, "csv"), outputs(name, "json")
    assert as_csv.exit_code == 0 and as_json.exit_code == 0, as_csv.output + as_json.output
    rows = list(csv.reader(io.StringIO(as_csv.stdout)))
    assert len(rows) >= 2 and all(len(r) == len(rows[0]) for r in rows), name
    assert json.loads(as_json.stdout), name
    assert "Note:" not in as_csv.stdout and "Note:" not in as_json.stdout


def test_wide_shows_every_column_that_the_default_leaves_off(outputs, small):
    narrow = outputs("trace").stdout
    assert "(not shown:" in narrow
    left_off = narrow.split("(not shown: ", 1)[1].split(";", 1)[0].split(", ")
    wide = invoke(*[a.format(ws=small["ws"]) for a in SMALL_RUNS["trace"]], "--wide")
    header = next(line for line in wide.stdout.splitlines() if line.startswith("source "))
    assert max(len(line) for line in wide.stdout.splitlines()) > TERMINAL_WIDTH
    assert all(col in header.split() for col in left_off if col in ("linear_estimate", "share_ratio"))


def test_trace_shows_sources_documents_and_passages_and_the_first_order_table_on_request(outputs, small):
    text = outputs("trace").stdout
    assert [line for line in text.splitlines() if line.startswith("== ")] == [
        "== sources ==", "== documents ==", "== passages ==", "== verification =="]
    assert SMALL_RUNS["trace"][-2:] == ["--verify", "1"]
    args = [a.format(ws=small["ws"]) for a in SMALL_RUNS["trace"][:-2]]
    first_order = invoke(*args, "--show", "first-order")
    assert first_order.exit_code == 0, first_order.output
    assert [line for line in first_order.stdout.splitlines() if line.startswith("== ")] == ["== first-order =="]


def test_trace_passages_in_the_kwic_layout_fit_100_columns(small):
    args = [a.format(ws=small["ws"]) for a in SMALL_RUNS["trace"][:-2]]
    res = invoke(*args, "--per-doc", "3", "--layout", "kwic")
    assert res.exit_code == 0, res.output
    passages = res.stdout.split("== passages ==\n", 1)[1].split("\n\n", 1)[0].splitlines()
    assert any(line.split()[0].startswith(("targets_", "attributes_")) for line in passages if line.startswith("  "))
    assert all(len(line) <= TERMINAL_WIDTH for line in res.stdout.splitlines())


def test_list_fields_print_as_comma_joined_words(outputs):
    measured = outputs("measure", "json")
    assert json.loads(measured.stdout)[0]["dropped_words"] == []  # JSON keeps the list
    from tracer.app.output import render
    import pandas as pd
    df = pd.DataFrame({"dropped_words": [["ardo", "kessa"], []], "n": [1, 2]})
    assert render(df).splitlines()[1].split()[0] == "ardo,kessa"
    assert render(df, "csv").splitlines()[1] == '"ardo,kessa",1'


def test_plan_o_is_the_plan_and_the_drop_list_has_its_own_option(small, tmp_path):
    args = [a.format(ws=small["ws"]) for a in SMALL_RUNS["plan"]]
    res = invoke(*args, "-o", tmp_path / "plan.csv", "--format", "csv", "--drop-list", tmp_path / "drop.txt")
    assert res.exit_code == 0, res.output
    assert res.stdout == ""
    reader = csv.DictReader(io.StringIO((tmp_path / "plan.csv").read_text(encoding="utf-8")))
    rounds = list(reader)
    assert reader.fieldnames[0] == "round" and rounds[0]["round"] == "0"  # the main table: the rounds
    ids = (tmp_path / "drop.txt").read_text(encoding="utf-8").split()
    whole = json.loads(invoke(*args, "--format", "json").stdout)
    from tracer.corpus.workspace import Workspace
    docs = Workspace(small["ws"]).documents
    assert sorted(ids) == sorted(docs.doc_id[docs.source.isin(whole["removed_items"])])


def test_unknown_words_are_skipped_with_a_note_where_the_command_can_go_on(small):
    res = invoke("neighbours", "-w", small["ws"], "zzzblorp,harbour", "-n", "2")
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert [line.split()[0] for line in lines[1:3]] == ["harbour", "harbour"]
    assert lines[-1] == "Note: skipped, not in the ppmi-svd model of slice all: zzzblorp"
    as_csv = invoke("neighbours", "-w", small["ws"], "zzzblorp,harbour", "-n", "2", "--format", "csv")
    assert as_csv.stdout.splitlines()[0] == "word,rank,neighbour,cosine" and len(as_csv.stdout.splitlines()) == 3
    assert as_csv.stderr == "Note: skipped, not in the ppmi-svd model of slice all: zzzblorp\n"
    pmi = invoke("pmi", "-w", small["ws"], "nurse", "--with", "she,zzqx")
    assert pmi.exit_code == 0 and pmi.stdout.splitlines()[-1] == "Note: skipped, not in the corpus at all: zzqx"


@pytest.mark.parametrize("args, first_line", [
    (["neighbours", "-w", "{ws}", "zzzblorp"],
     "Error: the word 'zzzblorp' is not in the vocabulary of ppmi-svd slice all"),
    (["pmi", "-w", "{ws}", "nurse", "--with", "zzqx"], "Error: not in the corpus at all: zzqx"),
    (["trace", "-w", "{ws}", "--tests", str(TESTS), "--test", "gazette_outlet", "--format", "csv", "--show",
      "sources", "--show", "documents"],
     "Error: CSV holds one table; give one --show (one of sources, documents, passages, first-order, verification)"),
    (["trace", "-w", "{ws}", "--tests", str(TESTS), "--test", "gazette_outlet", "--show", "verification"],
     "Error: there is no verification table without --verify K"),
    (["drift", "-w", "{ws}", "--words", "harbour", "--show", "trend"],
     "Error: --show trend: the tables with --words are change, neighbours"),
])
def test_user_errors_are_one_exact_line_and_exit_1(small, args, first_line):
    res = invoke(*[a.format(ws=small["ws"]) for a in args])
    assert res.exit_code == 1
    assert res.stderr.splitlines() == [first_line]
    assert res.stdout == ""


def warning_group():
    """A group run by the CLI's own handler, with commands that make numpy warn."""
    import numpy as np

    from tracer.app.cli.group import TracerGroup
    from tracer.errors import SettingError

    @click.group(cls=TracerGroup)
    @click.option("--debug", is_flag=True)
    @click.pass_context
    def group(ctx, debug):
        ctx.obj = {"debug": debug}

    @group.command()
    def fine():
        np.log(np.zeros(1))  # numpy: RuntimeWarning, divide by zero encountered in log
        click.echo("result")

    @group.command()
    def deprecated():
        warnings.warn("an API for programmers will change", DeprecationWarning)
        click.echo("result")

    @group.command()
    def fails():
        np.log(np.zeros(1))
        raise SettingError("bad setting")

    return group


def test_library_warnings_become_one_note_after_the_result_and_never_precede_an_error():
    group = warning_group()
    ok = CliRunner().invoke(group, ["fine"])
    assert ok.exit_code == 0 and ok.stdout == "result\n"
    assert ok.stderr == ("Note: libraries warned 1 time (RuntimeWarning: divide by zero encountered in log); "
                         "--debug shows where.\n")
    failed = CliRunner().invoke(group, ["fails"])
    assert failed.exit_code == 1 and failed.stderr == "Error: bad setting\n"
    quiet = CliRunner().invoke(group, ["deprecated"])
    assert quiet.exit_code == 0 and quiet.stderr == ""
    debug = CliRunner().invoke(group, ["--debug", "fails"])
    assert debug.exit_code == 1 and "RuntimeWarning: divide by zero" in debug.stderr
    assert "Traceback" in debug.stderr and debug.stderr.splitlines()[-1] == "Error: bad setting"


def test_progress_bars_go_to_stderr_with_counts_only_when_asked_or_on_a_terminal(small):
    args = ["train", "-w", small["ws"], "--dim", "5", "--slice", "source=Gazette", "--slice", "source=Ledger"]
    shown = invoke("--progress", *args)
    assert shown.exit_code == 0 and "train:" in shown.stderr and "/2 [" in shown.stderr
    assert "/2 [" not in shown.stdout
    quiet = invoke(*args)  # the test runner's stderr is not a terminal
    assert quiet.exit_code == 0 and "/2 [" not in quiet.stderr
