import json
import math

import pytest
from click.testing import CliRunner

from tests.conftest import LEE_SOURCES, lee_documents, write_jsonl
from tracer.app.cli import cli
from tracer.core.counting import CountSettings
from tracer.provenance.counts import count_slice
from tracer.corpus.slices import slice_from_spec
from tracer.corpus.workspace import Workspace
from tracer.core.pmi import Marginals

def run(*args, ok=True):
    result = CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)
    if ok:
        assert result.exit_code == 0, result.output
    return result


@pytest.fixture(scope="module")
def cli_ws(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    records = [{"id": f"n{i}", "source": LEE_SOURCES[i % 3], "time": 1990 + i % 20, "text": t}
               for i, t in enumerate(lee_documents()) if t.strip()]
    write_jsonl(folder / "lee.jsonl", records)
    run("ingest", folder / "lee.jsonl", "-w", folder / "ws")
    return folder / "ws"


def test_ingest_then_info(cli_ws):
    out = json.loads(run("info", "-w", cli_ws, "--format", "json").stdout)
    assert out["documents"] == 300 and out["sources"] == 3 and (out["first_year"], out["last_year"]) == (1990, 2009)
    table = run("info", "-w", cli_ws, "--sources", "--format", "csv").stdout.splitlines()
    assert table[0] == "source,documents,tokens,first_year,last_year,token_share"
    assert [line.split(",")[0] for line in table[1:]] == sorted(LEE_SOURCES)


def test_ingest_twice_says_already_ingested(cli_ws, tmp_path):
    again = run("ingest", cli_ws.parent / "lee.jsonl", "-w", cli_ws, "--format", "json")
    assert json.loads(again.stdout)[0]["status"] == "already ingested"


def test_pmi_json_has_the_documented_keys_and_values(cli_ws):
    ws = Workspace(cli_ws)
    rare = next(w for w, c in zip(ws.vocab.words, ws.vocab.counts) if c == 2)
    out = json.loads(run("pmi", "-w", cli_ws, "police", "--with", f"said,fire,{rare}", "--by", "source",
                         "--format", "json").stdout)
    assert len(out) == 9
    assert set(out[0]) == {"slice", "word", "context", "count", "word_count", "context_count", "pmi", "ppmi", "note"}
    row = next(r for r in out if r["slice"] == "source=Ashford Post" and r["context"] == "said")
    c = count_slice(ws, slice_from_spec(ws, "source=Ashford Post").weights, CountSettings())
    i, j = c.vocab.index["police"], c.vocab.index["said"]
    m = Marginals.of(c.matrix, 0.75)
    assert row["count"] == c.matrix[i, j] and row["word_count"] == c.row_sums[i]
    expected = math.log(c.matrix[i, j]) - math.log(m.rows[i]) - 0.75 * math.log(m.cols[j]) + m.log_z
    assert row["pmi"] == pytest.approx(expected, rel=1e-12) and row["ppmi"] == pytest.approx(max(expected, 0))
    missing = [r for r in out if r["context"] == rare]
    assert len(missing) == 3
    assert all(r["pmi"] is None and r["note"] == f"below min count 5 in this slice: {rare}" for r in missing)


def test_train_models_export_neighbours(cli_ws, tmp_path):
    table = run("train", "-w", cli_ws, "--model", "ppmi-svd", "--by", "source", "--dim", "20", "--format", "json")
    rows = json.loads(table.stdout)
    assert [r["slice"] for r in rows] == [f"source={s}" for s in sorted(LEE_SOURCES)]
    run("train", "-w", cli_ws, "--model", "word2vec", "--dim", "10", "--epochs", "1", "--seed", "3")
    listed = json.loads(run("models", "-w", cli_ws, "--format", "json").stdout)
    assert {(m["model"], m["slice"]) for m in listed} >= {("word2vec", "all"), ("ppmi-svd", "source=Bramble Wire")}
    run("export", "-w", cli_ws, "--model", "ppmi-svd", "--slice", "source=Bramble Wire", "-o", tmp_path / "v.txt")
    from gensim.models import KeyedVectors
    kv = KeyedVectors.load_word2vec_format(str(tmp_path / "v.txt"))
    assert kv.vector_size == 20 and len(kv) == rows[1]["words"]
    near = json.loads(run("neighbours", "police", "-w", cli_ws, "--model", "word2vec", "-n", "3",
                          "--format", "json").stdout)
    assert [r["rank"] for r in near] == [1, 2, 3] and all(r["word"] == "police" for r in near)


def test_out_file_is_written(cli_ws, tmp_path):
    res = run("info", "-w", cli_ws, "--format", "json", "-o", tmp_path / "info.json")
    assert res.stdout == ""
    assert json.loads((tmp_path / "info.json").read_text())["documents"] == 300


@pytest.mark.parametrize("args, message", [
    (["info", "-w", "{tmp}/nowhere"], "Error: no corpus in workspace {tmp}/nowhere; run  tracer ingest FILE -w {tmp}/nowhere  first"),
    (["ingest", "{tmp}/missing.jsonl", "-w", "{tmp}/w"], "Error: {tmp}/missing.jsonl: no such file or folder"),
    (["pmi", "-w", "{ws}", "zzqx", "--with", "police"], "Error: not in the corpus at all: zzqx"),
    (["pmi", "-w", "{ws}", "police", "--with", "said", "--slice", "source=Nowhere"],
     "Error: slice source=Nowhere has no documents; the sources are: Ashford Post, Bramble Wire, Cinder Daily"),
    (["export", "-w", "{ws}", "--model", "word2vec", "--slice", "time=1995", "-o", "{tmp}/x.txt"],
     "Error: no word2vec model for slice time=1995"),
    (["train", "-w", "{ws}", "--slice", "time=1995", "--dim", "4000"],
     "Error: slice time=1995 has"),
])
def test_user_errors_are_one_line(cli_ws, tmp_path, args, message):
    args = [a.format(tmp=tmp_path, ws=cli_ws) for a in args]
    res = CliRunner().invoke(cli, args)
    assert res.exit_code == 1
    lines = res.stderr.strip().splitlines()
    assert lines[-1].startswith(message.format(tmp=tmp_path, ws=cli_ws))
    assert "Traceback" not in res.output and sum(line.startswith("Error:") for line in lines) == 1


def test_strict_ingest_fails_with_file_and_line(tmp_path):
    p = tmp_path / "bad.jsonl"
    p.write_text('{"text": "fine words"}\n{"text": "x", "time": "later"}\n', encoding="utf-8")
    res = CliRunner().invoke(cli, ["ingest", str(p), "-w", str(tmp_path / "w"), "--strict"])
    assert res.exit_code == 1
    assert res.stderr.startswith(f"Error: {p}, line 2: field 'time': cannot read a time from 'later'")


def test_rejects_are_reported(tmp_path):
    p = tmp_path / "some.jsonl"
    p.write_text('{"text": "fine words"}\n{"text": ""}\nnot json\n', encoding="utf-8")
    res = run("ingest", p, "-w", tmp_path / "w")
    assert "2 records skipped (empty text: 1, malformed JSON: 1); see" in res.stderr


def test_debug_shows_the_traceback(tmp_path):
    res = CliRunner().invoke(cli, ["--debug", "info", "-w", str(tmp_path / "none")])
    assert res.exit_code == 1 and "Traceback" in res.stderr


LIMIT_PARAMS = ("max_record_mb", "max_line_mb", "max_depth", "max_gzip_ratio")


def test_the_ingest_limits_default_to_read_limits():
    from tracer.app.cli.corpus_commands import _limits
    from tracer.corpus.streams import ReadLimits
    params = {p.name: p for p in cli.commands["ingest"].params}
    # each option's default, converted as click converts it, gives the library's own limits
    defaults = {name: params[name].type_cast_value(None, params[name].default) for name in LIMIT_PARAMS}
    assert _limits(defaults) == {"limits": ReadLimits()}


# other defaults given to ReadLimits before the command line is imported: the ingest options
# must follow them (with the limits written as literals in the CLI they would not)
OTHER_LIMITS = """
import dataclasses, json
import tracer.corpus.streams as streams
base = streams.ReadLimits
streams.ReadLimits = dataclasses.make_dataclass("ReadLimits", [
    ("max_record_bytes", int, dataclasses.field(default=3 * 2 ** 20)),
    ("max_line_bytes", int, dataclasses.field(default=5 * 2 ** 19)),
    ("max_depth", int, dataclasses.field(default=17)),
    ("max_gzip_ratio", float, dataclasses.field(default=33.5)),
    ("gzip_ratio_floor_bytes", int, dataclasses.field(default=2 ** 20))], bases=(base,), frozen=True)
from tracer.app.cli import cli
params = {p.name: p for p in cli.commands["ingest"].params}
print(json.dumps({n: params[n].default for n in %r}))
print([p.help for p in cli.commands["ingest"].params if p.name == "max_gzip_ratio"][0])
"""


def test_the_ingest_limits_follow_read_limits_when_its_defaults_change():
    import subprocess
    import sys
    res = subprocess.run([sys.executable, "-c", OTHER_LIMITS % (LIMIT_PARAMS,)], capture_output=True, text=True,
                         timeout=120)
    assert res.returncode == 0, res.stderr
    defaults, gzip_help = res.stdout.splitlines()
    assert json.loads(defaults) == {"max_record_mb": 3, "max_line_mb": 2.5, "max_depth": 17, "max_gzip_ratio": 33.5}
    assert gzip_help.endswith("(checked past 1 MB).")
