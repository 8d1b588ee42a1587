"""What a removal costs: the test's words it takes away, the frequent words that fall most, and how
much of the model's neighbourhood structure survives."""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracer.analysis.similarity import bundled_wordsim353, evaluate_similarity, read_pairs
from tracer.core.association import AssociationTest
from tracer.core.embedding import Embedding
from tracer.corpus.slices import Slice
from tracer.provenance.models import train_embedding

FREQUENT = 1000        # words whose neighbourhoods are compared
NEIGHBOURS = 10        # nearest neighbours per word
WORDSIM_MIN_PAIRS = 100  # below this many covered pairs a WordSim-353 rho says little


def _word_counts(ws, mask: np.ndarray) -> np.ndarray:
    """Occurrences of every workspace word in the documents of ``mask``, shape (n_words,)."""
    lengths = np.diff(ws.doc_offsets)
    keep = np.repeat(mask, lengths)
    return np.bincount(np.asarray(ws.tokens)[keep], minlength=len(ws.vocab))


def neighbour_overlap(before: Embedding, after: Embedding, words: list[str], n: int = NEIGHBOURS) -> float:
    """Mean share of each word's ``n`` nearest neighbours (cosine, among the words both models know)
    that stay its neighbours after; 1.0 when nothing moves."""
    shared = [w for w in before.words if w in after.index]
    probe = [w for w in words if w in after.index and w in before.index]
    if len(shared) <= n or not probe:
        return float("nan")
    kept = []
    tops = []
    for emb in (before, after):
        u = emb.unit_vectors[[emb.index[w] for w in shared]]
        sims = u[[shared.index(w) for w in probe]] @ u.T
        sims[np.arange(len(probe)), [shared.index(w) for w in probe]] = -np.inf
        tops.append(np.argpartition(-sims, n, axis=1)[:, :n])
    for a, b in zip(*tops):
        kept.append(len(set(a.tolist()) & set(b.tolist())) / n)
    return float(np.mean(kept))


def loss_tables(ws, sl: Slice, test: AssociationTest, mask: np.ndarray, emb_before: Embedding,
                emb_after: Embedding, counts, settings, seed: int) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """(losses of the test's words, the frequent words that fall most, usefulness before/after)."""
    in_slice = sl.weights > 0
    removed = mask & in_slice
    total, gone = _word_counts(ws, in_slice), _word_counts(ws, removed)
    n_tok = ws.documents["n_tokens"].to_numpy()
    token_share = float(n_tok[removed].sum() / max(1, n_tok[in_slice].sum()))
    index, words = ws.vocab.index, ws.vocab.words
    sets = (("targets_x", test.targets_x), ("targets_y", test.targets_y), ("attributes_a", test.attributes_a),
            ("attributes_b", test.attributes_b))
    losses = pd.DataFrame([{"word": w, "set": name, "occurrences": int(total[index[w]]) if w in index else 0,
                            "removed": int(gone[index[w]]) if w in index else 0}
                           for name, ws_ in sets for w in (ws_ or ())])
    if len(losses):
        losses["share_removed"] = losses["removed"] / losses["occurrences"].where(losses["occurrences"] > 0)
    frequent = np.argsort(-total, kind="stable")[:FREQUENT]
    frequent = frequent[total[frequent] > 0]
    own = {index[w] for w in test.all_words if w in index}   # the test's words are in ``losses``
    others = np.array([i for i in frequent if i not in own], dtype=np.int64)
    share = gone[others] / total[others]
    top = others[np.argsort(-share, kind="stable")[:10]]
    falling = pd.DataFrame({"word": [words[i] for i in top], "frequency_rank": [int(np.flatnonzero(frequent == i)[0]) + 1
                                                                              for i in top],
                            "count_before": total[top], "count_after": total[top] - gone[top],
                            "share_removed": gone[top] / total[top]})
    falling["times_the_token_share"] = falling["share_removed"] / token_share if token_share > 0 else np.nan
    usefulness = _usefulness(ws, sl, mask, emb_before, emb_after, [words[i] for i in frequent], counts, settings,
                             seed, int(n_tok[removed].sum()))
    return losses, falling, usefulness


def _usefulness(ws, sl, mask, emb_before, emb_after, frequent, counts, settings, seed, tokens) -> pd.DataFrame:
    """Neighbour overlap of the frequent words, beside the same after a random removal of as many
    tokens (what any removal of that size costs); WordSim-353 only with enough covered pairs."""
    rows = [{"measure": f"{NEIGHBOURS}-neighbour overlap of the {len(frequent)} most frequent words", "before": 1.0,
             "after": neighbour_overlap(emb_before, emb_after, frequent)}]
    members = np.flatnonzero(sl.weights > 0)
    if tokens > 0:
        order = np.random.default_rng([seed, 11]).permutation(members)
        take = order[: int(np.searchsorted(np.cumsum(ws.documents["n_tokens"].to_numpy()[order]), tokens)) + 1]
        w = sl.weights.copy()
        w[take] = 0.0
        rand = train_embedding(ws, sl, "ppmi-svd", counts, settings, weights=w, save=False)
        rows.append({"measure": f"the same after removing {len(take)} random documents ({tokens} tokens or more)",
                     "before": 1.0, "after": neighbour_overlap(emb_before, rand, frequent)})
    pairs = read_pairs(bundled_wordsim353())
    b, a = (evaluate_similarity(e, pairs, ws.tokenizer_settings) for e in (emb_before, emb_after))
    if min(b.pairs_used, a.pairs_used) >= WORDSIM_MIN_PAIRS:
        rows.append({"measure": "WordSim-353 Spearman rho", "before": b.spearman_rho, "after": a.spearman_rho})
    rows.append({"measure": f"WordSim-353 pairs covered (rho shown only from {WORDSIM_MIN_PAIRS})",
                 "before": b.pairs_used, "after": a.pairs_used})
    kept = len(set(emb_before.words) & set(emb_after.words))
    rows += [{"measure": "vocabulary (words at min count)", "before": len(emb_before.words),
              "after": len(emb_after.words)},
             {"measure": "share of the vocabulary kept", "before": 1.0, "after": kept / len(emb_before.words)}]
    return pd.DataFrame(rows)
