import gzip
import json
import os

import pytest

from tracer.corpus.ingest import FieldMap
from tracer.corpus.readers import RawRecord, Reject, read_records
from tracer.errors import InputError, SettingError


def _read(path, fmt=None):
    return list(read_records(path, fmt))


def test_jsonl_plain_and_gzip_give_the_same_records(tmp_path):
    text = b'{"id": 1, "text": "a b"}\n\n{"id": 2, "text": "c"}\n'
    (tmp_path / "a.jsonl").write_bytes(text)
    (tmp_path / "a.jsonl.gz").write_bytes(gzip.compress(text))
    plain, zipped = _read(tmp_path / "a.jsonl"), _read(tmp_path / "a.jsonl.gz")
    assert [r.fields for r in plain] == [r.fields for r in zipped] == [{"id": 1, "text": "a b"}, {"id": 2, "text": "c"}]
    assert [r.line for r in plain] == [1, 3]  # blank lines are skipped, line numbers kept


def test_jsonl_bad_lines_are_rejected_with_their_line(tmp_path):
    p = tmp_path / "bad.jsonl"
    p.write_bytes(b'{"text": "ok"}\n{"text": broken}\n[1, 2]\n{"text": "caf\xe9"}\n')
    out = _read(p)
    assert isinstance(out[0], RawRecord)
    assert [(r.line, r.reason.split(":")[0].split(" (")[0]) for r in out[1:]] == [
        (2, "malformed JSON"), (3, "a JSON object was expected, found list"), (4, "not valid UTF-8")]
    assert all(isinstance(r, Reject) and r.file == str(p) for r in out[1:])


def test_csv_records_and_bad_rows(tmp_path):
    p = tmp_path / "c.csv"
    p.write_bytes(b'id,text,source\n1,"hello, world",A\n2,"multi\nline",B\n3,short\n4,a,b,extra\n5,caf\xe9,C\n')
    out = _read(p)
    assert out[0].fields == {"id": "1", "text": "hello, world", "source": "A"}
    assert out[1].fields["text"] == "multi\nline" and out[1].line == 3
    assert [(r.line, r.reason) for r in out[2:]] == [
        (5, "fewer fields than the header names"), (6, "more fields than the header names"), (7, "not valid UTF-8")]


def test_txt_folder_takes_the_source_from_the_subfolder(tmp_path):
    (tmp_path / "docs" / "Alpha").mkdir(parents=True)
    (tmp_path / "docs" / "Beta").mkdir()
    (tmp_path / "docs" / "Alpha" / "one.txt").write_text("first text", encoding="utf-8")
    (tmp_path / "docs" / "Beta" / "two.txt").write_text("second text", encoding="utf-8")
    (tmp_path / "docs" / "Beta" / "bad.txt").write_bytes(b"\xff\xfe")
    (tmp_path / "docs" / "notes.md").write_text("ignored", encoding="utf-8")
    out = _read(tmp_path / "docs")
    good = [r for r in out if isinstance(r, RawRecord)]
    assert [(r.fields["id"], r.fields["source"], r.fields["text"]) for r in good] == [
        ("Alpha/one", "Alpha", "first text"), ("Beta/two", "Beta", "second text")]
    assert [r.reason.split(" (")[0] for r in out if isinstance(r, Reject)] == ["not valid UTF-8"]


def test_parquet(tmp_path):
    pa = pytest.importorskip("pyarrow")  # pyarrow is in the test extra, so this runs in CI
    import pyarrow.parquet as pq
    pq.write_table(pa.table({"id": ["a", "b"], "text": ["x y", "z"], "time": [1990, 1991]}), tmp_path / "p.parquet")
    out = _read(tmp_path / "p.parquet")
    assert [r.fields for r in out] == [{"id": "a", "text": "x y", "time": 1990}, {"id": "b", "text": "z", "time": 1991}]
    assert [r.line for r in out] == [1, 2]


def test_missing_file_and_unknown_suffix(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_records(tmp_path / "nope.jsonl")
    (tmp_path / "x.doc").write_text("x")
    with pytest.raises(InputError, match="cannot tell the format"):
        read_records(tmp_path / "x.doc")


# ---- hostile and broken input: each failure is one counted reject, never a traceback -------------------

from tracer.corpus.ingest import ingest  # noqa: E402
from tracer.corpus.readers import ReadLimits  # noqa: E402


def _reasons(out):
    return [(r.line, r.reason.split(" (")[0]) for r in out if isinstance(r, Reject)]


def test_lone_surrogate_escapes_in_any_field_are_rejected(tmp_path):
    p = tmp_path / "s.jsonl"
    p.write_text('{"text": "ok \\udfff"}\n{"id": "\\ud800", "text": "a"}\n{"text": "a", "\\udfff": 1}\n'
                 '{"text": "a", "meta": {"deep": ["\\udc00"]}}\n{"text": "pair \\ud83d\\ude00 fine"}\n', encoding="ascii")
    out = _read(p)
    assert _reasons(out) == [(k, "lone surrogate escape") for k in (1, 2, 3, 4)]
    assert "field 'text'" in out[0].reason and "field 'id'" in out[1].reason and "field 'meta'" in out[3].reason
    assert out[4].fields["text"] == "pair \U0001F600 fine"  # a proper pair is one character
    s = ingest(tmp_path / "ws", [p])  # the rejects file and the store take the rest without a traceback
    assert (s.documents_total, s.rejects) == (1, 4)


def test_deep_nesting_and_huge_integers_are_rejected(tmp_path):
    p = tmp_path / "n.jsonl"
    deep = '{"text": "a", "x": ' + "[" * 1000 + "]" * 1000 + "}"
    ok = '{"text": "a", "x": ' + "[" * 10 + "]" * 10 + "}"
    p.write_text("\n".join([deep, ok, '{"text": "a", "n": ' + "9" * 5000 + "}"]) + "\n", encoding="ascii")
    out = _read(p, None)
    assert _reasons(out) == [(1, "nested too deep"), (3, "unreadable JSON value")]
    assert _reasons(list(read_records(p, limits=ReadLimits(max_depth=5)))) == [
        (1, "nested too deep"), (2, "nested too deep"), (3, "unreadable JSON value")]


def test_times_at_the_edges_are_documents_or_rejects(tmp_path):
    p = tmp_path / "t.jsonl"
    times = ["9999-12", "0001-01-01T00:30:00+05:00", 2 ** 63, 2 ** 70, "9999-12-31", "65", 99999, "99999"]
    p.write_text("".join(json.dumps({"id": str(i), "text": "word", "time": t}) + "\n" for i, t in enumerate(times)),
                 encoding="ascii")
    s = ingest(tmp_path / "ws", [p])
    assert (s.documents_total, s.rejects) == (3, 5)
    from tracer.corpus.workspace import Workspace
    assert list(Workspace(tmp_path / "ws").documents["year"]) == [9999, 1, 9999]


def test_a_txt_name_that_is_not_utf8_is_one_reject(tmp_path):
    folder = tmp_path / "docs"
    folder.mkdir()
    (folder / "good.txt").write_text("fine words", encoding="utf-8")
    try:
        (folder / os.fsdecode(b"bad\xff.txt")).write_text("other words", encoding="utf-8")
    except (OSError, UnicodeEncodeError):
        pytest.skip("this file system refuses names that are not UTF-8")
    out = _read(folder)
    assert _reasons(out) == [(1, "file name not valid UTF-8, skipped")]
    assert "bad\\xff.txt" in next(r for r in out if isinstance(r, Reject)).file
    s = ingest(tmp_path / "ws", [folder])
    assert (s.documents_total, s.rejects) == (1, 1)


def test_lone_cr_and_crlf_lines_and_a_bom(tmp_path):
    records = [b'{"id": "a", "text": "one"}', b'{"id": "b", "text": "two"}', b'{"id": "c", "text": "three"}']
    for end in (b"\r", b"\r\n", b"\n"):
        p = tmp_path / "x.jsonl"
        p.write_bytes(b"\xef\xbb\xbf" + end.join(records) + end)
        out = _read(p)
        assert [r.fields["id"] for r in out] == ["a", "b", "c"] and [r.line for r in out] == [1, 2, 3]
    c = tmp_path / "b.csv"
    c.write_bytes(b"\xef\xbb\xbfid,text\r1,one\r2,\"two\rlines\"\r")
    out = _read(c)
    assert [r.fields for r in out] == [{"id": "1", "text": "one"}, {"id": "2", "text": "two\nlines"}]


def test_a_crlf_split_between_chunks_is_one_line_end(tmp_path, monkeypatch):
    from tracer.corpus import streams
    monkeypatch.setattr(streams, "_CHUNK", 8)
    p = tmp_path / "x.jsonl"
    p.write_bytes(b'{"a":1}\r\n{"text":"t"}\r\n\r\n{"text":"u"}')
    out = _read(p)
    assert [(type(r).__name__, r.line) for r in out] == [("RawRecord", 1), ("RawRecord", 2), ("RawRecord", 4)]


def test_csv_fields_above_the_old_csv_limit_and_a_field_over_the_record_limit(tmp_path):
    big = "word " * 40_000  # 200,000 characters: over the csv module's default of 131,072
    p = tmp_path / "c.csv"
    p.write_text(f'id,text\n1,"{big}"\n2,"{"x" * 5000}"\n3,after\n', encoding="utf-8")
    out = _read(p)
    assert [r.fields["id"] for r in out] == ["1", "2", "3"] and out[0].fields["text"] == big
    out = list(read_records(p, limits=ReadLimits(max_record_bytes=4000)))
    assert [type(r).__name__ for r in out] == ["Reject", "Reject", "RawRecord"]
    assert out[2].fields == {"id": "3", "text": "after"}


def test_a_line_over_the_line_limit_rejects_only_its_record(tmp_path):
    limits = ReadLimits(max_line_bytes=1000)
    p = tmp_path / "l.jsonl"
    p.write_text('{"text": "a"}\n{"text": "' + "b" * 5000 + '"}\n{"text": "c"}\n', encoding="ascii")
    assert [(type(r).__name__, r.line) for r in read_records(p, limits=limits)] == [
        ("RawRecord", 1), ("Reject", 2), ("RawRecord", 3)]
    c = tmp_path / "l.csv"
    # the long line closes a quoted field (an odd number of quotes): the rows after it still parse
    c.write_text('id,text\n1,"first\n' + '"" ' * 500 + "y" * 2000 + '"\n2,second\n3,"th""ird"\n', encoding="ascii")
    out = list(read_records(c, limits=limits))
    assert [type(r).__name__ for r in out] == ["Reject", "RawRecord", "RawRecord"]
    assert out[0].reason.startswith("line over the length limit") and out[0].line == 3
    assert [r.fields["text"] for r in out[1:]] == ["second", 'th"ird']


def test_a_gzip_bomb_is_one_reject_after_bounded_work(tmp_path):
    p = tmp_path / "bomb.jsonl.gz"
    good = b'{"text": "before"}\n'
    p.write_bytes(gzip.compress(good + b" " * (200 * 2 ** 20), compresslevel=9))  # 200 MiB of spaces, ~200 KB
    limits = ReadLimits(max_gzip_ratio=50, gzip_ratio_floor_bytes=2 ** 20)
    out = list(read_records(p, limits=limits))
    assert isinstance(out[0], RawRecord) and out[0].fields == {"text": "before"}
    assert len(out) == 2 and out[1].reason.startswith("decompression ratio over the limit")


def test_damaged_gzip_and_parquet_are_rejects(tmp_path):
    data = gzip.compress(b"".join(b'{"text": "w%d"}\n' % i for i in range(2000)))
    p = tmp_path / "cut.jsonl.gz"
    p.write_bytes(data[: len(data) // 2])
    out = _read(p)
    assert isinstance(out[-1], Reject) and out[-1].reason.startswith("damaged gzip data")
    assert all(isinstance(r, RawRecord) for r in out[:-1]) and len(out) > 1
    pa = pytest.importorskip("pyarrow")
    import pyarrow.parquet as pq
    q = tmp_path / "p.parquet"
    pq.write_table(pa.table({"text": [f"text {i}" for i in range(1000)]}), q)
    raw = bytearray(q.read_bytes())
    for k in range(len(raw) // 3, len(raw) // 2):
        raw[k] ^= 0x5A
    q.write_bytes(bytes(raw))
    out = _read(q)
    assert out and all(isinstance(r, (RawRecord, Reject)) for r in out)
    assert any(isinstance(r, Reject) and "Parquet" in r.reason for r in out)
    q.write_bytes(b"PAR1 not really")
    assert _reasons(_read(q)) == [(0, "not a readable Parquet file")]


def test_parquet_timestamp_and_date_columns_give_times(tmp_path):
    pa = pytest.importorskip("pyarrow")
    import datetime as dt
    import pyarrow.parquet as pq
    table = pa.table({"id": ["a", "b"], "text": ["x y", "z w"],
                      "time": pa.array([dt.datetime(1965, 3, 2, 10), dt.datetime(1999, 12, 31, 23)],
                                       pa.timestamp("us", tz="-05:00")),
                      "date": pa.array([dt.date(1970, 1, 1), dt.date(9999, 12, 31)], pa.date32())})
    pq.write_table(table, tmp_path / "p.parquet")
    s = ingest(tmp_path / "ws", [tmp_path / "p.parquet"])
    assert (s.documents_total, s.rejects) == (2, 0)
    from tracer.corpus.workspace import Workspace
    assert list(Workspace(tmp_path / "ws").documents["year"]) == [1965, 1999]
    s = ingest(tmp_path / "ws2", [tmp_path / "p.parquet"], fields=FieldMap(time="date"))
    assert list(Workspace(tmp_path / "ws2").documents["year"]) == [1970, 9999]


def test_symlinks_in_a_txt_folder_are_followed_inside_and_counted_outside(tmp_path):
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "secret.txt").write_text("outside words", encoding="utf-8")
    docs = tmp_path / "docs"
    (docs / "A").mkdir(parents=True)
    (docs / "A" / "one.txt").write_text("first words", encoding="utf-8")
    os.symlink(docs / "A", docs / "B")                       # a linked folder inside: followed
    os.symlink(docs / "A" / "one.txt", docs / "copy.txt")   # a linked file inside: followed
    os.symlink(tmp_path / "nowhere.txt", docs / "dangling.txt")
    os.symlink(outside, docs / "out")
    os.symlink(outside / "secret.txt", docs / "leak.txt")
    os.symlink(docs, docs / "A" / "loop")                  # a loop back to the top
    out = _read(docs)
    good = sorted(r.fields["id"] for r in out if isinstance(r, RawRecord))
    assert good == ["A/one", "B/one", "copy"]
    assert sorted(r.reason for r in out if isinstance(r, Reject)) == [
        "broken symbolic link, skipped", *["symbolic link loop (to a folder that holds it), skipped"] * 2,
        *["symbolic link to outside the input folder, skipped"] * 2]  # A/loop and B/loop, out and leak.txt
    s = ingest(tmp_path / "ws", [docs])
    assert (s.documents_total, s.rejects) == (3, 5)
    with pytest.raises(InputError, match="strict"):
        ingest(tmp_path / "ws_strict", [docs], strict=True)


def test_a_record_over_the_size_limit_is_a_reject_in_every_format(tmp_path):
    limits = ReadLimits(max_record_bytes=100)
    (tmp_path / "a.jsonl").write_text('{"text": "' + "w " * 100 + '"}\n{"text": "ok"}\n', encoding="ascii")
    (tmp_path / "docs").mkdir()
    (tmp_path / "docs" / "big.txt").write_text("w " * 100, encoding="ascii")
    (tmp_path / "docs" / "small.txt").write_text("ok", encoding="ascii")
    for path in (tmp_path / "a.jsonl", tmp_path / "docs"):
        out = list(read_records(path, limits=limits))
        assert [type(r).__name__ for r in out] == ["Reject", "RawRecord"]
        assert "size limit" in out[0].reason or "length limit" in out[0].reason


def test_limits_are_checked(tmp_path):
    with pytest.raises(SettingError, match="max_depth"):
        ReadLimits(max_depth=0)
    with pytest.raises(SettingError, match="max_gzip_ratio"):
        ReadLimits(max_gzip_ratio=1)


def test_ingest_command_takes_the_limits_and_the_case_rule(tmp_path):
    from click.testing import CliRunner

    from tracer.app.cli import cli
    from tracer.corpus.workspace import Workspace
    p = tmp_path / "a.jsonl"
    p.write_text('{"text": "' + "word " * 400 + '"}\n{"text": "KIZ kız"}\n', encoding="utf-8")
    res = CliRunner().invoke(cli, ["ingest", str(p), "-w", str(tmp_path / "ws"), "--max-record-mb", "0.001",
                                   "--case-rule", "turkish", "--format", "json"], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)[0]["rejected"] == 1
    ws = Workspace(tmp_path / "ws")
    assert ws.manifest["tokenizer"]["case_rule"] == "turkish" and ws.vocab.words == ["kız"]
    res = CliRunner().invoke(cli, ["ingest", str(p), "-w", str(tmp_path / "ws2"), "--max-depth", "0"])
    assert res.exit_code != 0 and "--max-depth" in res.output
