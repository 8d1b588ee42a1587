"""The stored corpus is the same for any number of worker processes, and the same as before they
parsed and validated records: every table and array of the store, and the corpus hash.

``EXPECTED`` is the digest of what the ingest of this module's inputs stored with the code of
main at commit ec566f1 (records parsed, validated and stored one by one in the ingesting
process, only the tokenizing on workers), computed by running :func:`ingest_all` and
:func:`stored_digest` with that commit's ``tracer`` package first on ``PYTHONPATH``. It pins
the ids, the order of the vocabulary, the documents table, the rejects with their files, lines
and reasons, and the corpus hash across the change to chunked work; an intended change of what
ingest stores must recompute it the same way and say why in the commit.
"""

import gzip
import hashlib
import json
import sqlite3
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

import tracer.corpus.prepare_pool as prepare_pool
from tests.conftest import lee_documents, write_jsonl
from tracer.corpus.ingest import FieldMap, ingest
from tracer.corpus.prepare import PrepareSettings, Preparer
from tracer.corpus.readers import RawRecord, ReadLimits
from tracer.corpus.tokenize import TokenizerSettings
from tracer.corpus.validate import FieldUse
from tracer.corpus.workspace import Workspace
from tracer.errors import InputError

EXPECTED = "ec4c94a6c505d182c74cffa84493291ca5c55135655cf5fcf21e441c6ef92ef2"


def _records(docs: list[str]) -> list[dict]:
    """Records with every kind of reject and the cases where ids could go wrong."""
    recs = [{"id": f"a{i}", "source": ["Ledger", "Courier", ""][i % 3], "time": [1961, "1972-03", None][i % 3],
             "title": f"T{i}" if i % 2 else None, "tag": i % 4, "text": t} for i, t in enumerate(docs[:60])]
    recs[3]["text"] = "İSTANBUL Straße DON’T ﬁnance ＡＢＣ " + recs[3]["text"].upper()
    recs[5]["text"] = ""  # empty text
    recs[7]["text"] = "... !!! ---"  # no tokens
    recs[9]["id"] = "a2"  # a duplicate of an earlier record: its new words must get no ids
    recs[9]["text"] = "zzfirstdup zzsecond " + recs[9]["text"]
    recs[11]["id"] = "a5"  # the id of a rejected (empty) record: stored
    recs[13]["time"] = "soon"  # unreadable time
    recs[15]["time"] = 65  # ambiguous year
    del recs[17]["id"]  # an id made from the file name and line
    recs[19]["id"] = 19  # an integer id
    recs[21]["id"] = 2.5  # a float id is rejected
    recs[23] = {"id": "a23", "body": "no text field here"}
    recs[25]["text"] = 25  # text not a string
    recs[27]["date"] = recs[27].pop("time")
    recs[29]["extra"] = {"nested": [1, 2, {"k": "v"}]}
    recs[31]["id"] = "a30"  # duplicate of the next record's id: the first one wins
    return recs


def ingest_all(folder: Path, jobs: int) -> Path:
    """Ingest three inputs, then append two more (duplicates against the stored corpus); the workspace."""
    docs = [t for t in lee_documents() if t.strip()]
    folder.mkdir(parents=True, exist_ok=True)
    first = folder / "first.jsonl"
    lines = [json.dumps(r, ensure_ascii=False) for r in _records(docs)]
    lines[33] = '{"id": "broken", "text": '  # malformed JSON
    lines[35] = '["not", "an", "object"]'
    lines[37] = '{"id": "sur", "text": "bad \\udc80 half"}'  # a lone surrogate escape
    lines.insert(40, "")  # a blank line: not a record
    first.write_bytes(("\r\n".join(lines) + "\n").encode("utf-8"))
    second = folder / "second.jsonl.gz"
    second.write_bytes(gzip.compress("".join(  # mtime 0: the same bytes on every run
        json.dumps({"id": "a1" if i == 4 else f"b{i}", "source": "Gazette", "time": 1980 + i % 30, "text": t}) + "\n"
        for i, t in enumerate(docs[60:120])).encode(), mtime=0))
    third = folder / "third.csv"
    third.write_text("doc,outlet,when,body\n" + "".join(
        f'c{i},Tribune,{1990 + i},"{t.replace(chr(34), chr(34) * 2)}"\n' for i, t in enumerate(docs[120:150]))
        + "c0,Tribune,1999,a duplicate in another file\nc99,Tribune,1999\n", encoding="utf-8")
    ws = folder / "ws"
    ingest(ws, [first, second], jobs=jobs)
    ingest(ws, [third], fields=FieldMap(text="body", id="doc", source="outlet", time="when"), jobs=jobs)
    texts = folder / "texts"
    for i, t in enumerate(docs[150:170]):
        (texts / ["Herald", "Courier"][i % 2]).mkdir(parents=True, exist_ok=True)
        (texts / ["Herald", "Courier"][i % 2] / f"n{i:02d}.txt").write_text(t, encoding="utf-8")
    (texts / "Herald" / "blank.txt").write_text("  \n", encoding="utf-8")
    fourth = write_jsonl(folder / "fourth.jsonl", [{"id": "a0", "text": "taken"}, {"id": "d1", "text": docs[170]},
                                                   {"id": "d1", "text": "zzlast words"}])
    ingest(ws, [texts, fourth], jobs=jobs)
    return ws


def stored_digest(ws_path: Path) -> str:
    """A digest of everything the store holds that does not depend on the folder or the clock."""
    ws = Workspace(ws_path)
    store = ws.store
    with sqlite3.connect(store / "corpus.sqlite") as con:
        rows = [list(r[:-3]) + [Path(r[-3]).name, r[-2], r[-1]] for r in con.execute(
            "SELECT doc_index, doc_id, source, time, year, time_value, title, text, n_tokens, token_start, "
            "input_file, input_line, fields FROM documents ORDER BY doc_index")]
    rejects = [dict(r, file=Path(r["file"]).name) for r in map(json.loads, (store / "rejects.jsonl").read_text(
        encoding="utf-8").splitlines())]
    m = ws.manifest
    inputs = [{k: i[k] for k in ("sha256", "format", "records", "documents", "tokens", "rejects", "fields",
                                 "default_source", "fields_found", "field_warnings", "content_sha256")}
              for i in m["inputs"]]
    files = {f: hashlib.sha256((store / f).read_bytes()).hexdigest() for f in
             ("tokens.u32", "doc_offsets.i64", "vocab.tsv", "postings_ptr.i64", "postings_pos.i64")}
    whole = [m["corpus_hash"], m["n_documents"], m["n_tokens"], m["n_types"], inputs, rows, rejects, files]
    return hashlib.sha256(json.dumps(whole, sort_keys=True).encode()).hexdigest()


@pytest.fixture(scope="module")
def serial_digest(tmp_path_factory):
    return stored_digest(ingest_all(tmp_path_factory.mktemp("serial"), jobs=1))


def test_the_store_is_the_one_main_stored(serial_digest):
    assert serial_digest == EXPECTED


@pytest.mark.parametrize("chunk_chars", [700, 20_000])
def test_workers_store_what_one_process_stores(tmp_path, serial_digest, monkeypatch, chunk_chars):
    # chunks of a few records (rejects, duplicates and new words fall in many chunks) and of many
    monkeypatch.setattr(prepare_pool, "CHUNK_CHARS", chunk_chars)
    started = []
    real = prepare_pool.multiprocessing.get_context
    monkeypatch.setattr(prepare_pool.multiprocessing, "get_context", lambda m: started.append(m) or real(m))
    assert stored_digest(ingest_all(tmp_path, jobs=2)) == serial_digest
    assert started and set(started) == {"spawn"}


def test_the_digest_sees_a_changed_id(tmp_path, serial_digest):
    # the check can fail: the same ingest with one id swapped in the stored tokens gives another digest
    ws = ingest_all(tmp_path, jobs=1)
    tokens = Workspace(ws).store / "tokens.u32"
    t = np.fromfile(tokens, dtype="<u4")
    t[[0, 1]] = t[[1, 0]]
    t.tofile(tokens)
    assert stored_digest(ws) != serial_digest


# a pattern whose tokens can hold a tab, which the vocabulary file cannot
TAB_PATTERN = TokenizerSettings(pattern=r"\w+\t\w+|\w+")


@pytest.mark.parametrize("jobs", [1, 2])
def test_a_token_with_a_tab_stops_the_ingest_where_one_process_would(tmp_path, monkeypatch, jobs):
    monkeypatch.setattr(prepare_pool, "CHUNK_CHARS", 300)  # several chunks: the workers start with jobs 2
    filler = [{"id": f"f{i}", "text": t} for i, t in enumerate(lee_documents()[:12])]

    def run(name, middle, **kw):
        return ingest(tmp_path / name, [write_jsonl(tmp_path / f"{name}.jsonl", filler[:6] + middle + filler[6:])],
                      tokenizer=TAB_PATTERN, jobs=jobs, **kw)

    # a duplicate is never stored, so its token with a tab is no error
    assert run("dup", [{"id": "f0", "text": "a\tb"}]).documents_total == 12
    with pytest.raises(InputError, match=r"^the tokenizer pattern produced a token with a tab or newline "
                                         r"\('c\\td'\); use a pattern that cannot$"):
        run("tab", [{"id": "t", "text": "x c\td"}, {"id": "e", "text": ""}], strict=True)
    # with --strict an earlier reject stops the ingest first
    with pytest.raises(InputError, match=r"e.jsonl, line 7: empty text \(--strict"):
        run("e", [{"id": "e", "text": ""}, {"id": "t", "text": "x c\td"}], strict=True)


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])
# names drawn from a fixed list: a .map(lambda) here made hypothesis 6.80 re-read the lambda's
# source on every draw (over 10 minutes for this test in the lowest-versions run)
@given(st.lists(st.dictionaries(st.sampled_from([f"k{k}" for k in range(261)]), st.sampled_from(["", None, "v", 1]),
                                min_size=20, max_size=60), min_size=8, max_size=30),
       st.lists(st.integers(0, 30), max_size=5))
# a name kept from the first run comes after 200 new names in the second: still counted
@example([{"k0": "v"}, {f"k{k}": "v" for k in range(1, 201)}, {"k0": 1}], [1])
def test_field_counts_merged_chunk_by_chunk_are_those_counted_record_by_record(records, cuts):
    # more distinct names than FieldUse keeps (200): which ones are kept depends on the order
    recs = [RawRecord(d, "in.jsonl", i + 1) for i, d in enumerate(records)]
    whole = FieldUse(FieldMap(), None, "in.jsonl")
    for r in recs:
        whole.add(r)
    # each run counted as ingest counts a chunk (the Preparer a worker runs), then merged in order
    merged = FieldUse(FieldMap(), None, "in.jsonl")
    prepare = Preparer(PrepareSettings(TokenizerSettings(), FieldMap(), None, ReadLimits(), "in.jsonl"))
    bounds = [0, *sorted(cuts), len(recs)]
    for a, b in zip(bounds, bounds[1:]):
        part = prepare(recs[a:b])
        merged.merge(part.records, part.found)
    assert list(merged.found.items()) == list(whole.found.items()) and merged.records == whole.records


@settings(max_examples=50, deadline=None)
@given(st.lists(st.integers(0, 40), max_size=300) | st.lists(st.sampled_from([0, 2**32 - 1, 7]), max_size=50))
def test_postings_are_a_stable_argsort_of_the_tokens(tokens):
    # outside reference: numpy's stable argsort (each word's positions ascending)
    from tracer.corpus.store import postings_positions
    t = np.asarray(tokens, dtype="<u4")
    expected = np.argsort(t, kind="stable")
    for block in (1 << 22, 7):  # one block, and positions added in several
        got = postings_positions(t, block)
        assert got.dtype == np.dtype("<i8") and np.array_equal(got, expected)
