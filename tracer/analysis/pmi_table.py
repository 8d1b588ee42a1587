"""Co-occurrence and PMI of probe words, slice by slice.

A PMI cell needs the probe word's row, the row sums and ``Z``, never the other rows, so a
slice is not counted: its counts are taken from the workspace's cache when ``tracer run``
stored them (loading is faster than any pass over the tokens), else the probe's row and the
row sums come from one pass over the slice's tokens (:mod:`tracer.provenance.probe_rows`),
equal to the full count's (exactly, for uniform weighting).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracer.core.counting import CountSettings
from tracer.core.pmi import DEFAULT_ALPHA, Marginals, check_alpha, log_z, pmi_of_cells, ppmi
from tracer.corpus.slices import Slice
from tracer.errors import WordNotInVocabulary
from tracer.provenance.counts import cached_counts, slice_vocab
from tracer.provenance.probe_rows import probe_rows

PMI_COLUMNS = ["slice", "word", "context", "count", "word_count", "context_count", "pmi", "ppmi", "note"]


def _slice_row(ws, sl: Slice, settings: CountSettings, word: str, alpha: float):
    """(vocabulary, the word's row or None when it is below the minimum count, marginals) of a slice."""
    c = cached_counts(ws, sl.weights, settings, slice_name=sl.name)
    if c is not None:
        i = c.vocab.index.get(word)
        return c.vocab, None if i is None else c.matrix[[i]].toarray()[0], Marginals.of(c.matrix, alpha)
    vocab = slice_vocab(ws, sl.weights, settings, sl.name)
    if word not in vocab.index:
        return vocab, None, None
    got = probe_rows(ws, sl.weights, settings, [word], vocab=vocab)
    # the counts are symmetric: the column sums are the row sums
    return vocab, got.rows[0], Marginals(got.row_sums, got.row_sums, alpha, log_z(got.row_sums, alpha))


def pmi_table(ws, word: str, contexts: list[str], slices: list[Slice], settings: CountSettings = CountSettings(),
              alpha: float = DEFAULT_ALPHA, shift: float = 1.0, progress: bool = False) -> pd.DataFrame:
    """Joint count, marginals, PMI and PPMI of ``word`` with each context word, per slice.

    Columns: slice, word, context, count (weighted window count), word_count and
    context_count (row sums of the co-occurrence matrix, the marginals that enter
    the PMI), pmi (natural log; NaN where the count is 0), ppmi, and note (why a
    row has no value: a word below the minimum count in that slice). ``progress`` is
    accepted for the callers' sake; no step here is long enough for a bar.
    """
    alpha = check_alpha(alpha)
    word, contexts = ws.normalize_words([word])[0], ws.normalize_words(contexts)
    missing = [w for w in dict.fromkeys([word] + list(contexts)) if w not in ws.vocab.index]
    if missing:
        raise WordNotInVocabulary(f"not in the corpus at all: {', '.join(missing)}")
    rows = []
    for sl in slices:
        vocab, row, marg = _slice_row(ws, sl, settings, word, alpha)
        idx = vocab.index
        for ctx in contexts:
            out = {"slice": sl.name, "word": word, "context": ctx}
            absent = [w for w in (word, ctx) if w not in idx]
            if absent:
                out.update(count=0.0, word_count=np.nan, context_count=np.nan, pmi=np.nan, ppmi=np.nan,
                           note=f"below min count {settings.min_count} in this slice: {', '.join(absent)}")
            else:
                i, j = idx[word], idx[ctx]
                n = float(row[j])
                p = pmi_of_cells(n, marg.rows[i], marg.cols[j], marg)
                out.update(count=n, word_count=float(marg.rows[i]), context_count=float(marg.cols[j]),
                           pmi=float(p) if np.isfinite(p) else np.nan, ppmi=float(ppmi(p, shift)), note="")
            rows.append(out)
    df = pd.DataFrame(rows, columns=PMI_COLUMNS)
    if df["word_count"].isna().all():
        raise WordNotInVocabulary(
            f"no slice has both {word!r} and its contexts at min count {settings.min_count}: "
            + "; ".join(f"{r.slice}: {r.note}" for r in df.itertuples() if r.note)[:500])
    return df
