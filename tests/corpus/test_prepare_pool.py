"""Preparing records on worker processes stores the corpus the serial path stores, and stays crash-safe."""

import multiprocessing
import os
import signal
import sqlite3

import numpy as np
import pytest

import tracer.corpus.prepare_pool as prepare_pool
from tests.conftest import lee_documents, write_jsonl
import tracer.corpus.ingest as ingest_module
from tracer.corpus.ingest import ingest
from tracer.corpus.tokenize import TokenizerSettings
from tracer.corpus.workspace import Workspace
from tracer.errors import InputError

FORK = multiprocessing.get_context("fork")


@pytest.fixture(scope="module")
def lee_input(tmp_path_factory):
    folder = tmp_path_factory.mktemp("pool")
    docs = [t for t in lee_documents() if t.strip()]
    records = [{"id": f"lee{i}", "source": f"s{i % 3}", "time": 1990 + i % 20, "text": t} for i, t in enumerate(docs)]
    # rejects in the stream: an empty text, a duplicate id, a text of no tokens, an uppercase text for the case rule
    records[10]["text"] = ""
    records[20]["id"] = "lee3"
    records[30]["text"] = "... !!! ---"
    records[40]["text"] = "İSTANBUL Straße DON’T " + records[40]["text"].upper()
    return write_jsonl(folder / "lee.jsonl", records)


def stored(ws_path):
    ws = Workspace(ws_path)
    with sqlite3.connect(ws.store / "corpus.sqlite") as con:
        rows = con.execute("SELECT doc_index, doc_id, source, time, title, text, n_tokens, token_start, input_line "
                           "FROM documents ORDER BY doc_index").fetchall()
    rejects = (ws.rejects_file.read_text(encoding="utf-8") if ws.rejects_file.is_file() else "")
    return ws, rows, rejects


@pytest.mark.parametrize("settings", [None, TokenizerSettings(lowercase=False, normalization="NFC"),
                                      TokenizerSettings(case_rule="turkish")])
def test_workers_store_what_the_serial_path_stores(tmp_path, lee_input, monkeypatch, settings):
    monkeypatch.setattr(prepare_pool, "CHUNK_CHARS", 5_000)  # about 30 chunks: the workers start
    started = []
    real = prepare_pool.multiprocessing.get_context
    monkeypatch.setattr(prepare_pool.multiprocessing, "get_context", lambda m: started.append(m) or real(m))
    serial = ingest(tmp_path / "one", [lee_input], tokenizer=settings, jobs=1)
    assert started == []
    parallel = ingest(tmp_path / "two", [lee_input], tokenizer=settings, jobs=2)
    assert started == ["spawn"]
    (a, rows_a, rej_a), (b, rows_b, rej_b) = stored(tmp_path / "one"), stored(tmp_path / "two")
    assert a.corpus_hash == b.corpus_hash
    assert np.array_equal(np.asarray(a.tokens), np.asarray(b.tokens))
    assert np.array_equal(a.doc_offsets, b.doc_offsets)
    assert a.vocab.words == b.vocab.words and np.array_equal(a.vocab.counts, b.vocab.counts)
    assert rows_a == rows_b and rej_a == rej_b and rej_a.count("\n") == 3
    assert serial.reject_reasons == parallel.reject_reasons


def test_one_chunk_never_starts_workers(tmp_path, small_jsonl, monkeypatch):
    monkeypatch.setattr(prepare_pool.multiprocessing, "get_context",
                        lambda m: pytest.fail("workers started for a small input"))
    assert ingest(tmp_path / "ws", [small_jsonl], jobs=4).documents_total == 4


def _ingest_killed_while_tokenizing(ws, path):
    prepare_pool.CHUNK_CHARS = 5_000  # the parent's chunks (the workers need no setting)
    os.environ["TRACER_TEST_KILL_AT"] = "tokenizing"
    ingest(ws, [path], jobs=2)


def test_a_kill_while_workers_tokenize_leaves_the_old_corpus_and_frees_the_lock(tmp_path, lee_input, small_jsonl):
    ws_path = tmp_path / "ws"
    ingest(ws_path, [small_jsonl])
    p = FORK.Process(target=_ingest_killed_while_tokenizing, args=(ws_path, lee_input))
    p.start()
    p.join(timeout=120)
    assert p.exitcode == -signal.SIGKILL
    assert Workspace(ws_path).n_documents == 4
    # no worker holds the lock: a writer that will not wait gets it at once
    again = ingest(ws_path, [lee_input], wait=False, jobs=1)
    alone = ingest(tmp_path / "alone", [lee_input], jobs=1)
    assert again.documents_total == 4 + alone.documents_total



def test_workers_print_nothing_on_the_terminal(capfd):
    # a kill -9 of the ingest while its workers start or finish a chunk made them print tracebacks
    # (EOFError in spawn, a broken result pipe) on the user's terminal after the ingest had ended
    # (found by the outside probe's kill trials): workers are started with stderr on /dev/null
    import multiprocessing
    import sys
    with prepare_pool.children_without_stderr():
        p = multiprocessing.get_context("spawn").Process(target=os.write, args=(2, b"Traceback from a worker\n"))
        p.start()
    p.join()
    print("the parent's own line", file=sys.stderr)
    assert p.exitcode == 0 and capfd.readouterr().err == "the parent's own line\n"


def test_one_pool_serves_every_input_and_is_gone_after_an_error(tmp_path, lee_input, monkeypatch):
    # the workers started for the first input prepare the second one too (its own settings reach
    # them with each chunk), and a --strict stop in the second input terminates them
    monkeypatch.setattr(prepare_pool, "CHUNK_CHARS", 5_000)
    started = []
    real = prepare_pool.multiprocessing.get_context
    monkeypatch.setattr(prepare_pool.multiprocessing, "get_context", lambda m: started.append(m) or real(m))
    pools = []  # the test holds each pool, so that only the ingest's own cleanup can end the workers

    class Held(prepare_pool.PreparePool):
        def __init__(self, jobs):
            super().__init__(jobs)
            pools.append(self)

    monkeypatch.setattr(ingest_module, "PreparePool", Held)
    earlier = set(multiprocessing.active_children())  # other tests' processes, still running in the suite
    left = lambda: set(multiprocessing.active_children()) - earlier  # noqa: E731
    docs = [t for t in lee_documents() if t.strip()]
    second = write_jsonl(tmp_path / "second.jsonl", [{"id": f"x{i}", "text": t} for i, t in enumerate(docs)])
    both = ingest(tmp_path / "both", [lee_input, second], jobs=2)
    assert started == ["spawn"] and left() == set() and pools[0].pool is None
    alone = ingest(tmp_path / "alone", [second], jobs=1)
    assert Workspace(tmp_path / "both").n_documents == both.documents_total
    assert both.documents_total == alone.documents_total + ingest(tmp_path / "first", [lee_input], jobs=1).documents_total
    bad = write_jsonl(tmp_path / "bad.jsonl", [{"id": f"y{i}", "text": t} for i, t in enumerate(docs[:-1])]
                      + [{"id": "y0", "text": "a duplicate at the end"}])
    with pytest.raises(InputError, match=r"bad.jsonl, line \d+: duplicate id 'y0' \(--strict"):
        ingest(tmp_path / "strict", [second, bad], jobs=2, strict=True)
    assert len(started) == 2 and left() == set() and pools[-1].pool is None
