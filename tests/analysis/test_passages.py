"""Passages on a hand-built corpus whose answer is known by reading it: merged windows, offsets,
set tags, supports/counters, and texts holding bracket characters."""

import numpy as np
import pytest

from tests.conftest import write_jsonl
from tracer.analysis.document_counts import kept_stream
from tracer.analysis.passages import (Marks, find_passages, marks_text, merge_windows, pair_passages,
                                      parse_marks)
from tracer.core.counting import CountSettings
from tracer.corpus.ingest import ingest
from tracer.corpus.slices import slice_from_spec
from tracer.corpus.workspace import Workspace
from tracer.provenance.counts import count_slice

FILLER = " ".join(f"filler{i}" for i in range(20))
DOCS = [
    # three overlapping hits of x-targets with a-attributes: one passage of 5 pairs (window 2:
    # velm0-grim1, velm3-grim1, velm3-grim4, velm6-grim4, velm6-grim7)
    {"id": "three", "source": "S", "text": "Velm grim then velm grim then velm grim."},
    # brackets, guillemets, carets and markup in the text: ost-glad (y-b, for), velm-glad twice (x-b,
    # against); ost and the second glad are 3 tokens apart, outside the window
    {"id": "brackets", "source": "S", "text": "[[Ost]] glad «velm» ]] ^^ Glad <script>x</script>."},
    # two hits far apart: two passages
    {"id": "apart", "source": "S", "text": f"Velm grim {FILLER} ost glad"},
    # no hit
    {"id": "none", "source": "S", "text": f"velm {FILLER} grim"},
]
SETS = {"targets_x": ["velm"], "targets_y": ["ost"], "attributes_a": ["grim"], "attributes_b": ["glad"]}
SETTINGS = CountSettings(window=2, min_count=1)


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tiny")
    ingest(folder / "ws", [write_jsonl(folder / "tiny.jsonl", DOCS)])
    ws = Workspace(folder / "ws")
    sl = slice_from_spec(ws, "all")
    counts = count_slice(ws, sl.weights, SETTINGS, slice_name="all")
    return ws, counts, kept_stream(ws, sl.weights, counts)


def passages(tiny, direction=1, per_doc=3, context_tokens=2):
    ws, counts, stream = tiny
    return find_passages(ws, counts, stream, np.arange(len(DOCS)), SETS, ["targets_x", "targets_y"],
                         per_doc=per_doc, context_tokens=context_tokens, direction=direction)


def test_overlapping_windows_of_a_document_merge_into_one_passage(tiny):
    p = passages(tiny)
    three = p[p.doc_id == "three"]
    assert len(three) == 1
    row = three.iloc[0]
    assert row.pairs == 5 and row.start == 0 and row.end == len(DOCS[0]["text"]) - 1  # the final "." is no token
    assert [m["word"] for m in row.marks] == ["velm", "grim"] * 3
    apart = p[p.doc_id == "apart"]
    assert list(apart.passage) == [1, 2] and list(apart.pairs) == [1, 1]
    assert "none" not in set(p.doc_id)


def test_merge_windows_joins_touching_windows_only():
    assert merge_windows([(4, 6), (0, 3)]) == [(0, 6, [1, 0])]   # 3 and 4 touch
    assert merge_windows([(0, 3), (5, 6)]) == [(0, 3, [0]), (5, 6, [1])]
    assert merge_windows([(0, 9), (2, 3), (8, 12)]) == [(0, 12, [0, 1, 2])]


def test_marks_point_at_the_words_in_the_stored_text_with_their_sets(tiny):
    ws = tiny[0]
    p = passages(tiny)
    texts = ws.texts(range(len(DOCS)))
    index = dict(zip(ws.documents.doc_id, ws.documents.doc_index))
    for row in p.itertuples():
        text = texts[index[row.doc_id]]
        assert text[row.start:row.end] == row.text
        for m in row.marks:
            assert ws.normalize_words([text[m["start"]:m["end"]]]) == [m["word"]]
            assert m["word"] in SETS[m["set"]]
    brackets = p[p.doc_id == "brackets"].iloc[0]
    # the text's own [[ ]] and « » are text: four marks, at Ost, glad, velm, Glad
    assert [(DOCS[1]["text"][m["start"]:m["end"]], m["set"]) for m in brackets.marks] == [
        ("Ost", "targets_y"), ("glad", "attributes_b"), ("velm", "targets_x"), ("Glad", "attributes_b")]
    assert brackets.text == "Ost]] glad «velm» ]] ^^ Glad <script>x"  # two tokens of context after Glad


def test_supports_and_counters_follow_the_weat_rule_and_the_measured_sign(tiny):
    p = passages(tiny).set_index("passage_id")
    assert p.loc["three#0", ["supporting", "countering", "evidence"]].tolist() == [5, 0, "supports"]
    assert p.loc["brackets#2", ["supporting", "countering", "evidence"]].tolist() == [1, 2, "counters"]
    # a negative measured effect: the same pairs now push toward it, or against it
    n = passages(tiny, direction=-1).set_index("passage_id")
    assert n.loc["three#0", ["supporting", "countering", "evidence"]].tolist() == [0, 5, "counters"]
    assert n.loc["brackets#2", ["supporting", "countering", "evidence"]].tolist() == [2, 1, "supports"]
    ap = p[p.doc_id == "apart"]
    assert list(ap.evidence) == ["supports", "supports"]  # x-a and y-b


def test_passage_ids_are_stable_and_per_doc_keeps_the_strongest(tiny):
    a, b = passages(tiny), passages(tiny)
    assert list(a.passage_id) == list(b.passage_id) and a.passage_id.is_unique
    assert all(pid == f"{d}#{s}" for pid, d, s in zip(a.passage_id, a.doc_id, a.start))
    one = passages(tiny, per_doc=1)
    assert one.doc_id.value_counts().max() == 1
    # the kept passage keeps its ordinal and id among all of its document's passages
    assert set(one.passage_id) <= set(a.passage_id)


def test_marks_print_compactly_and_parse_back(tiny):
    row = passages(tiny).iloc[0]
    text = str(row.marks)
    assert text == marks_text(row.marks) and text.startswith("0-4:velm:targets_x;5-9:grim:attributes_a;")
    assert parse_marks(text) == list(row.marks) and parse_marks("") == Marks()


def test_pair_passages_tag_word_and_context(tiny):
    ws = tiny[0]
    p = pair_passages(ws, "VELM", ["glad"], slice_from_spec(ws, "all"), SETTINGS, context_tokens=2)
    assert set(p.doc_id) == {"brackets"} and "evidence" not in p.columns
    assert [(m["word"], m["set"]) for m in p.iloc[0].marks] == [("glad", "context"), ("velm", "word"),
                                                                ("glad", "context")]
    assert p.iloc[0].pairs == 2 and p.iloc[0].pair_count > 0
