"""Passages: the stretches of a document's text where probe words co-occur, with their offsets.

A co-occurrence is a pair of kept tokens (a target-side word and an attribute-side word) at
most ``window`` kept tokens apart, exactly as the counter windows the text (words outside the
vocabulary are removed first, :func:`tracer.analysis.document_counts.kept_stream`). Each
co-occurrence opens a window of ``context_tokens`` tokens either side of its two words; the
windows of one document that overlap or touch are merged into one passage, which marks every
word of every co-occurrence inside it.

A mark is ``{"start", "end", "word", "set"}``: character offsets into the stored text (so
``text[start:end]`` is the word as written, and normalises to ``word``), the vocabulary word,
and the set it belongs to (``targets_x`` ... ``attributes_b`` for a test; ``word`` or
``context`` for a pair; names joined by ``+`` for a word in several sets). Marks are never
written into the text: a text holding ``[[`` or ``«`` stays as it is.

Supports or counters (the WEAT rule): a co-occurrence of an x-target with an a-attribute or of a
y-target with a b-attribute pushes the association toward a positive effect (d > 0); x-b and y-a
push it toward a negative one. ``direction`` is the sign of the measured effect, so a pair
*supports* when it pushes toward the measured direction and *counters* when it pushes against
it; a pair whose words sit in sets that cancel (a target in both x and y) does neither.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracer.core.counting import CountSettings
from tracer.corpus.slices import Slice
from tracer.errors import WordNotInVocabulary

SET_NAMES = {"x": "targets_x", "y": "targets_y", "a": "attributes_a", "b": "attributes_b"}
# sign of a co-occurrence toward a positive association, by (target set, attribute set)
PAIR_SIGN = {("targets_x", "attributes_a"): 1, ("targets_y", "attributes_b"): 1,
             ("targets_x", "attributes_b"): -1, ("targets_y", "attributes_a"): -1}
TEST_COLUMNS = ["passage_id", "doc_id", "passage", "source", "time", "doc_rank", "doc_change", "doc_estimate",
                "evidence", "supporting", "countering", "pairs", "start", "end", "marks", "text", "note"]
PAIR_COLUMNS = ["passage_id", "doc_id", "passage", "source", "time", "pair_count", "pairs", "start", "end", "marks",
                "text", "note"]


class Marks(list):
    """A passage's marks (dicts ``start, end, word, set``, in text order). Prints, and so is written
    to CSV, as ``start-end:word:set`` joined by ``;``; JSON keeps the list of objects."""

    def __str__(self) -> str:
        return marks_text(self)

    __repr__ = __str__


def marks_text(marks) -> str:
    """The compact text of marks: ``12-19:velmari:targets_x;40-45:agony:attributes_a``."""
    return ";".join(f"{m['start']}-{m['end']}:{m['word']}:{m['set']}" for m in marks)


def parse_marks(text: str) -> Marks:
    """The marks of :func:`marks_text` (a CSV cell) back as a list of dicts (words hold no ``:`` or ``;``)."""
    out = Marks()
    for part in filter(None, str(text).split(";")):
        span, word, set_name = part.split(":", 2)
        start, end = span.split("-", 1)
        out.append({"start": int(start), "end": int(end), "word": word, "set": set_name})
    return out


def co_occurrences(ids: np.ndarray, window: int, target_ids, attribute_ids) -> list[tuple[int, int]]:
    """(target index, attribute index) pairs of one document's kept tokens ``ids`` (shape (n,)) at
    most ``window`` apart, as counted; a token is never paired with itself."""
    attribute_ids = set(attribute_ids)
    found = []
    for q in np.flatnonzero(np.isin(ids, list(target_ids))):
        for q2 in range(max(0, q - window), min(len(ids), q + window + 1)):
            if q2 != q and ids[q2] in attribute_ids:
                found.append((int(q), int(q2)))
    return found


def merge_windows(windows: list[tuple[int, int]]) -> list[tuple[int, int, list[int]]]:
    """Windows (first, last token, inclusive) merged where they overlap or touch, as
    (first, last, indices of the merged input windows), in text order."""
    order = sorted(range(len(windows)), key=lambda i: windows[i])
    merged: list[tuple[int, int, list[int]]] = []
    for i in order:
        first, last = windows[i]
        if merged and first <= merged[-1][1] + 1:
            f, l, members = merged[-1]
            merged[-1] = (f, max(l, last), members + [i])
        else:
            merged.append((first, last, [i]))
    return merged


def pair_sign(target_sets: list[str], attribute_sets: list[str]) -> int:
    """Net push of one co-occurrence toward a positive association (see the module doc)."""
    return sum(PAIR_SIGN.get((t, a), 0) for t in target_sets for a in attribute_sets)


def find_passages(ws, counts, stream, doc_indices, word_sets: dict[str, list[str]], target_sets: list[str], *,
                  per_doc: int = 3, context_tokens: int = 8, direction: int | None = None,
                  doc_columns: dict[int, dict] | None = None) -> pd.DataFrame:
    """Merged passages of the given documents (in the order given), at most ``per_doc`` each.

    Parameters
    ----------
    ws : Workspace
    counts : Counts
        The counted slice (its vocabulary and window).
    stream : Stream
        The counted token stream of the slice.
    doc_indices : sequence of int
    word_sets : dict
        Set name -> words (in the vocabulary); the sets named in ``target_sets`` are the target
        side of a co-occurrence, the others the attribute side.
    per_doc : int
        Passages kept per document: those with the most co-occurrences (ties: text order).
    direction : +1, -1 or None
        The sign of the measured effect; with it, each passage counts its supporting and
        countering co-occurrences (see the module doc); None (a pair of words) counts neither.
    doc_columns : dict, optional
        Document index -> columns repeated beside each of its passages (its contribution).

    Returns
    -------
    pandas.DataFrame
        One row per passage, columns :data:`TEST_COLUMNS` (with ``direction``) or
        :data:`PAIR_COLUMNS` (without; ``pair_count`` from ``doc_columns``).
    """
    idx = counts.vocab.index
    sets_of: dict[str, list[str]] = {}
    for name, words in word_sets.items():
        for w in words:
            sets_of.setdefault(w, []).append(name)
    t_ids = {idx[w] for name in target_sets for w in word_sets[name]}
    a_ids = {idx[w] for name, words in word_sets.items() if name not in target_sets for w in words}
    texts = ws.texts(doc_indices)
    docs = ws.documents
    rows = []
    for d in map(int, doc_indices):
        lo, hi = np.searchsorted(stream.doc, [d, d + 1])
        ids, pos = stream.ids[lo:hi], stream.pos[lo:hi] - int(ws.doc_offsets[d])
        found = co_occurrences(ids, counts.settings.window, t_ids, a_ids)
        if not found:
            continue
        head = {"doc_id": docs.at[d, "doc_id"], "source": docs.at[d, "source"], "time": docs.at[d, "time"],
                **(doc_columns or {}).get(d, {})}
        spans = ws.tokenizer.spans(texts[d])
        n_tokens = len(spans) if spans is not None else int(docs.at[d, "n_tokens"])
        windows = [(max(0, int(min(pos[q], pos[q2])) - context_tokens),
                    min(n_tokens - 1, int(max(pos[q], pos[q2])) + context_tokens)) for q, q2 in found]
        merged = merge_windows(windows)
        keep = sorted(sorted(range(len(merged)), key=lambda k: -len(merged[k][2]))[:per_doc])
        for k in keep:
            first, last, members = merged[k]
            pairs = [found[i] for i in members]
            row = {"passage": k + 1, **head, "pairs": len(pairs), "note": ""}
            if direction is not None:
                row.update(_evidence([direction * pair_sign(sets_of[_word(counts, ids[q])],
                                                            sets_of[_word(counts, ids[q2])]) for q, q2 in pairs]))
            if spans is None:
                rows.append({**row, "passage_id": f"{head['doc_id']}#p{k + 1}", "start": None, "end": None,
                             "marks": Marks(), "text": None, "note": "character offsets unavailable for this text"})
                continue
            start, end = spans[first][0], spans[last][1]
            marked = sorted({q for pair in pairs for q in pair})
            marks = Marks({"start": spans[pos[q]][0], "end": spans[pos[q]][1], "word": _word(counts, ids[q]),
                           "set": "+".join(sets_of[_word(counts, ids[q])])} for q in marked)
            rows.append({**row, "passage_id": f"{head['doc_id']}#{start}", "start": start, "end": end,
                         "marks": marks, "text": texts[d][start:end]})
    return pd.DataFrame(rows, columns=TEST_COLUMNS if direction is not None else PAIR_COLUMNS)


def _evidence(signs: list[int]) -> dict:
    """Supporting and countering pairs of a passage (signs already times the measured direction)."""
    supporting, countering = sum(s > 0 for s in signs), sum(s < 0 for s in signs)
    return {"supporting": supporting, "countering": countering,
            "evidence": "supports" if supporting > countering else "counters" if countering > supporting
            else "balanced"}


def _word(counts, model_id) -> str:
    return counts.vocab.words[int(model_id)]


def pair_passages(ws, word: str, contexts: list[str], sl: Slice, counts: CountSettings = CountSettings(),
                  top: int = 10, per_doc: int = 3, context_tokens: int = 8) -> pd.DataFrame:
    """KWIC evidence for a pair: merged passages of the ``top`` documents where ``word`` co-occurs most
    with the context words (window counts, as counted; ``pair_count``), marks in sets ``word`` and
    ``context``, with character offsets into the stored text."""
    from tracer.analysis.document_counts import document_probe_rows, kept_stream
    from tracer.provenance.counts import count_slice

    word, contexts = ws.normalize_words([word])[0], ws.normalize_words(contexts)
    c = count_slice(ws, sl.weights, counts, slice_name=sl.name)
    missing = [w for w in [word] + contexts if w not in c.vocab.index]
    if missing:
        raise WordNotInVocabulary(f"not in the vocabulary of slice {sl.name} (min count {counts.min_count}): "
                                  + ", ".join(missing))
    stream = kept_stream(ws, sl.weights, c)
    probe = np.array([c.vocab.index[word]])
    rows = document_probe_rows(stream, sl.weights, counts.distance_weights(), probe, ws.n_documents, len(c.vocab))
    cols = [c.vocab.index[w] for w in contexts]
    per_doc_count = np.asarray(rows[:, cols].sum(axis=1)).ravel()
    order = np.argsort(-per_doc_count, kind="stable")
    order = order[per_doc_count[order] > 0][:top]
    return find_passages(ws, c, stream, order, {"word": [word], "context": list(contexts)}, ["word"],
                         per_doc=per_doc, context_tokens=context_tokens,
                         doc_columns={int(d): {"pair_count": float(per_doc_count[d])} for d in order})
