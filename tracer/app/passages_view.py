"""Passages for reading in a terminal: a reading view and an aligned keyword-in-context view.

Both are built from the marks' character offsets (never from brackets in the text), so a text
that holds ``[[``, ``«`` or ``^`` shows as written and gains no fake mark. Emphasis:

- ``bold``: marked words in ANSI bold (only for a terminal; the command decides);
- ``caret``: in the reading view, each text line is quoted (``  | ``) and a line of ``^`` under
  it marks the marked characters; a marker line never starts with ``|``, so the two cannot be
  confused whatever the text holds. The keyword-in-context view needs no marker: the keyword
  has its own column.

Before display the text is made safe and flat: whitespace runs become one space, control and
bidirectional-override characters become U+FFFD (so a stored text cannot move the cursor or
reorder the line), and widths count East Asian wide characters as two columns and combining
marks as none.
"""

from __future__ import annotations

import unicodedata

import pandas as pd

from tracer.app.output import ELLIPSIS, TERMINAL_WIDTH, format_number, plain_values

LAYOUTS = ("reading", "kwic")
EMPHASIS = ("caret", "bold")
BOLD, PLAIN = "\x1b[1m", "\x1b[0m"
QUOTE, UNDER = "  | ", "    "
REPLACEMENT = "\ufffd"
_BIDI = set(range(0x202A, 0x202F)) | set(range(0x2066, 0x206A)) | {0x061C, 0x200E, 0x200F}


def _safe(ch: str) -> str:
    """One character as shown: whitespace a space, controls and bidi overrides U+FFFD."""
    if ch.isspace():
        return " "
    if unicodedata.category(ch) == "Cc" or ord(ch) in _BIDI:
        return REPLACEMENT
    return ch


def char_width(ch: str) -> int:
    """Terminal columns of one character: 2 for East Asian wide, 0 for combining and format marks."""
    if unicodedata.combining(ch) or unicodedata.category(ch) in ("Mn", "Me", "Cf"):
        return 0
    return 2 if unicodedata.east_asian_width(ch) in ("W", "F") else 1


def text_width(text: str) -> int:
    return sum(char_width(c) for c in text)


def display_chars(text: str, spans: list[tuple[int, int]]) -> list[tuple[str, bool]]:
    """``text`` as (shown character, marked) pairs, whitespace runs collapsed, ends stripped;
    ``spans`` are marked character ranges relative to ``text``."""
    marked = [False] * len(text)
    for a, b in spans:
        for i in range(max(0, a), min(len(text), b)):
            marked[i] = True
    out: list[tuple[str, bool]] = []
    for ch, m in zip(text, marked):
        ch = _safe(ch)
        if ch == " " and (not out or out[-1][0] == " "):
            continue
        out.append((ch, m))
    while out and out[-1][0] == " ":
        out.pop()
    return out


def wrap_chars(chars: list[tuple[str, bool]], width: int | None) -> list[list[tuple[str, bool]]]:
    """Greedy wrap at spaces to ``width`` columns (a word longer than a line is cut)."""
    if width is None:
        return [chars] if chars else []
    lines, line, used, last_space = [], [], 0, -1
    for ch, m in chars:
        w = char_width(ch)
        if used + w > width:
            if ch == " ":
                lines.append(line)
                line, used, last_space = [], 0, -1
                continue
            if last_space >= 0:
                lines.append(line[:last_space])
                line = line[last_space + 1:]
            else:
                lines.append(line)
                line = []
            used, last_space = sum(char_width(c) for c, _ in line), -1
        if ch == " ":
            if not line:
                continue
            last_space = len(line)
        line.append((ch, m))
        used += w
    if line:
        lines.append(line)
    return lines


def _emphasised(chars: list[tuple[str, bool]]) -> str:
    out, bold = [], False
    for ch, m in chars:
        if m != bold:
            out.append(BOLD if m else PLAIN)
            bold = m
        out.append(ch)
    return "".join(out) + (PLAIN if bold else "")


def _carets(chars: list[tuple[str, bool]]) -> str:
    return "".join(("^" if m else " ") * char_width(ch) for ch, m in chars).rstrip()


def _shorten(text: str, width: int | None) -> str:
    """A heading cut to ``width`` columns with an ellipsis (display widths)."""
    if width is None or text_width(text) <= width:
        return text
    out, used = [], 0
    for ch in text:
        if used + char_width(ch) > width - 1:
            break
        out.append(ch)
        used += char_width(ch)
    return "".join(out) + ELLIPSIS


def _v(row, key):
    v = plain_values(row.get(key)) if key in row else None
    return None if v is None or v == "" else v


def heading(row) -> str:
    """One passage's heading: its id, its evidence, the document's contribution, source and time
    (in that order, so a cut at the terminal's width takes the time first)."""
    head = [str(_v(row, "passage_id"))]
    if _v(row, "evidence") is not None:
        head.append(f"{_v(row, 'evidence')} ({int(_v(row, 'supporting'))} for, {int(_v(row, 'countering'))} against)")
    if _v(row, "doc_rank") is not None:
        head.append(f"rank {int(_v(row, 'doc_rank'))}, change if removed {format_number(_v(row, 'doc_change'))}")
    if _v(row, "pair_count") is not None:
        n = format_number(_v(row, "pair_count"))
        head.append(f"{n} pair{'' if n == '1' else 's'} in the document")
    head += [str(_v(row, k)) for k in ("source", "time", "note") if _v(row, k) is not None]
    return "  ".join(_safe_text(h) for h in head)


def _safe_text(text: str) -> str:
    return "".join(c for c, _ in display_chars(text, []))


def _marks(row) -> list[dict]:
    marks = row.get("marks")
    return list(marks) if isinstance(marks, (list, tuple)) else []


def _relative(row) -> list[tuple[int, int]]:
    start = int(row["start"])
    return [(int(m["start"]) - start, int(m["end"]) - start) for m in _marks(row)]


def passages_text(df: pd.DataFrame, *, width: int | None = TERMINAL_WIDTH, layout: str = "reading",
                  emphasis: str = "caret") -> str:
    """Passages for reading (``layout`` "reading") or as aligned keyword-in-context lines ("kwic")."""
    if layout not in LAYOUTS or emphasis not in EMPHASIS:
        raise ValueError(f"layout must be one of {LAYOUTS} and emphasis one of {EMPHASIS}")
    if df.empty:
        return "(no passages)\n"
    if layout == "kwic":
        return kwic_text(df, width=width, emphasis=emphasis)
    body = None if width is None else width - len(QUOTE)
    out = []
    for row in df.to_dict(orient="records"):
        out.append(_shorten(heading(row), width))
        if not isinstance(row.get("text"), str):
            continue
        for line in wrap_chars(display_chars(row["text"], _relative(row)), body):
            if emphasis == "bold":
                out.append(QUOTE + _emphasised(line))
                continue
            out.append(QUOTE + "".join(c for c, _ in line))
            if any(m for _, m in line):
                out.append(UNDER + _carets(line))
        words = [f"{_safe_text(row['text'][m['start'] - int(row['start']):m['end'] - int(row['start'])])} "
                 f"({m['set']})" for m in _marks(row)]
        out += _wrap_words("  words:", words, width)
    return "\n".join(out) + "\n"


def _wrap_words(first: str, words: list[str], width: int | None) -> list[str]:
    """``words`` after ``first``, comma-joined, continued lines indented under the first word."""
    lines, line = [], first
    for i, w in enumerate(words):
        piece = w + ("," if i < len(words) - 1 else "")
        if width is not None and line != first and text_width(line) + 1 + text_width(piece) > width:
            lines.append(line)
            line = " " * len(first)
        line += " " + piece
    return [_shorten(line, width) for line in lines + [line]]


def _cut_left(text: str, width: int) -> str:
    """The last ``width`` columns of ``text`` (an ellipsis where it was cut), right-aligned."""
    if text_width(text) <= width:
        return " " * (width - text_width(text)) + text
    out, used = [], 1
    for ch in reversed(text):
        if used + char_width(ch) > width:
            break
        out.append(ch)
        used += char_width(ch)
    s = ELLIPSIS + "".join(reversed(out))
    return " " * (width - text_width(s)) + s


def _pad(text: str, width: int) -> str:
    text = _shorten(text, width)
    return text + " " * (width - text_width(text))


def kwic_text(df: pd.DataFrame, *, width: int | None = TERMINAL_WIDTH, emphasis: str = "caret") -> str:
    """One line per marked word under its passage's heading: set, left context right-aligned,
    the word, right context; every line fits ``width`` columns (None: contexts in full)."""
    items = []
    for row in df.to_dict(orient="records"):
        if not isinstance(row.get("text"), str):
            items.append((row, []))
            continue
        start, text, lines = int(row["start"]), row["text"], []
        for m in _marks(row):
            a, b = int(m["start"]) - start, int(m["end"]) - start
            left, right = _safe_text(text[:a]), _safe_text(text[b:])
            # keep the one space that parts the word from its context, and only where the text has one
            lines.append((str(m["set"]), left + " " if left and text[:a][-1:].isspace() else left,
                          _safe_text(text[a:b]), " " + right if right and text[b:b + 1].isspace() else right))
        items.append((row, lines))
    found = [ln for _, lines in items for ln in lines]
    set_w = max([len(s) for s, *_ in found] + [3])
    word_w = min(max([text_width(w) for _, _, w, _ in found] + [1]), 16)
    if width is None:
        left_w = max([text_width(l) for _, l, _, _ in found] + [0])
        right_w = max([text_width(r) for *_, r in found] + [0])
    else:
        room = width - 2 - set_w - 2 - word_w
        left_w, right_w = room // 2, room - room // 2
    out = []
    for row, lines in items:
        out.append(_shorten(heading(row), width))
        for set_name, left, word, right in lines:
            kw = _pad(word, word_w)
            if emphasis == "bold":
                kw = BOLD + kw.rstrip() + PLAIN + " " * (len(kw) - len(kw.rstrip()))
            right = right if width is None else _shorten(right, right_w)
            out.append(("  " + set_name.ljust(set_w) + "  " + _cut_left(left, left_w) + kw + right).rstrip())
    return "\n".join(out) + "\n"
