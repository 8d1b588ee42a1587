import gzip

import pytest

from tracer.corpus.readers import RawRecord, Reject, read_records
from tracer.errors import InputError


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
