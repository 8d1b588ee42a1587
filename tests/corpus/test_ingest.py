import json

import numpy as np
import pytest

from tests.conftest import SMALL_RECORDS, write_jsonl
from tracer.corpus import store as store_module
from tracer.corpus.ingest import FieldMap, ingest
from tracer.corpus.tokenize import Tokenizer, TokenizerSettings
from tracer.corpus.workspace import Workspace
from tracer.errors import InputError, WorkspaceError, WorkspaceNotFound


def test_store_holds_documents_tokens_vocab_and_postings(small_ws):
    ws = small_ws
    docs = ws.documents
    assert list(docs["doc_id"]) == ["d1", "d2", "d3", "d4"]
    assert list(docs["source"]) == ["Alpha", "Alpha", "Beta", "Beta"]
    assert list(docs["year"]) == [1961, 1965, 1972, 1979]  # "date" used when "time" is absent
    tok = Tokenizer()
    expected = [w for r in SMALL_RECORDS for w in tok.tokenize(r["text"])]
    assert [ws.vocab.words[i] for i in ws.tokens] == expected
    assert list(docs["n_tokens"]) == [len(tok.tokenize(r["text"])) for r in SMALL_RECORDS]
    assert ws.doc_offsets[-1] == len(expected)
    # postings are the sorted positions of each word
    for word in ("the", "cat", "bird"):
        assert list(ws.positions(word)) == [i for i, w in enumerate(expected) if w == word]
    counts = dict(zip(ws.vocab.words, ws.vocab.counts))
    assert counts["the"] == expected.count("the")
    assert ws.texts([2])[2] == SMALL_RECORDS[2]["text"]
    m = ws.manifest
    assert m["tokenizer"] == TokenizerSettings().to_dict()
    assert {"numpy", "scipy", "nltk", "gensim", "tracer"} <= set(m["versions"])
    assert m["inputs"][0]["sha256"] and m["n_tokens"] == len(expected)


def test_reingesting_is_idempotent_and_a_new_file_appends(tmp_path, small_jsonl):
    ws_path = tmp_path / "ws"
    ingest(ws_path, [small_jsonl])
    before = Workspace(ws_path)
    words_before = list(before.vocab.words)
    again = ingest(ws_path, [small_jsonl])
    assert [i.status for i in again.inputs] == ["already ingested"]
    assert Workspace(ws_path).store == before.store  # nothing was rewritten
    more = write_jsonl(tmp_path / "more.jsonl", [{"id": "d5", "text": "A new cat arrives", "source": "Gamma"}])
    s = ingest(ws_path, [small_jsonl, more])
    assert [i.status for i in s.inputs] == ["already ingested", "added"]
    ws = Workspace(ws_path)
    assert ws.n_documents == 5 and list(ws.documents["doc_id"])[-1] == "d5"
    assert ws.vocab.words[: len(words_before)] == words_before  # ids stay stable on append
    assert [ws.vocab.words[i] for i in ws.document_tokens(4)] == ["a", "new", "cat", "arrives"]
    assert list(ws.positions("cat"))[-1] == ws.n_tokens - 2


def test_a_workspace_opened_before_an_append_says_so(tmp_path, small_jsonl):
    ws_path = tmp_path / "ws"
    ingest(ws_path, [small_jsonl])
    old = Workspace(ws_path)
    assert old.texts([0])[0] == SMALL_RECORDS[0]["text"]
    more = write_jsonl(tmp_path / "more.jsonl", [{"id": "d5", "text": "A new cat arrives", "source": "Gamma"}])
    ingest(ws_path, [more])
    with pytest.raises(WorkspaceError, match=r"changed after it was opened .* open it again"):
        old.texts([0])
    with pytest.raises(WorkspaceError, match="changed after it was opened"):
        old.documents
    assert Workspace(ws_path).texts([4])[4] == "A new cat arrives"


def test_bad_records_are_counted_and_written_to_the_rejects_file(tmp_path):
    p = tmp_path / "mixed.jsonl"
    p.write_bytes(b'{"id": "a", "text": "good text here", "time": 1990}\n'
                  b'{"id": "b", "text": "", "time": 1990}\n'
                  b'{"id": "c", "time": 1990}\n'
                  b'{"id": "a", "text": "same id again", "time": 1991}\n'
                  b'{"id": "d", "text": "bad time", "time": "soon"}\n'
                  b'not json\n'
                  b'{"id": "e", "text": "caf\xe9"}\n'
                  b'{"id": "f", "text": "!!! ???"}\n')
    s = ingest(tmp_path / "ws", [p])
    assert s.documents_total == 1 and s.rejects == 7
    rejects = [json.loads(line) for line in open(s.rejects_file, encoding="utf-8")]
    assert [(r["line"], r["reason"]) for r in rejects] == [
        (2, "empty text"),
        (3, "no 'text' field (set the text field with --text-field)"),
        (4, "duplicate id 'a'"),
        (5, "field 'time': cannot read a time from 'soon' (give a year, an ISO date such as 1965-03-02 or an ISO datetime)"),
        (6, "malformed JSON: Expecting value at column 1"),
        (7, "not valid UTF-8 (byte 24 of the line)"),
        (8, "the text has no tokens"),
    ]
    assert all(r["file"] == str(p) for r in rejects)
    # the rejects live in the store generation they belong to, and info names the file
    assert Workspace(tmp_path / "ws").summary()["rejects_file"] == s.rejects_file
    assert s.rejects_file == str(Workspace(tmp_path / "ws").store / "rejects.jsonl")


def test_strict_fails_on_the_first_reject_and_leaves_the_workspace_as_it_was(tmp_path, small_jsonl):
    ingest(tmp_path / "ws", [small_jsonl])
    bad = tmp_path / "bad.jsonl"
    bad.write_text('{"id": "x", "text": "fine"}\n{"id": "y", "text": ""}\n', encoding="utf-8")
    with pytest.raises(InputError, match=r"bad.jsonl, line 2: empty text \(--strict"):
        ingest(tmp_path / "ws", [bad], strict=True)
    ws = Workspace(tmp_path / "ws")
    assert ws.n_documents == 4
    assert sorted(p.name for p in (tmp_path / "ws").glob("store-*")) == [ws.store.name]


def test_an_interrupted_ingest_leaves_the_previous_corpus(tmp_path, small_jsonl, monkeypatch):
    ingest(tmp_path / "ws", [small_jsonl])
    more = write_jsonl(tmp_path / "more.jsonl", [{"id": "z", "text": "more words"}])

    def crash(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(store_module, "write_postings", crash)
    with pytest.raises(KeyboardInterrupt):
        ingest(tmp_path / "ws", [more])
    ws = Workspace(tmp_path / "ws")
    assert ws.n_documents == 4 and len(list((tmp_path / "ws").glob("store-*"))) == 1


def test_named_time_field_is_required_and_fields_can_be_mapped(tmp_path):
    p = write_jsonl(tmp_path / "f.jsonl", [{"key": "k1", "body": "one two", "outlet": "X", "when": "2001-02-03"},
                                           {"key": "k2", "body": "three", "outlet": "Y"}])
    s = ingest(tmp_path / "ws", [p], fields=FieldMap(text="body", id="key", source="outlet", time="when"))
    assert s.documents_total == 1 and s.reject_reasons == {"missing time": 1}
    docs = Workspace(tmp_path / "ws").documents
    assert (docs.loc[0, "doc_id"], docs.loc[0, "source"], docs.loc[0, "time"]) == ("k1", "X", "2001-02-03")


def test_missing_ids_and_sources_get_defaults(tmp_path):
    p = write_jsonl(tmp_path / "plain.jsonl", [{"text": "no id here"}, {"text": "nor here"}])
    ingest(tmp_path / "ws", [p])
    docs = Workspace(tmp_path / "ws").documents
    assert list(docs["doc_id"]) == ["plain:1", "plain:2"] and set(docs["source"]) == {"plain"}
    assert docs["year"].isna().all()


def test_errors_that_stop_ingest(tmp_path, small_jsonl):
    with pytest.raises(InputError, match="nope.jsonl: no such file"):
        ingest(tmp_path / "ws", [tmp_path / "nope.jsonl"])
    empty = tmp_path / "empty.jsonl"
    empty.write_text('{"text": ""}\n', encoding="utf-8")
    with pytest.raises(InputError, match=r"empty corpus: no usable records in .*empty.jsonl \(1 rejected; first: empty text\)"):
        ingest(tmp_path / "ws", [empty])
    assert not (tmp_path / "ws" / "CURRENT").exists()
    with pytest.raises(WorkspaceNotFound, match="no corpus in workspace"):
        Workspace(tmp_path / "ws")
    ingest(tmp_path / "ws2", [small_jsonl])
    other = write_jsonl(tmp_path / "o.jsonl", [{"text": "x"}])
    with pytest.raises(WorkspaceError, match="tokenizer settings"):
        ingest(tmp_path / "ws2", [other], tokenizer=TokenizerSettings(lowercase=False))


def test_tokenizer_normalises_and_keeps_inner_hyphens():
    tok = Tokenizer()
    assert tok.tokenize("Well-known O'Brien ﬁnds 2 CAFÉS, café!") == ["well-known", "o'brien", "finds", "2", "cafés", "café"]
    assert Tokenizer(TokenizerSettings(lowercase=False, normalization="none")).tokenize("ﬁne Day") == ["ﬁne", "Day"]


def test_token_file_matches_offsets(small_ws):
    assert small_ws.tokens.dtype == np.dtype("<u4")
    assert np.all(np.diff(small_ws.doc_offsets) == small_ws.documents["n_tokens"].to_numpy())


# ---- honest ingest: field use, mapping changes, the corpus hash ---------------------------------

OUTLET_RECORDS = [{"doc_id": f"k{i}", "outlet": ["North Herald", "South Wire"][i % 2], "year": 1960 + i,
                   "body": f"the harbour lantern number {i} shone"} for i in range(6)]


def test_fields_absent_in_most_records_are_named_with_what_was_used(tmp_path):
    # issue 14: with only --text-field body, one source named after the file and no times, silently
    p = write_jsonl(tmp_path / "outlets.jsonl", OUTLET_RECORDS)
    s = ingest(tmp_path / "ws", [p], fields=FieldMap(text="body"))
    w = "\n".join(s.warnings)
    assert "outlets.jsonl: source: no 'source' field in 6 of 6 records; the source is the file name 'outlets'" in w
    assert "time: no 'time' or 'date' field in 6 of 6 records; documents have no time" in w
    assert "id: no 'id' field in 6 of 6 records" in w
    assert "fields found (records): body (6), doc_id (6), outlet (6), year (6)" in w
    assert "text:" not in w  # the text field is there


def test_fields_present_in_most_records_give_no_warning(tmp_path):
    records = [dict(r, id=r["doc_id"], title="t") for r in OUTLET_RECORDS]
    records[0] = {"body": "one record without the others"}  # 1 of 6 absent is not "most"
    p = write_jsonl(tmp_path / "o.jsonl", records)
    s = ingest(tmp_path / "ws", [p], fields=FieldMap(text="body", id="id", source="outlet", time="year"))
    assert s.warnings == [] and s.rejects == 1  # the record without a year is rejected (named time field)
    assert Workspace(tmp_path / "ws").manifest["inputs"][0]["fields_found"]["outlet"] == 5


def test_reingesting_with_another_mapping_asks_for_replace_which_rebuilds(tmp_path):
    # issue 14: re-ingesting with --source-field outlet --time-field year said "already ingested"
    p = write_jsonl(tmp_path / "outlets.jsonl", OUTLET_RECORDS)
    other = write_jsonl(tmp_path / "other.jsonl", [{"body": "a second file", "outlet": "East Post"}])
    ingest(tmp_path / "ws", [p, other], fields=FieldMap(text="body"))
    mapping = FieldMap(text="body", id="doc_id", source="outlet", time="year")
    with pytest.raises(WorkspaceError, match=r"outlets.jsonl is already in workspace .* source=source time=auto"
                                             r".* source=outlet time=year.* add --replace"):
        ingest(tmp_path / "ws", [p], fields=mapping)
    s = ingest(tmp_path / "ws", [p], fields=mapping, replace=True)
    assert s.replaced and [i.status for i in s.inputs] == ["added"]
    ws = Workspace(tmp_path / "ws")
    docs = ws.documents
    assert set(docs["source"]) == {"North Herald", "South Wire"}  # the other file is gone: a rebuild
    assert list(docs["year"]) == [1960 + i for i in range(6)] and list(docs["doc_id"])[0] == "k0"
    assert ws.summary()["field_mapping"] == "outlets.jsonl: text=body id=doc_id source=outlet time=year title=title"
    assert len(list((tmp_path / "ws").glob("store-*"))) == 1


def test_replace_may_change_the_tokenizer_and_drops_old_rejects(tmp_path, small_jsonl):
    bad = tmp_path / "bad.jsonl"
    bad.write_text('{"text": ""}\n', encoding="utf-8")
    ingest(tmp_path / "ws", [small_jsonl, bad])
    s = ingest(tmp_path / "ws", [small_jsonl], tokenizer=TokenizerSettings(lowercase=False), replace=True)
    ws = Workspace(tmp_path / "ws")
    assert "The" in ws.vocab.index and s.rejects_file is None and not ws.rejects_file.exists()


def test_the_corpus_hash_covers_mapping_sources_and_times(tmp_path):
    # issue 14: both workspaces (text only, and the full mapping) hashed the same
    p = write_jsonl(tmp_path / "outlets.jsonl", OUTLET_RECORDS)
    full = FieldMap(text="body", id="doc_id", source="outlet", time="year")
    hashes = {}
    for name, fields, default in [("plain", FieldMap(text="body"), None), ("full", full, None),
                                  ("again", full, None), ("named", FieldMap(text="body"), "Gazette"),
                                  ("headline", FieldMap(text="body", title="headline"), None)]:
        ingest(tmp_path / name, [p], fields=fields, default_source=default)
        hashes[name] = Workspace(tmp_path / name).corpus_hash
    assert hashes["full"] == hashes["again"]  # same file, same mapping: the same corpus
    # "headline" is in no record, so only the mapping differs from "plain", not the stored documents
    assert len({hashes["plain"], hashes["full"], hashes["named"], hashes["headline"]}) == 4


def test_the_corpus_hash_covers_stored_document_content():
    from tracer.corpus.ingest import corpus_hash
    entry = {"sha256": "f" * 64, "fields": FieldMap().to_dict(), "default_source": None, "content_sha256": "a"}
    tok = TokenizerSettings().to_dict()
    assert corpus_hash(tok, [entry]) != corpus_hash(tok, [dict(entry, content_sha256="b")])
    assert corpus_hash(tok, [entry]) == corpus_hash(dict(tok), [dict(entry)])
