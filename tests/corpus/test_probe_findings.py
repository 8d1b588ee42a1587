"""Regressions for what an outside probe of `tracer ingest` found: each test fails on the code before its fix.

The probe feeds mutated inputs through the command line and counts their records itself; these
tests keep the cases it found small and direct.
"""

import os
from pathlib import Path

import pytest
from click.testing import CliRunner

from tracer.app.cli import cli
from tracer.corpus.ingest import hash_input, ingest
from tracer.corpus.readers import RawRecord, ReadLimits, Reject, read_records
from tracer.corpus.workspace import Workspace
from tracer.errors import InputError


def test_a_quoted_csv_field_over_the_record_limit_spanning_lines_leaves_the_next_rows_whole(tmp_path):
    # before: the csv module's field limit raised inside the quoted field, reading resumed inside the
    # quotes, and the two rows after it were lost into one "fewer fields" reject (4 records for 3)
    p = tmp_path / "long.csv"
    p.write_bytes(b'id,text\n1,"' + b"abc " * 400 + b'\nmore, lines\n""quoted"" x\n"\n2,two words\n3,three\n')
    out = list(read_records(p, limits=ReadLimits(max_record_bytes=1000)))
    assert len(out) == 3
    assert isinstance(out[0], Reject) and out[0].line == 2 and out[0].reason.startswith("record over the size limit")
    assert [(r.fields, r.line) for r in out[1:]] == [({"id": "2", "text": "two words"}, 6),
                                                    ({"id": "3", "text": "three"}, 7)]


def test_a_csv_record_under_the_limit_with_a_quoted_field_over_many_lines_is_one_record(tmp_path):
    # the record size counts every line of a quoted field, line ends included, and starts again after it
    p = tmp_path / "lines.csv"
    p.write_bytes(b'id,text\n1,"' + b"ab\n" * 300 + b'"\n2,"' + b"cd\n" * 300 + b'"\n')
    out = list(read_records(p, limits=ReadLimits(max_record_bytes=1000)))
    assert [type(r) for r in out] == [RawRecord, RawRecord]
    assert out[0].fields["text"] == "ab\n" * 300 and out[1].line == 303


def test_a_csv_line_over_the_line_limit_with_a_literal_quote_leaves_the_next_rows_whole(tmp_path):
    # before: the dropped line was replaced by its quote parity; `1,"ab"ccc..c"` has three quotes but
    # ends outside any quoted field (csv reads the last '"' as a literal character), so the odd parity
    # opened a quoted field and every later row disappeared into the one line-limit reject
    p = tmp_path / "literal.csv"
    p.write_bytes(b'id,text\n1,"ab"' + b"c" * 2000 + b'"\n2,next\n3,"a ""quoted"" word"\n')
    out = list(read_records(p, limits=ReadLimits(max_line_bytes=1000)))
    assert isinstance(out[0], Reject) and out[0].line == 2 and out[0].reason.startswith("line over the length")
    assert [(r.fields, r.line) for r in out[1:]] == [({"id": "2", "text": "next"}, 3),
                                                    ({"id": "3", "text": 'a "quoted" word'}, 4)]


def test_a_literal_quote_in_an_unquoted_field_does_not_join_the_next_rows_into_one_record(tmp_path):
    # before: a '"' inside an unquoted field flipped the parity, so the record size ran on over every
    # later row until the size limit, and those rows were rejected as one over-size record
    p = tmp_path / "inch.csv"
    rows = b"".join(b"%d,row number %d\n" % (i, i) for i in range(2, 60))
    p.write_bytes(b'id,text\n1,a 5" screen\n' + rows)
    out = list(read_records(p, limits=ReadLimits(max_record_bytes=200)))
    assert all(isinstance(r, RawRecord) for r in out), [r for r in out if isinstance(r, Reject)][:2]
    assert out[0].fields["text"] == 'a 5" screen' and len(out) == 59


@pytest.mark.parametrize("line, start, end", [
    (b'1,"ab"ccc"', False, False),        # the closing quote goes on unquoted; the last '"' is literal
    (b'1,"ab""c', False, True),           # a doubled quote inside a quoted field
    (b'1,ab"c', False, False),            # a quote inside an unquoted field is literal
    (b'x", 2', True, False),              # a quoted field from the line before closes
    (b'x"" y', True, True),               # a doubled quote: still inside
    (b'"",""', False, False),             # two empty quoted fields
    (b'a,"b', False, True),
])
def test_the_quoting_state_follows_the_csv_module(line, start, end):
    # outside reference: Python's csv reader on the same text; a record goes on past the line end exactly
    # when the line ends inside quotes
    import csv
    from tracer.corpus.streams import CsvQuoteState, csv_line_ends_in_quotes
    text = ('"' if start else "") + line.decode() + "\nnext,line\n"
    rows = list(csv.reader(text.splitlines(keepends=True)))
    assert (len(rows) == 1) is end  # the csv module joined the next line into the record
    assert csv_line_ends_in_quotes(line, start) is end
    pieces = CsvQuoteState(start)  # fed byte by byte, as a too-long line is read in pieces
    for i in range(len(line)):
        pieces.feed(line[i:i + 1])
    assert pieces.in_quotes is end


def _bad_name(tmp_path: Path) -> Path:
    p = Path(os.fsdecode(bytes(tmp_path) + b"/caf\xe9.jsonl"))
    p.write_bytes(b'{"id": 1, "text": "alpha beta"}\n')
    return p


def test_an_input_name_that_is_not_utf8_is_shown_escaped(tmp_path):
    # before: the summary and the manifest held the name with surrogate escapes, and printing it failed
    s = ingest(tmp_path / "ws", [_bad_name(tmp_path)])
    assert s.inputs[0].path.endswith("caf\\xe9.jsonl")
    s.inputs[0].path.encode("utf-8")
    ws = Workspace(tmp_path / "ws")
    assert ws.manifest["inputs"][0]["path"].endswith("caf\\xe9.jsonl")


def test_the_ingest_command_prints_an_input_name_that_is_not_utf8(tmp_path):
    result = CliRunner().invoke(cli, ["ingest", str(_bad_name(tmp_path)), "-w", str(tmp_path / "ws"),
                                      "--format", "csv"])
    assert result.exception is None, result.exception
    assert "caf\\xe9.jsonl,added,1,1,2,0" in result.output


@pytest.mark.skipif(not os.access("/proc/self/mem", os.R_OK), reason="needs /proc/self/mem")
def test_a_link_to_a_file_that_cannot_be_read_is_a_reject(tmp_path):
    # before: an I/O error reading the target (here EIO from /proc/self/mem) escaped as a traceback,
    # from the input hash for a folder and from the reader for a file
    folder = tmp_path / "docs"
    folder.mkdir()
    (folder / "a.txt").write_text("alpha beta")
    os.symlink("/proc/self/mem", folder / "mem.txt")
    s = ingest(tmp_path / "ws", [folder])
    assert (s.inputs[0].documents, s.inputs[0].rejects) == (1, 1)
    assert s.reject_reasons == {"symbolic link to outside the input folder, skipped": 1}
    for name in ("mem.jsonl", "mem.jsonl.gz", "mem.csv"):  # a gzip input says unreadable, not damaged
        single = tmp_path / name
        os.symlink("/proc/self/mem", single)
        out = list(read_records(single))
        assert len(out) == 1 and out[0].reason.startswith("unreadable file (Input/output error)"), out


def test_the_hash_of_a_plain_folder_is_unchanged(tmp_path):
    # the folder hash now takes the reader's entries; for a folder without links it must stay the
    # hash written before (sha256 over sorted relative names + NUL + contents), or re-ingesting an
    # old workspace's folder would append it again
    import hashlib
    folder = tmp_path / "docs"
    (folder / "S").mkdir(parents=True)
    files = {"S/b.txt": b"two", "a-b.txt": b"one", "c.TXT": b"three", "notes.md": b"not input"}
    for name, data in files.items():
        (folder / name).write_bytes(data)
    h = hashlib.sha256()
    for name in ["S/b.txt", "a-b.txt", "c.TXT"]:  # the order of sorted Paths: S/b.txt before a-b.txt
        h.update(name.encode() + b"\0" + files[name])
    assert hash_input(folder) == h.hexdigest()


def test_a_pipe_given_as_input_is_a_clear_error(tmp_path):
    # before: a FIFO named like a file was opened and waited on for ever (and hashed as empty)
    fifo = tmp_path / "feed.jsonl"
    os.mkfifo(fifo)
    with pytest.raises(InputError, match="not a regular file or folder"):
        ingest(tmp_path / "ws", [fifo])
