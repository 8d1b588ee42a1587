"""A bounded fuzzer of ingest: mutated JSONL, JSONL.gz, CSV and .txt folders.

Each case builds an input from hostile pieces (lone surrogate escapes, deep nesting, huge
integers, edge times, BOMs, lone CRs, quotes, NUL bytes, names that are not UTF-8, symbolic
links), mutates its bytes, ingests it and checks that

* nothing but the project's named errors (:class:`tracer.errors.TracerError`) escapes;
* nothing is lost silently: every record read is a document or a counted reject, the store
  holds the documents counted, the rejects file holds the rejects counted, and the records
  read are the records an independent count finds (non-blank lines of a JSONL file, .txt
  entries of a folder).

The default suite runs a small budget; ``TRACER_FUZZ_EXAMPLES=1500`` (or any number) runs more.
"""

import gzip
import json
import os
import re
import tempfile
import zlib
from pathlib import Path

from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from tracer.corpus.ingest import ingest
from tracer.corpus.readers import ReadLimits, Reject, read_records
from tracer.corpus.workspace import Workspace
from tracer.errors import TracerError

EXAMPLES = int(os.environ.get("TRACER_FUZZ_EXAMPLES", "8"))
# small limits, so that the size and depth paths are reached by small cases
LIMITS = ReadLimits(max_record_bytes=4000, max_line_bytes=3000, max_depth=8, max_gzip_ratio=20,
                    gzip_ratio_floor_bytes=2000)

_TIMES = ["1965", 1965, "1970-01-01", 1999, "2001-02", None, None, "9999-12", "9999-12-31",
          "0001-01-01T00:30:00+05:00", 2 ** 63, 99999, "99999", "65", 65,
          "1965-13", "1999-12-31T23:00:00Z", "soon", 1965.5, None, True, [], {}]
_PIECES = ["\\udfff", "\\ud800x", "\\ud83d\\ude00", "\ufeff", "\r", "\r\n", "\x00", '"', "'", "’", "İ", "ß",
           "[" * 50, "9" * 5000, "caf\u0065\u0301", "\u202e", "{}", "=HYPERLINK(1)", ",", "\\", "\t"]

word = st.sampled_from(["alpha", "Beta", "gamma", "Straße", "İstanbul", "don’t", "كتاب", "x" * 3500, ""])
text = st.lists(st.one_of(word, st.sampled_from(_PIECES), st.text(max_size=8)), max_size=12).map(" ".join)
record = st.fixed_dictionaries({"id": st.one_of(st.integers(-2, 2 ** 70), st.text(max_size=6), st.none()),
                                "text": st.one_of(text, st.integers(), st.none()),
                                "time": st.sampled_from(_TIMES),
                                "source": st.one_of(st.sampled_from(["A", "B", ""]), st.text(max_size=4))})


_ANCHOR = {"id": "anchor", "text": "alpha beta gamma", "time": 1965, "source": "A"}
# raw JSON values spliced into records as written: escapes and nesting that json.dumps would not write
_RAW_VALUES = ['"\\udfff"', '{"\\ud800": 1}', '["ok \\udc00"]', "[" * 20 + "]" * 20, "[" * 2000 + "]" * 2000,
               "9" * 5000, "1e999", "NaN", '"\\ud83d\\ude00"', '{"a": {"b": {"c": [1, 2, {"d": null}]}}}']


def _jsonl(records, raw_pieces, raw_values) -> bytes:
    lines = []
    for k, r in enumerate(records):
        line = json.dumps(r, ensure_ascii=True)
        # splice a raw piece into the text: escapes such as \udfff reach the reader as written
        if raw_pieces and k % 2:
            line = line.replace('"text": "', '"text": "' + raw_pieces[0].replace('"', '\\"'), 1)
        if raw_values and k % 2 == 0:
            line = line[:-1] + f', "meta": {raw_values[k % len(raw_values)]}}}'
        lines.append(line.encode("utf-8", "surrogatepass"))
    return b"\n".join(lines) + b"\n"


def _csv(records) -> bytes:
    def cell(v):
        s = "" if v is None else str(v)
        return '"' + s.replace('"', '""') + '"' if any(c in s for c in ',"\r\n') else s
    rows = ["id,text,time,source"] + [",".join(cell(r[k]) for k in ("id", "text", "time", "source")) for r in records]
    return "\n".join(rows).encode("utf-8", "surrogatepass") + b"\n"


@st.composite
def mutated(draw, data: bytes) -> bytes:
    data = bytearray(data)
    for _ in range(draw(st.integers(0, 4))):
        kind = draw(st.sampled_from(["flip", "insert", "delete", "cr", "bom", "truncate", "dup"]))
        at = draw(st.integers(0, max(len(data) - 1, 0)))
        if kind == "flip" and data:
            data[at] = draw(st.integers(0, 255))
        elif kind == "insert":
            data[at:at] = draw(st.sampled_from([b"\xff", b"\xc3", b'"', b"\r", b"\x00", b"{", b"\\udfff", b"\n\n"]))
        elif kind == "delete":
            del data[at:at + draw(st.integers(1, 20))]
        elif kind == "cr":
            data = bytearray(data.replace(b"\n", b"\r"))
        elif kind == "bom":
            data[0:0] = b"\xef\xbb\xbf"
        elif kind == "truncate":
            del data[at:]
        elif kind == "dup":
            data[at:at] = data[at:at + 40]
    return bytes(data)


@st.composite
def case(draw):
    fmt = draw(st.sampled_from(["jsonl", "jsonl.gz", "csv", "txt"]))
    records = [_ANCHOR] + draw(st.lists(record, min_size=1, max_size=6))
    if fmt == "txt":
        names = st.sampled_from([b"a", b"b\xff", b"S/c", b"S/d", b"\xe9t\xe9", b"T/e"])
        contents = text.map(lambda t: t.encode("utf-8", "replace"))
        files = [(b"anchor", b"alpha beta gamma")] + draw(st.lists(st.tuples(names, contents), max_size=5))
        links = draw(st.lists(st.sampled_from(["dangling", "inside", "outside", "folder", "loop"]), max_size=3))
        return fmt, [(n, draw(mutated(c))) for n, c in files], links
    base = (_jsonl(records, draw(st.lists(st.sampled_from(_PIECES), max_size=1)),
                   draw(st.lists(st.sampled_from(_RAW_VALUES), max_size=2))) if fmt != "csv" else _csv(records))
    data = draw(mutated(base))
    if fmt == "jsonl.gz":
        if draw(st.integers(0, 9)) == 0:
            data = data + b" " * 200_000  # a small bomb at the test limits
        data = gzip.compress(data)
        if draw(st.booleans()):
            data = draw(mutated(data))  # a damaged gzip stream
    return fmt, data, []


def _write_txt(folder: Path, files, links, outside: Path):
    folder.mkdir()
    for name, content in files:
        p = Path(os.fsdecode(folder)) / os.fsdecode(name + b".txt")
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(content)
    outside.mkdir(exist_ok=True)
    (outside / "o.txt").write_bytes(b"outside words")
    for k, kind in enumerate(links):
        target = {"dangling": folder / "nothing.txt", "inside": folder / "a.txt", "outside": outside / "o.txt",
                  "folder": outside, "loop": folder}[kind]
        os.symlink(target, folder / (f"link{k}.txt" if kind in ("dangling", "inside", "outside") else f"dir{k}"))


def _independent_count(fmt, path: Path) -> int | None:
    """Records a reader must account for, counted without the readers; None when unknowable."""
    if fmt == "txt":
        # every entry named .txt in the real folders (links included), and one per link to a folder:
        # the generated folder links point outside or back to the top, each one counted reject
        n = 0
        for folder, dirs, files in os.walk(path):
            n += sum(1 for f in files + dirs if f.endswith(".txt"))
            n += sum(1 for d in dirs if os.path.islink(os.path.join(folder, d)))
        return n
    if fmt == "csv":
        return None  # quoted fields may span lines: only the accounting identity is checked
    data = path.read_bytes()
    if fmt == "jsonl.gz":
        d = zlib.decompressobj(wbits=31)
        try:
            data = d.decompress(data, LIMITS.gzip_ratio_floor_bytes + 1)
        except zlib.error:
            return None
        if not d.eof or d.unused_data or len(data) > LIMITS.gzip_ratio_floor_bytes:
            return None  # damaged, several members, or past the ratio floor
    data = data[3:] if data.startswith(b"\xef\xbb\xbf") else data
    return sum(1 for line in re.split(rb"\r\n|\r|\n", data) if line.strip())


def _kind(reason: str) -> str:
    return re.split(r" \(|:|,", reason)[0][:50]


def _check(fmt, payload, links):
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        if fmt == "txt":
            path = tmp / "docs"
            _write_txt(path, payload, links, tmp / "outside")
        else:
            path = tmp / f"in.{fmt}"
            path.write_bytes(payload)
        # the readers alone: every record an independent count finds comes out, as a record or a reject
        try:
            records = list(read_records(path, limits=LIMITS))
        except TracerError as e:
            event(f"{fmt}: reader error {type(e).__name__}")
            records = None
        else:
            for kind in sorted({_kind(r.reason) for r in records if isinstance(r, Reject)}):
                event(f"{fmt}: reject {kind}")
            expected = _independent_count(fmt, path)
            assert expected is None or len(records) == expected
        # ingest: nothing but named errors, and nothing lost between the readers and the store
        try:
            s = ingest(tmp / "ws", [path], limits=LIMITS)
        except TracerError as e:
            event(f"{fmt}: ingest error {'empty corpus' if 'empty corpus' in str(e) else type(e).__name__}")
            return  # a named error with a message: not silent, not a traceback
        for kind in s.reject_reasons:
            event(f"{fmt}: ingest reject {_kind(kind)}")
        (inp,) = s.inputs
        assert inp.records == inp.documents + inp.rejects == len(records)
        ws = Workspace(tmp / "ws")
        assert ws.n_documents == inp.documents == s.documents_total
        rejected = Path(s.rejects_file).read_text(encoding="utf-8").splitlines() if inp.rejects else []
        assert len(rejected) == inp.rejects


@settings(max_examples=EXAMPLES, deadline=None, database=None, derandomize=EXAMPLES <= 50,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(case())
def test_fuzzed_inputs_give_documents_or_counted_rejects(c):
    _check(*c)
