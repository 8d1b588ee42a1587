"""Rows of the co-occurrence matrix for a few probe words, without counting every pair.

A PMI value needs the probe's row ``C[w, :]``, the row sums ``r`` of the whole matrix
(the marginals) and ``Z = sum_j r_j^alpha``. Neither needs the other rows:

- ``r_j`` is the weight of the window around every occurrence of ``j``: for a token at
  position ``p`` of a document of ``n`` kept tokens, ``F(min(p, w)) + F(min(n-1-p, w))``
  where ``F(k)`` sums the distance weights 1..k, times the document's weight. That is
  one vectorised pass over the tokens.
- ``C[w, :]`` adds, for each occurrence of ``w`` and each distance ``d <= w`` with a
  neighbour inside the document, ``f(d)`` times the document weight to the neighbour's
  column: a pass over the probe's occurrences only.

The rules are the counter's (:mod:`tracer.core.counting`): words outside the vocabulary
are removed before windowing, windows stop at document ends, a word next to itself adds
to its own cell from both sides. With whole-number weights the cells equal the full
count's exactly; otherwise they agree to rounding.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from tracer.core.counting import (CountSettings, ModelVocab, build_vocab, cumulative_weights, kept_tokens,
                                  neighbour_weight)
from tracer.errors import WordNotInVocabulary

# documents are processed in groups of about this many tokens, so memory stays bounded
_CHUNK_TOKENS = 4_000_000


@dataclasses.dataclass(frozen=True)
class ProbeRows:
    """Probe rows and marginals of one weighted count.

    Attributes
    ----------
    vocab : ModelVocab
        The words of the count (rows and columns).
    words : list of str
        The probe words, in the order of ``rows``.
    rows : numpy.ndarray of float64, shape (n_probes, n_words)
        ``C[w, :]`` for each probe word.
    row_sums : numpy.ndarray of float64, shape (n_words,)
        Row sums of the whole (symmetric) matrix.
    """

    vocab: ModelVocab
    words: list[str]
    rows: np.ndarray
    row_sums: np.ndarray


def _chunks(doc_offsets: np.ndarray, docs: np.ndarray):
    """Runs of selected documents of about ``_CHUNK_TOKENS`` tokens each."""
    if len(docs) == 0:
        return
    ends = np.cumsum(doc_offsets[docs + 1] - doc_offsets[docs])
    cuts = np.searchsorted(ends, np.arange(_CHUNK_TOKENS, ends[-1], _CHUNK_TOKENS), side="right")
    yield from np.split(docs, np.unique(cuts[(cuts > 0) & (cuts < len(docs))]))


def probe_rows(ws, weights: np.ndarray, settings: CountSettings, words: list[str], *,
               vocab: ModelVocab | None = None) -> ProbeRows:
    """Rows of ``words`` and the row sums of the count of ``ws`` under document ``weights``.

    Parameters
    ----------
    ws : Workspace
    weights : numpy.ndarray, shape (n_documents,)
        Document weights, as for :func:`tracer.provenance.counts.count_slice`.
    settings : CountSettings
    words : list of str
        Probe words; each must be in the count's vocabulary.
    vocab : ModelVocab, optional
        The count's vocabulary; built from the documents of nonzero weight when not given.
    """
    weights = np.asarray(weights, dtype=np.float64)
    tokens, offsets = ws.tokens, ws.doc_offsets
    if vocab is None:
        vocab = build_vocab(tokens, offsets, weights, ws.vocab.words, settings)
    missing = [w for w in words if w not in vocab.index]
    if missing:
        raise WordNotInVocabulary(f"below min count {settings.min_count} in these documents: {', '.join(missing)}")
    n = len(vocab)
    probe_of = np.full(n, -1, dtype=np.int64)
    probe_of[[vocab.index[w] for w in words]] = np.arange(len(words))
    dist_w = settings.distance_weights()
    cum = cumulative_weights(dist_w)
    win = settings.window
    id_map = vocab.id_map(len(ws.vocab))
    row_sums = np.zeros(n)
    rows = np.zeros(len(words) * n)
    for docs in _chunks(offsets, np.flatnonzero(weights > 0)):
        kept = kept_tokens(tokens, offsets, docs, id_map)
        ids, owner, place = kept.ids, kept.owner, kept.place
        doc_w = weights[docs][owner]
        right = kept.lengths[owner] - 1 - place
        row_sums += np.bincount(ids, weights=doc_w * neighbour_weight(place, right, cum),
                                minlength=n)
        at = np.flatnonzero(probe_of[ids] >= 0)
        for d in range(1, win + 1):
            for nb, ok in ((at - d, place[at] >= d), (at + d, right[at] >= d)):
                src, nb = at[ok], nb[ok]
                rows += np.bincount(probe_of[ids[src]] * n + ids[nb], weights=dist_w[d - 1] * doc_w[src],
                                    minlength=len(rows))
    return ProbeRows(vocab, list(words), rows.reshape(len(words), n), row_sums)
