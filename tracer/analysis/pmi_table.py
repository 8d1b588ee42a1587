"""Co-occurrence and PMI of probe words, slice by slice."""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracer.core.counting import CountSettings
from tracer.provenance.counts import count_slice
from tracer.corpus.slices import Slice
from tracer.errors import WordNotInVocabulary
from tracer.core.pmi import DEFAULT_ALPHA, Marginals, pmi_of_cells, ppmi

PMI_COLUMNS = ["slice", "word", "context", "count", "word_count", "context_count", "pmi", "ppmi", "note"]


def pmi_table(ws, word: str, contexts: list[str], slices: list[Slice], settings: CountSettings = CountSettings(),
              alpha: float = DEFAULT_ALPHA, shift: float = 1.0, progress: bool = False) -> pd.DataFrame:
    """Joint count, marginals, PMI and PPMI of ``word`` with each context word, per slice.

    Columns: slice, word, context, count (weighted window count), word_count and
    context_count (row sums of the co-occurrence matrix, the marginals that enter
    the PMI), pmi (natural log; NaN where the count is 0), ppmi, and note (why a
    row has no value: a word below the minimum count in that slice).
    """
    word, contexts = ws.normalize_words([word])[0], ws.normalize_words(contexts)
    missing = [w for w in dict.fromkeys([word] + list(contexts)) if w not in ws.vocab.index]
    if missing:
        raise WordNotInVocabulary(f"not in the corpus at all: {', '.join(missing)}")
    rows = []
    for sl in slices:
        c = count_slice(ws, sl.weights, settings, slice_name=sl.name, progress=progress)
        marg = Marginals.of(c.matrix, alpha)
        idx = c.vocab.index
        for ctx in contexts:
            row = {"slice": sl.name, "word": word, "context": ctx}
            absent = [w for w in (word, ctx) if w not in idx]
            if absent:
                row.update(count=0.0, word_count=np.nan, context_count=np.nan, pmi=np.nan, ppmi=np.nan,
                           note=f"below min count {settings.min_count} in this slice: {', '.join(absent)}")
            else:
                i, j = idx[word], idx[ctx]
                n = float(c.matrix[i, j])
                p = pmi_of_cells(n, marg.rows[i], marg.cols[j], marg)
                row.update(count=n, word_count=float(marg.rows[i]), context_count=float(marg.cols[j]),
                           pmi=float(p) if np.isfinite(p) else np.nan, ppmi=float(ppmi(p, shift)), note="")
            rows.append(row)
    df = pd.DataFrame(rows, columns=PMI_COLUMNS)
    if df["word_count"].isna().all():
        raise WordNotInVocabulary(
            f"no slice has both {word!r} and its contexts at min count {settings.min_count}: "
            + "; ".join(f"{r.slice}: {r.note}" for r in df.itertuples() if r.note)[:500])
    return df
