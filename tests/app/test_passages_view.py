"""Passages as people read them (reading view, kwic) and as programs read them (CSV, JSON), built
from the marks' offsets: texts holding [[ ]], « », carets, markup or control characters gain no
fake mark, and every line fits the terminal."""

import csv
import io
import json

import pandas as pd
from hypothesis import given, settings, strategies as st

from tracer.analysis.passages import Marks, parse_marks
from tracer.app.output import TERMINAL_WIDTH, render
from tracer.app.passages_view import (BOLD, PLAIN, QUOTE, UNDER, display_chars, kwic_text, passages_text,
                                      text_width, wrap_chars)

HOSTILE = ("The [[velmari]] «people» spoke of ^^agony^^ and ]] evil <script>alert(1)</script> "
           "\x1b[31mred\x1b[0m \u202etxet\u202c 東京の人々 agony.\nNext line\tafter a tab, " + "filler " * 20 + "agony")


def _row(text, words, **extra):
    """A passage row marking each (word, occurrence) of ``words`` in ``text``."""
    marks, at = Marks(), 0
    for w, set_name in words:
        a = text.index(w, at)
        marks.append({"start": 100 + a, "end": 100 + a + len(w), "word": w.lower(), "set": set_name})
        at = a + len(w)
    return {"passage_id": f"d1#{100}", "doc_id": "d1", "passage": 1, "source": "Gazette", "time": "1971-07-25",
            "doc_rank": 1, "doc_change": -0.0123, "doc_estimate": -0.011, "evidence": "supports", "supporting": 2,
            "countering": 1, "pairs": 3, "start": 100, "end": 100 + len(text), "marks": marks, "text": text,
            "note": "", **extra}


WORDS = [("velmari", "targets_x"), ("agony", "attributes_a"), ("evil", "attributes_a"), ("人々", "targets_y"),
         ("agony", "attributes_a")]
DF = pd.DataFrame([_row(HOSTILE, WORDS)])


def _marked_under_carets(text: str) -> list[str]:
    """The runs of text above the carets of each (text line, marker line) pair of the reading view."""
    lines, runs = text.splitlines(), []
    for line, under in zip(lines, lines[1:]):
        if not line.startswith(QUOTE) or not under.startswith(UNDER) or "^" not in under:
            continue
        shown, col, current = line[len(QUOTE):], 0, ""
        marker = under[len(UNDER):]
        for ch in shown:
            w = text_width(ch)
            if marker[col:col + w].strip("^") == "" and marker[col:col + w]:
                current += ch
            elif current:
                runs.append(current)
                current = ""
            col += w
        if current:
            runs.append(current)
    return runs


def test_reading_view_marks_exactly_the_marked_words_and_nothing_in_the_text():
    text = passages_text(DF)
    assert _marked_under_carets(text) == ["velmari", "agony", "evil", "人々", "agony"]
    assert "[[velmari]]" in text and "«people»" in text and "^^agony^^" in text  # the text as written
    assert "\x1b" not in text and "\u202e" not in text and "\t" not in text  # controls shown as U+FFFD or space
    assert all(text_width(line) <= TERMINAL_WIDTH for line in text.splitlines())
    head = text.splitlines()[0]
    assert head == "d1#100  supports (2 for, 1 against)  rank 1, change if removed -0.0123  Gazette  1971-07-25"
    assert "  words: velmari (targets_x), agony (attributes_a), evil (attributes_a), 人々 (targets_y)," in text


def test_bold_view_wraps_only_the_marks_in_ansi_bold():
    text = passages_text(DF, emphasis="bold")
    assert text.count(BOLD) == len(WORDS) and text.count(PLAIN) == len(WORDS)
    bolded = [part.split(PLAIN)[0] for part in text.split(BOLD)[1:]]
    assert bolded == ["velmari", "agony", "evil", "人々", "agony"]
    assert "^" * 5 not in text.replace("^^agony^^", "")


def test_kwic_lines_fit_100_columns_and_align_the_keyword():
    df = pd.DataFrame([_row(HOSTILE, WORDS), _row("short agony text", [("agony", "attributes_a")],
                                                  passage_id="d2#5")])
    text = kwic_text(df)
    lines = text.splitlines()
    assert all(text_width(line) <= TERMINAL_WIDTH for line in lines)
    body = [line for line in lines if line.startswith("  ")]
    assert len(body) == len(WORDS) + 1
    cols = set()
    for line, (word, set_name) in zip(body, WORDS + [("agony", "attributes_a")]):
        assert line.split()[0] == set_name
        # the keyword starts at the same display column on every line
        prefix = line[:line.index(word, len("  " + set_name) + 2 + 30)]
        cols.add(text_width(prefix))
    assert len(cols) == 1, cols
    wide = kwic_text(df, width=None)
    assert max(text_width(line) for line in wide.splitlines()) > TERMINAL_WIDTH  # --wide: contexts in full


def test_wrap_and_display_rules():
    # Unicode UAX #11: CJK ideographs are Wide (two columns); a combining accent takes none
    assert text_width("東京ab") == 6 and text_width("e\u0301") == 1
    chars = display_chars("a  b\n\tc", [(3, 4)])
    assert "".join(c for c, _ in chars) == "a b c" and [m for _, m in chars] == [False, False, True, False, False]
    lines = wrap_chars(display_chars("東京 " * 30, []), 20)
    assert all(text_width("".join(c for c, _ in line)) <= 20 for line in lines) and len(lines) > 1


def test_csv_and_json_carry_offsets_and_plain_text():
    rows = list(csv.DictReader(io.StringIO(render(DF, "csv"))))
    assert rows[0]["text"] == HOSTILE  # the plain text, no marks inside
    assert parse_marks(rows[0]["marks"]) == list(DF.iloc[0].marks)
    assert rows[0]["marks"].split(";")[0] == f"{100 + HOSTILE.index('velmari')}-{104 + HOSTILE.index('velmari') + 3}" \
                                            ":velmari:targets_x"
    out = json.loads(render(DF, "json"))
    assert out[0]["marks"][0] == {"start": 100 + HOSTILE.index("velmari"), "end": 107 + HOSTILE.index("velmari"),
                                  "word": "velmari", "set": "targets_x"}
    assert out[0]["text"] == HOSTILE


@settings(max_examples=60, deadline=None)
@given(st.text(alphabet=st.sampled_from(list("ab [[]]«»^<>&\n\t東") + ["\x1b", "\u0301"]), min_size=1, max_size=300))
def test_any_text_with_one_mark_shows_one_marked_run(filler):
    text = filler + " velmari " + filler
    df = pd.DataFrame([_row(text, [("velmari", "targets_x")])])
    shown = passages_text(df)
    assert _marked_under_carets(shown) == ["velmari"]
    assert all(text_width(line) <= TERMINAL_WIDTH for line in shown.splitlines())
    assert all(text_width(line) <= TERMINAL_WIDTH for line in kwic_text(df).splitlines())


def _cli(*args):
    from click.testing import CliRunner

    from tracer.app.cli import cli
    return CliRunner().invoke(cli, [str(a) for a in args])


def test_passages_command_layouts_fit_and_csv_json_hold_offsets(demo_ws):
    base = ("passages", "-w", demo_ws.path, "velmari", "--with", "agony,evil", "--top", "3")
    for layout in ("reading", "kwic"):
        res = _cli(*base, "--layout", layout)
        assert res.exit_code == 0, res.output
        lines = res.stdout.splitlines()
        assert lines and all(text_width(line) <= TERMINAL_WIDTH for line in lines)
        assert "[[" not in res.stdout and "\x1b" not in res.stdout  # CliRunner is no terminal: carets
    kwic = _cli(*base, "--layout", "kwic").stdout.splitlines()
    assert sum(line.split()[0] in ("word", "context") for line in kwic if line.startswith("  ")) >= 6
    rows = list(csv.DictReader(io.StringIO(_cli(*base, "--format", "csv").stdout)))
    texts = demo_ws.texts(demo_ws.documents.doc_index)
    index = dict(zip(demo_ws.documents.doc_id, demo_ws.documents.doc_index))
    for r in rows:
        for m in parse_marks(r["marks"]):
            assert texts[index[r["doc_id"]]][m["start"]:m["end"]].lower() == m["word"]
    assert json.loads(_cli(*base, "--format", "json").stdout)[0]["marks"][0]["set"] in ("word", "context")
    res = _cli(*base, "--layout", "kwic", "--format", "csv")
    assert res.exit_code == 1 and res.stderr.startswith("Error: --layout kwic shapes the terminal view")
