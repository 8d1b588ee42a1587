import json

import numpy as np
import pytest

from tests.conftest import SMALL_RECORDS, write_jsonl
from tracer.corpus import ingest as ingest_module
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

    monkeypatch.setattr(ingest_module, "_write_postings", crash)
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
