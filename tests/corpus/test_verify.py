"""tracer verify: a sound workspace passes; each kind of damage is named."""

import json

import numpy as np
import pytest

from tests.conftest import write_jsonl
from tracer.corpus.ingest import ingest
from tracer.corpus.verify import verify_workspace
from tracer.corpus.workspace import Workspace


@pytest.fixture
def ws_path(tmp_path, small_jsonl):
    ingest(tmp_path / "ws", [small_jsonl])
    more = write_jsonl(tmp_path / "more.jsonl", [{"id": "d5", "text": "A new cat arrives", "source": "Gamma"}])
    ingest(tmp_path / "ws", [more])
    return tmp_path / "ws"


def test_a_sound_workspace_passes_every_check(ws_path):
    report = verify_workspace(ws_path)
    assert report.ok, report.problems
    assert report.store == Workspace(ws_path).store.name
    assert any("postings list each word's positions" in c for c in report.checked)
    assert any("corpus hash matches" in c for c in report.checked)


def _store(ws_path):
    return Workspace(ws_path).store


def test_tokens_cut_short_are_found(ws_path):
    f = _store(ws_path) / "tokens.u32"
    f.write_bytes(f.read_bytes()[:-8])
    assert any("tokens.u32 holds" in p for p in verify_workspace(ws_path).problems)


def test_a_changed_vocabulary_count_is_found(ws_path):
    f = _store(ws_path) / "vocab.tsv"
    lines = f.read_text(encoding="utf-8").splitlines(keepends=True)
    i, w, c = lines[1].rstrip("\n").split("\t")
    lines[1] = f"{i}\t{w}\t{int(c) + 1}\n"
    f.write_text("".join(lines), encoding="utf-8")
    assert any("counts in vocab.tsv differ" in p for p in verify_workspace(ws_path).problems)


def test_swapped_postings_are_found(ws_path):
    f = _store(ws_path) / "postings_pos.i64"
    pos = np.fromfile(f, dtype="<i8")
    pos[[0, -1]] = pos[[-1, 0]]
    pos.tofile(f)
    assert any("postings do not list" in p for p in verify_workspace(ws_path).problems)


def test_postings_in_order_but_of_another_word_are_found(ws_path):
    store = _store(ws_path)
    tokens = np.fromfile(store / "tokens.u32", dtype="<u4")
    ptr = np.fromfile(store / "postings_ptr.i64", dtype="<i8")
    pos = np.fromfile(store / "postings_pos.i64", dtype="<i8")
    # one posting moved to the next token, still ascending, but that token is another word
    k = next(k for k in range(len(pos) - 1) if pos[k + 1] > pos[k] + 1 and tokens[pos[k] + 1] != tokens[pos[k]]
             and k + 1 not in ptr)
    pos[k] += 1
    pos.tofile(store / "postings_pos.i64")
    assert any("postings do not list" in p for p in verify_workspace(ws_path).problems)


def test_offsets_that_disagree_with_the_documents_table_are_found(ws_path):
    f = _store(ws_path) / "doc_offsets.i64"
    off = np.fromfile(f, dtype="<i8")
    off[1] += 1
    off.tofile(f)
    assert any("document offsets disagree" in p for p in verify_workspace(ws_path).problems)


def test_an_edited_manifest_is_found(ws_path):
    f = _store(ws_path) / "manifest.json"
    m = json.loads(f.read_text(encoding="utf-8"))
    m["inputs"][0]["fields"]["source"] = "outlet"
    f.write_text(json.dumps(m), encoding="utf-8")
    assert any("corpus hash does not match" in p for p in verify_workspace(ws_path).problems)


def test_damaged_current_and_leftover_folders(ws_path):
    store = _store(ws_path)
    (ws_path / "store-0099").mkdir()
    report = verify_workspace(ws_path)
    assert report.ok and any("store-0099 is not the current store" in n for n in report.notes)
    (ws_path / "CURRENT").write_text("", encoding="utf-8")
    report = verify_workspace(ws_path)
    assert not report.ok and "holds nothing" in report.problems[0] and store.name in report.problems[0]
