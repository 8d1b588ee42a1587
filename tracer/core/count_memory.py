"""The peak memory of a count, estimated before counting (formulas: :mod:`tracer.core.memory`).

The pairs of a count follow from the documents' lengths; its distinct cells do not. The
first estimate bounds the cells by the pairs (and by ``n(n+1)/2``), which costs nothing
but the document offsets; only when that bound does not fit in the memory available are
the kept tokens counted and the cells estimated from two nested samples of documents
(every ``2s``-th and every ``s``-th), a power law in the pairs fitted through them.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from tracer.core import memory
from tracer.core.count_engine import Shard, count_shard, make_shards, narrow_codes, split_by_tokens
from tracer.core.threads import ThreadPool

FIX = "raise --min-count, set --max-vocab or narrow --window (fewer words or pairs to hold)"
# pairs in the larger sample: enough for a stable slope, small next to what does not fit
_SAMPLE_PAIRS = (2_000_000, 20_000_000)


@dataclasses.dataclass(frozen=True)
class CountSize:
    """What a count will hold: ``pairs`` and estimated upper ``cells`` per shard, and in total."""

    tokens: int
    shard_pairs: list[int]
    shard_cells: list[int]
    cells: int
    narrow: bool
    per_pair: bool

    def peak(self, n_words: int, workers: int) -> int:
        return memory.counting_peak(self.tokens, self.shard_pairs, self.shard_cells, self.cells, n_words,
                                    narrow=self.narrow, per_pair=self.per_pair, workers=workers)


def _pairs(lengths: np.ndarray, window: int) -> int:
    """Window pairs of documents of these (kept) lengths: ``sum_k max(L - k, 0)``, k = 1..window."""
    lengths = np.asarray(lengths, dtype=np.int64)
    return int(sum(np.maximum(lengths - k, 0).sum() for k in range(1, window + 1)))


def _kept_lengths(tokens, doc_offsets, docs, id_map) -> np.ndarray:
    """In-vocabulary tokens of each of ``docs``, read in runs of documents of about 8M tokens."""
    out = []
    for run in split_by_tokens(doc_offsets, docs, 8_000_000):
        if len(run) == 0:
            continue
        lo, hi = int(doc_offsets[run[0]]), int(doc_offsets[run[-1] + 1])
        kept = np.r_[0, np.cumsum(id_map[np.asarray(tokens[lo:hi])] >= 0, dtype=np.int64)]
        out.append(kept[doc_offsets[run + 1] - lo] - kept[doc_offsets[run] - lo])
    return np.concatenate(out) if out else np.zeros(0, np.int64)


def _cells(tokens, doc_offsets, docs, id_map, n_words, settings, pool) -> int:
    rows = count_shard(tokens, doc_offsets, Shard(docs, 1.0), np.ones(len(doc_offsets) - 1), id_map, n_words,
                       settings, pool)
    return int((rows.row_end - rows.row_start).sum())


def cell_curve(tokens, doc_offsets, docs, lengths, id_map, n_words, settings, pool):
    """A function from pairs to estimated upper cells, fitted on two nested samples of ``docs``."""
    w, most = settings.window, n_words * (n_words + 1) // 2
    total = _pairs(lengths, w)
    target = min(total, max(_SAMPLE_PAIRS[0], min(total // 16, _SAMPLE_PAIRS[1])))
    step = max(1, int(round(total / max(target, 1))))
    if step == 1:  # the sample would be every document: its cells are the count's
        exact = _cells(tokens, doc_offsets, docs, id_map, n_words, settings, pool)
        return lambda p: min(exact, int(p))
    big, small = np.arange(0, len(docs), step), np.arange(0, len(docs), 2 * step)
    p_big, p_small = _pairs(lengths[big], w), _pairs(lengths[small], w)
    u_big = _cells(tokens, doc_offsets, docs[big], id_map, n_words, settings, pool)
    u_small = _cells(tokens, doc_offsets, docs[small], id_map, n_words, settings, pool)
    slope = 1.0
    if min(u_small, p_small) > 0 and p_big > p_small and u_big >= u_small:
        slope = float(np.clip(np.log(u_big / u_small) / np.log(p_big / p_small), 0.0, 1.0))
    scale = max(p_big, 1)
    return lambda p: int(min(p, most, u_big * (max(p, 1) / scale) ** slope))


def count_size(tokens, doc_offsets, doc_weights, id_map, n_words: int, settings, shard_tokens: int, *,
               pool: ThreadPool | None = None) -> CountSize:
    """The pairs and the estimated cells of a count (``pool`` given: the cells from samples;
    else the bound that needs no reading of the tokens)."""
    shards = make_shards(doc_offsets, doc_weights, shard_tokens)
    per_pair = any(s.weight is None for s in shards)
    narrow = narrow_codes(n_words, settings)
    raw = [int((doc_offsets[s.docs + 1] - doc_offsets[s.docs]).sum()) for s in shards]
    most = n_words * (n_words + 1) // 2
    if pool is None:
        pairs = [r * settings.window for r in raw]
        cells = [min(p, most) for p in pairs]
        return CountSize(sum(raw), pairs, cells, min(sum(pairs), most), narrow, per_pair)
    docs = np.sort(np.concatenate([s.docs for s in shards])) if shards else np.zeros(0, np.int64)
    lengths = _kept_lengths(tokens, doc_offsets, docs, id_map)
    at = np.searchsorted(docs, np.concatenate([s.docs for s in shards])) if shards else docs
    bounds = np.cumsum([0] + [len(s.docs) for s in shards])
    pairs = [_pairs(lengths[at[a:b]], settings.window) for a, b in zip(bounds[:-1], bounds[1:])]
    curve = cell_curve(tokens, doc_offsets, docs, lengths, id_map, n_words, settings, pool)
    return CountSize(sum(raw), pairs, [curve(p) for p in pairs], curve(sum(pairs)), narrow, per_pair)


def check_count_memory(tokens, doc_offsets, doc_weights, id_map, n_words: int, settings, shard_tokens: int,
                       pool: ThreadPool) -> None:
    """Raise :class:`tracer.errors.NotEnoughMemory` before counting when the count cannot fit."""
    free = memory.available_bytes()
    if count_size(tokens, doc_offsets, doc_weights, id_map, n_words, settings, shard_tokens).peak(
            n_words, pool.workers) <= free:
        return
    size = count_size(tokens, doc_offsets, doc_weights, id_map, n_words, settings, shard_tokens, pool=pool)
    memory.require(f"counting {size.tokens:,} tokens over {n_words:,} words", size.peak(n_words, pool.workers), FIX)
