"""Association statistics: WEAT-style effect sizes, permutation p-values, RIPA, PMI log odds ratios.

Conventions (stated in every output as well):

- ``s(w, A, B) = mean_a cos(w, a) - mean_b cos(w, b)``;
- test statistic ``S = sum_x s(x) - sum_y s(y)``;
- effect size ``d = (mean_x s - mean_y s) / std_w s(w)`` over all target words, with the
  **population** standard deviation (divide by n), so ``|d| <= 2`` for equal set sizes;
- p-value one-sided as published: the share of re-partitions of X u Y into sets of the
  sizes of X and Y whose statistic is at least the observed one; exact enumeration when
  the partitions fit the budget, otherwise Monte Carlo with the +1 correction.
"""

from __future__ import annotations

import dataclasses
import math
from itertools import combinations

import numpy as np

from tracer.core.embedding import Embedding

STD_CONVENTION = "population standard deviation (n) over all target words"
DEFAULT_MIN_WORDS = 3
DEFAULT_EXACT_BUDGET = 200_000
DEFAULT_PERMUTATIONS = 10_000
# as scipy.stats.permutation_test: null statistics within this relative distance of the
# observed one count as equal to it (they differ only by rounding)
_TIE_EPS = np.finfo(np.float64).eps * 100


@dataclasses.dataclass(frozen=True)
class AssociationTest:
    """Word sets of one test (all lower-case strings, in the order written)."""

    name: str
    targets_x: tuple[str, ...]
    targets_y: tuple[str, ...] | None
    attributes_a: tuple[str, ...]
    attributes_b: tuple[str, ...]
    attribute_pairs: tuple[tuple[str, str], ...]
    about: str = ""

    @property
    def two_target(self) -> bool:
        return self.targets_y is not None

    @property
    def all_words(self) -> list[str]:
        words = list(self.targets_x) + list(self.targets_y or ()) + list(self.attributes_a) + list(self.attributes_b)
        return list(dict.fromkeys(words))


@dataclasses.dataclass(frozen=True)
class WordSets:
    """The words of a test that a model or slice has, and those it lacks."""

    x: list[str]
    y: list[str]
    a: list[str]
    b: list[str]
    dropped: list[str]

    def reason_not_measured(self, two_target: bool, min_words: int) -> str | None:
        """Why the test cannot be measured: a target set under ``min_words``, an empty attribute set."""
        short = [f"{name} has {len(ws)}" for name, ws in (("targets_x", self.x), ("targets_y", self.y))
                 if (name != "targets_y" or two_target) and len(ws) < min_words]
        short += [f"{name} has none" for name, ws in (("attributes_a", self.a), ("attributes_b", self.b)) if not ws]
        if short:
            return (f"too few words in this vocabulary (target sets need {min_words}, attribute sets 1): "
                    + ", ".join(short))
        return None


def word_sets(test: AssociationTest, known) -> WordSets:
    """Split each set of ``test`` into the words in ``known`` and the dropped ones."""
    def keep(ws):
        return [w for w in (ws or ()) if w in known]
    dropped = [w for w in test.all_words if w not in known]
    return WordSets(keep(test.targets_x), keep(test.targets_y), keep(test.attributes_a), keep(test.attributes_b),
                    dropped)


def association_scores(unit: np.ndarray, targets: np.ndarray, a_rows: np.ndarray, b_rows: np.ndarray) -> np.ndarray:
    """s(w, A, B) = mean_a cos(w, a) - mean_b cos(w, b) for each target row, in float64.

    Parameters
    ----------
    unit : numpy.ndarray, shape (n_words, dim)
        Unit-length rows (:func:`unit_rows`), so a dot product is a cosine.
    targets, a_rows, b_rows : numpy.ndarray of int, shapes (n_t,), (n_a,), (n_b,)
        Rows of ``unit``.

    Returns
    -------
    numpy.ndarray of float64, shape (n_t,)
    """
    t = unit[targets].astype(np.float64)
    return (t @ unit[a_rows].T.astype(np.float64)).mean(axis=1) - (t @ unit[b_rows].T.astype(np.float64)).mean(axis=1)


def mean_gap(sx: np.ndarray, sy: np.ndarray) -> float:
    """The raw gap ``mean_x s - mean_y s``: the numerator of the effect size, undivided."""
    return float(sx.mean() - sy.mean())


def effect_size(sx: np.ndarray, sy: np.ndarray) -> float:
    """WEAT effect size ``d = (mean_x s - mean_y s) / std s`` with the population standard deviation
    over all target words (shapes (n_x,), (n_y,)); NaN if all scores are equal."""
    sd = np.concatenate([sx, sy]).std(ddof=0)
    return float(mean_gap(sx, sy) / sd) if sd > 0 else float("nan")


def score_gradient(scores: np.ndarray, n_x: int, quantity: str) -> np.ndarray:
    """d quantity / d s(w) for every target word: the derivative of :func:`mean_gap` or :func:`effect_size`.

    Parameters
    ----------
    scores : numpy.ndarray, shape (n_x + n_y,)
        s(w, A, B) of the x words, then of the y words (n_y may be 0: a one-target test,
        whose gap is ``mean_x s``).
    n_x : int
    quantity : {"gap", "effect_size"}
        With one target set only the gap has a derivative; "effect_size" then gives the gap's.

    Returns
    -------
    numpy.ndarray, shape (n_x + n_y,)
        For the gap ``1/n_x`` and ``-1/n_y``; for d, with n = n_x + n_y,
        ``coef / sd - gap (s - mean s) / (n sd^3)`` (quotient rule; d sd / d s = (s - mean s) / (n sd)).
    """
    n_y = len(scores) - n_x
    coef = np.concatenate([np.full(n_x, 1.0 / n_x), np.full(n_y, -1.0 / n_y if n_y else 0.0)])
    if quantity == "effect_size" and n_y:
        sd = scores.std()
        gap = mean_gap(scores[:n_x], scores[n_x:])
        coef = coef / sd - gap * (scores - scores.mean()) / (len(scores) * sd ** 3)
    return coef


@dataclasses.dataclass(frozen=True)
class PermutationResult:
    p_value: float
    method: str          # "exact" or "monte-carlo"
    n_partitions: int    # enumerated, or resampled


def permutation_p_value(sx: np.ndarray, sy: np.ndarray, *, exact_budget: int = DEFAULT_EXACT_BUDGET,
                        n_resamples: int = DEFAULT_PERMUTATIONS, rng: np.random.Generator | None = None,
                        batch: int = 4096) -> PermutationResult:
    """One-sided permutation p-value of S = sum(sx) - sum(sy).

    Exact over all ``C(n, |x|)`` re-partitions when they fit ``exact_budget``
    (the observed partition included), else ``n_resamples`` random
    re-partitions with the +1 correction, ``(k + 1) / (n_resamples + 1)``.
    Results do not depend on ``batch``.
    """
    sx = np.asarray(sx, dtype=np.float64)
    pooled = np.concatenate([sx, np.asarray(sy, dtype=np.float64)])
    n, nx = len(pooled), len(sx)
    total = pooled.sum()
    observed = 2 * sx.sum() - total          # = sum(x) - sum(y), from the x-part alone
    gamma = abs(_TIE_EPS * observed)
    n_parts = math.comb(n, nx)
    if n_parts <= exact_budget:
        count = 0
        it = combinations(range(n), nx)
        while True:
            chunk = np.fromiter((i for c in _take(it, batch) for i in c), dtype=np.int64)
            if len(chunk) == 0:
                break
            sums = pooled[chunk.reshape(-1, nx)].sum(axis=1)
            count += int(np.count_nonzero(2 * sums - total >= observed - gamma))
        return PermutationResult(count / n_parts, "exact", n_parts)
    rng = rng if rng is not None else np.random.default_rng()
    count, done = 0, 0
    while done < n_resamples:
        m = min(batch, n_resamples - done)
        # one uniform random partition per row: the first nx of a random permutation
        keys = rng.random((m, n))
        part = np.argpartition(keys, nx - 1, axis=1)[:, :nx] if nx < n else np.tile(np.arange(n), (m, 1))
        sums = pooled[part].sum(axis=1)
        count += int(np.count_nonzero(2 * sums - total >= observed - gamma))
        done += m
    return PermutationResult((count + 1) / (n_resamples + 1), "monte-carlo", n_resamples)


def _take(it, k):
    for _ in range(k):
        try:
            yield next(it)
        except StopIteration:
            return


@dataclasses.dataclass(frozen=True)
class WeatResult:
    """One two-target test on one embedding (or on PMI rows)."""

    effect_size: float
    statistic: float
    gap: float              # mean_x s - mean_y s, undivided
    p_value: float
    p_method: str
    n_partitions: int
    words: WordSets
    scores_x: np.ndarray
    scores_y: np.ndarray


def score_sd(result: WeatResult) -> float:
    """The denominator of d: the population sd of all target words' scores (d = gap / score_sd)."""
    return float(np.concatenate([result.scores_x, result.scores_y]).std(ddof=0))


def effect_size_gradient(gap: float, sd: float) -> tuple[float, float]:
    """The derivatives of d = gap / sd by gap and by sd, at (gap, sd): for the delta method (NaN
    when sd is 0 or not finite: d has no derivative there)."""
    if not (np.isfinite(sd) and sd > 0):
        return float("nan"), float("nan")
    return 1.0 / sd, -gap / sd ** 2


def weat(unit: np.ndarray, index: dict, test: AssociationTest, *, rng=None,
         exact_budget: int = DEFAULT_EXACT_BUDGET, n_resamples: int = DEFAULT_PERMUTATIONS,
         with_p: bool = True) -> WeatResult:
    """The WEAT statistics of a two-target test on unit vectors whose rows ``index`` names."""
    ws = word_sets(test, index)
    rows = {k: np.array([index[w] for w in getattr(ws, k)], dtype=np.int64) for k in ("x", "y", "a", "b")}
    sx = association_scores(unit, rows["x"], rows["a"], rows["b"])
    sy = association_scores(unit, rows["y"], rows["a"], rows["b"])
    perm = (permutation_p_value(sx, sy, exact_budget=exact_budget, n_resamples=n_resamples, rng=rng)
            if with_p else PermutationResult(float("nan"), "none", 0))
    return WeatResult(effect_size(sx, sy), float(sx.sum() - sy.sum()), mean_gap(sx, sy),
                      perm.p_value, perm.method, perm.n_partitions, ws, sx, sy)


def ripa_direction(emb: Embedding, pairs) -> np.ndarray | None:
    """Unit relation vector of the attribute pairs (first principal direction of their
    normalised differences, Ethayarajh, Duvenaud and Hirst 2019), or None if no pair is known."""
    diffs = []
    for a, b in pairs:
        if a in emb and b in emb:
            d = emb.vector(a).astype(np.float64) - emb.vector(b).astype(np.float64)
            n = np.linalg.norm(d)
            if n > 0:
                diffs.append(d / n)
    if not diffs:
        return None
    m = np.vstack(diffs)
    direction = np.linalg.svd(m, full_matrices=False)[2][0]
    if direction @ m.mean(axis=0) < 0:  # point from the b words towards the a words
        direction = -direction
    return direction


def unit_rows(vectors: np.ndarray) -> np.ndarray:
    """Rows scaled to unit length (zero rows left as they are), shape as ``vectors``."""
    norms = np.linalg.norm(vectors, axis=1, keepdims=True)
    return vectors / np.where(norms > 0, norms, 1.0)
