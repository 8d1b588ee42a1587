"""Verification of a trace: retrain without the top sources and document sets, set the predicted
changes beside the retrained ones, and say whether the ranking holds (``CONFIRM``)."""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
import pandas as pd
from scipy import stats
from tqdm.auto import tqdm

from tracer.core.association import weat
from tracer.corpus.slices import Slice
from tracer.errors import SettingError
from tracer.core.embedding import Embedding
from tracer.provenance.counts import count_slice, slice_vocab
from tracer.provenance.models import start_embeddings_from_counts, start_word2vec

# Thresholds of a confirmed verification. Pearson r alone can be carried by one large removal
# (the owning source) while the rest are in the wrong order, so the verdict rests on the rank
# correlation and the sign agreement, over enough retrains for a rank correlation to mean
# something. Under random order rho >= 0.6 is reached by 21 of the 120 orderings of 5 points
# (17%) and by 5.7% of those of 8 (the default 5 sources + 3 sets; counted over all
# permutations), hence the sign agreement as well.
CONFIRM = {"spearman_rho": 0.6, "sign_agreement": 0.8, "retrains": 5}
NOT_CONFIRMED = "estimates not confirmed"


def _support(change: np.ndarray | float, base: float) -> np.ndarray:
    """How much a removal would weaken the association: the change towards zero, positive = supports."""
    return -np.sign(base if base != 0 else 1.0) * np.asarray(change)


@dataclasses.dataclass(frozen=True)
class Verification:
    """Predicted beside retrained changes. ``pearson_r_without_largest`` leaves out the row of the
    largest change (largest of |predicted| and |actual|, named in ``largest``); ``confirmed`` applies
    ``CONFIRM`` and ``reason`` says which threshold failed."""

    rows: pd.DataFrame
    pearson_r: float
    spearman_rho: float
    sign_agreement: float
    quantity: str
    pearson_r_without_largest: float = float("nan")
    largest: str = ""
    confirmed: bool = False
    reason: str = ""

    def agreement(self) -> str:
        return (f"Spearman rho {self.spearman_rho:.2f}, sign agreement {self.sign_agreement:.2f}, Pearson r "
                f"{self.pearson_r:.2f} ({self.pearson_r_without_largest:.2f} without {self.largest}) over "
                f"{len(self.rows)} retrains")

    def headline(self) -> str:
        """One line: the verdict first, then the figures it rests on."""
        if self.confirmed:
            return f"estimates confirmed by retraining ({self.quantity}): {self.agreement()}"
        return f"{NOT_CONFIRMED} ({self.reason}): {self.agreement()}; read the rankings as unverified"


def agreement_of(table: pd.DataFrame, quantity: str) -> Verification:
    """The agreement figures and the verdict of a verification table (columns predicted, actual)."""
    p, a = table["predicted"].to_numpy(float), table["actual"].to_numpy(float)
    ok = np.isfinite(p) & np.isfinite(a)
    p, a, names = p[ok], a[ok], table["removed"].to_numpy()[ok]
    n = len(p)
    pr = float(stats.pearsonr(p, a).statistic) if n >= 3 else float("nan")
    sr = float(stats.spearmanr(p, a).statistic) if n >= 3 else float("nan")
    sign = float(np.mean(np.sign(p) == np.sign(a))) if n else float("nan")
    big = int(np.argmax(np.maximum(np.abs(p), np.abs(a)))) if n else -1
    rest = np.arange(n) != big
    pr_rest = float(stats.pearsonr(p[rest], a[rest]).statistic) if n >= 4 else float("nan")
    failed = []
    if n < CONFIRM["retrains"]:
        failed.append(f"{n} retrains, fewer than {CONFIRM['retrains']}")
    if not sr >= CONFIRM["spearman_rho"]:
        failed.append(f"Spearman rho below {CONFIRM['spearman_rho']}")
    if not sign >= CONFIRM["sign_agreement"]:
        failed.append(f"sign agreement below {CONFIRM['sign_agreement']}")
    return Verification(table, pr, sr, sign, quantity, pr_rest, str(names[big]) if n else "", not failed,
                        "; ".join(failed))


def _measure_without(ws, test, model, sl, counts, model_settings, removed_mask, seeds: int) -> tuple[float, float, float]:
    """Retrain without the removed documents; (effect size, gap, seed spread of the gap)."""
    return _retrained(ws, test, model, sl, counts, model_settings, [removed_mask], seeds)[0]


def _reduced(sl: Slice, removed_mask: np.ndarray) -> Slice:
    w = sl.weights * ~removed_mask
    if not (w > 0).any():
        raise SettingError(f"removing these documents leaves slice {sl.name} empty")
    return Slice(f"{sl.name} (reduced)", w, int((w > 0).sum()), 0)


def _retrained(ws, test, model, sl, counts, model_settings, masks: list, seeds: int,
               progress: bool = False) -> list[tuple[float, float, float]]:
    """Retrain without the documents of each mask, the trainings as independent tasks (on the
    workspace's cluster or the local replicate pool, :func:`tracer.provenance.cluster.tasks_for`):
    the models :func:`train_embedding` trains, bit for bit. Each mask's counts (PPMI-SVD) are made
    here as the tasks are handed over; a word2vec retrain runs ``seeds`` seeds. Returns (effect
    size, gap, seed spread of the gap) per mask, in order."""
    subs = [_reduced(sl, m) for m in masks]
    bar = functools.partial(tqdm, desc="verify", disable=not progress, leave=False)  # over the tasks handed over
    if model == "ppmi-svd":
        made = ((sub, count_slice(ws, sub.weights, counts, slice_name=sub.name,
                                  vocab=slice_vocab(ws, sub.weights, counts, sub.name))) for sub in bar(subs))
        results = [weat(e.unit_vectors, e.index, test, with_p=False)
                   for e in start_embeddings_from_counts(ws, made, model_settings, len(subs))()]
        return [(r.effect_size, r.gap, 0.0) for r in results]
    vocabs = [slice_vocab(ws, sub.weights, counts, sub.name) for sub in subs]
    runs = [dataclasses.replace(model_settings, seed=model_settings.seed + k) for k in range(seeds)]
    vectors = start_word2vec(ws, [(sub.weights, v, s) for sub, v in zip(subs, vocabs) for s in runs], counts, bar)()
    out = []
    for i, v in enumerate(vocabs):
        embs = [Embedding(list(v.words), vec, {}) for vec in vectors[i * seeds:(i + 1) * seeds]]
        rs = [weat(e.unit_vectors, e.index, test, with_p=False) for e in embs]
        gaps = [r.gap for r in rs]
        out.append((float(np.mean([r.effect_size for r in rs])), float(np.mean(gaps)),
                    float(np.std(gaps, ddof=1)) if seeds > 1 else 0.0))
    return out


def verify(ws, test, model, sl, counts, model_settings, attr, sources, order, lin,
           settings: TraceSettings, progress: bool = False, full: tuple | None = None) -> Verification:
    """Retrain without each top source, the top documents as a set, the documents that most weaken the
    association as a set, and random documents (a control, after Brunet et al. 2019); predicted beside
    real. ``full``: the model's own (effect size, gap, spread) on the whole slice, if already measured."""
    k = settings.verify
    docs = ws.documents
    src = docs["source"].to_numpy()
    in_slice = sl.weights > 0
    rng = np.random.default_rng(settings.seed)
    q = settings.rank_by
    base_pred = getattr(attr.base, q)
    items = []
    for s in sources["source"].head(k):
        items.append((f"source={s}", (src == s) & in_slice))
    top = order[:k]
    items.append((f"top {len(top)} documents", np.isin(np.arange(len(src)), top)))
    members = np.flatnonzero(in_slice)
    # the documents whose removal would strengthen the association most (linear estimate)
    opposing = members[np.argsort(_support(lin[members], base_pred), kind="stable")[:k]]
    items.append((f"{len(opposing)} documents that most weaken the effect", np.isin(np.arange(len(src)), opposing)))
    randoms = rng.choice(np.flatnonzero(in_slice), size=min(k, int(in_slice.sum())), replace=False)
    items.append((f"{len(randoms)} random documents", np.isin(np.arange(len(src)), randoms)))

    # every retrain at once, as independent tasks; the whole slice's model first when not given
    masks = ([] if full is not None else [np.zeros(len(src), bool)]) + [mask for _, mask in items]
    retrained = _retrained(ws, test, model, sl, counts, model_settings, masks, settings.seeds, progress)
    full_d, full_gap, _ = full if full is not None else retrained.pop(0)
    rows = []
    for (name, mask), (d, gap, sd) in zip(items, retrained):
        removed = np.flatnonzero(mask)
        ex = attr.exact(removed)
        rows.append({"removed": name, "documents": len(removed),
                     "predicted": (ex.gap - attr.base.gap) if q == "gap" else (ex.effect_size - attr.base.effect_size),
                     "predicted_linear": float(lin[removed].sum()),
                     "actual": (gap - full_gap) if q == "gap" else (d - full_d),
                     "predicted_effect_size": ex.effect_size - attr.base.effect_size,
                     "actual_effect_size": d - full_d,
                     "predicted_gap": ex.gap - attr.base.gap, "actual_gap": gap - full_gap,
                     "seed_spread": sd if model == "word2vec" else None})
    return agreement_of(pd.DataFrame(rows), q)
