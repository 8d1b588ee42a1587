"""Counterfactual runs for curators: ablate (drop and re-measure) and plan (find what to drop)."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pandas as pd

from tracer.core.association import weat
from tracer.analysis.influence import Attribution
from tracer.core.counting import CountSettings
from tracer.provenance.counts import count_slice
from tracer.corpus.slices import Slice, slice_from_spec
from tracer.files import write_atomic
from tracer.analysis.similarity import bundled_wordsim353, evaluate_similarity, read_pairs
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import embedding_from_counts, train_embedding
from tracer.errors import InputError, SettingError
from tracer.analysis.measure import MeasureSettings, measure
from tracer.core.association import AssociationTest
from tracer.provenance.specs import normalized_test


def drop_mask(ws, drops: list[str] = (), doc_ids: list[str] = ()) -> tuple[np.ndarray, str]:
    """Documents to drop: slices written as for --slice (source=NAME, time=A..B) and document ids."""
    if not drops and not doc_ids:
        raise SettingError("nothing to drop: give --drop source=NAME / time=A..B or --drop-docs FILE")
    mask = np.zeros(ws.n_documents, bool)
    parts = []
    for spec in drops:
        if spec.strip() == "all":
            raise SettingError("--drop all would leave nothing to measure")
        mask |= slice_from_spec(ws, spec).weights > 0
        parts.append(spec)
    if doc_ids:
        index = dict(zip(ws.documents["doc_id"], ws.documents["doc_index"]))
        missing = [d for d in doc_ids if d not in index]
        if missing:
            raise InputError(f"{len(missing)} document ids are not in the workspace, e.g. {', '.join(missing[:5])}")
        mask[[index[d] for d in doc_ids]] = True
        parts.append(f"{len(doc_ids)} listed documents")
    return mask, " and ".join(parts)


def reduced_slice(sl: Slice, ws, mask: np.ndarray, what: str) -> Slice:
    w = sl.weights * ~mask
    if not (w > 0).any():
        raise SettingError(f"dropping {what} leaves slice {sl.name} without documents")
    return Slice(f"{sl.name} without {what}", w, int((w > 0).sum()),
                 int(ws.documents["n_tokens"].to_numpy()[w > 0].sum()))


def ablate(ws, tests: dict[str, AssociationTest], model: str, sl: Slice, mask: np.ndarray, what: str,
           counts: CountSettings = CountSettings(), model_settings=None,
           settings: MeasureSettings = MeasureSettings()) -> pd.DataFrame:
    """Measure the tests before and after dropping the documents (each retrained, with intervals).

    Returns the measure summary rows of both runs with a ``run`` column (before / after),
    ``documents_dropped``, ``tokens_dropped`` and, on the after rows, ``change`` of the effect size.
    """
    after = reduced_slice(sl, ws, mask, what)
    res = measure(ws, tests, model, [sl, after], counts, model_settings, settings).summary
    res.insert(0, "run", np.where(res["slice"] == sl.name, "before", "after"))
    dropped = mask & (sl.weights > 0)
    res["documents_dropped"] = np.where(res["run"] == "after", int(dropped.sum()), 0)
    res["tokens_dropped"] = np.where(res["run"] == "after", int(ws.documents["n_tokens"].to_numpy()[dropped].sum()), 0)
    before = res[res["run"] == "before"].set_index("test")["effect_size"]
    res["change"] = [r.effect_size - before[r.test] if r.run == "after" else np.nan for r in res.itertuples()]
    return res


@dataclasses.dataclass(frozen=True)
class Plan:
    unit: str
    removed: list[str]                 # document ids or source names
    doc_indices: np.ndarray
    tokens_removed: int
    token_share: float
    effect_before: float
    predicted_effect: float
    verified_effect: float
    steps: pd.DataFrame                # step, removed, predicted_effect, predicted_gap
    usefulness: pd.DataFrame           # measure, before, after


def plan(ws, test: AssociationTest, sl: Slice, goal: float, *, unit: str = "document", max_steps: int = 500,
         counts: CountSettings = CountSettings(), settings: PpmiSvdSettings = PpmiSvdSettings()) -> Plan:
    """Greedy: drop documents (or sources) by estimated contribution, re-checking the exact
    (fixed-subspace) effect size after every step, until |d| <= goal; then verify by retraining."""
    if unit not in ("document", "source"):
        raise SettingError(f"unit must be document or source; got {unit!r}")
    if goal < 0:
        raise SettingError(f"goal must be >= 0 (a bound on |d|); got {goal}")
    test = normalized_test(test, ws)
    c = count_slice(ws, sl.weights, counts, slice_name=sl.name)
    emb = embedding_from_counts(ws, sl, c, settings)
    attr = Attribution(ws, sl.weights, c, emb, test, alpha=settings.alpha, shift=settings.shift,
                       eig_power=settings.eig_power)
    base = attr.base.effect_size
    docs = ws.documents
    in_slice = sl.weights > 0
    lin = attr.linear("effect_size")
    sign = np.sign(base) if base != 0 else 1.0
    if unit == "document":
        members = np.flatnonzero(in_slice)
        groups = [np.array([d]) for d in members[np.argsort(sign * lin[members], kind="stable")]]
        names = [docs.at[int(g[0]), "doc_id"] for g in groups]
    else:
        src = docs["source"].to_numpy()
        names = sorted(set(src[in_slice]))
        groups = [np.flatnonzero((src == s) & in_slice) for s in names]
        est = [sign * (attr.exact(g).effect_size - base) for g in groups]
        order = np.argsort(est, kind="stable")
        groups, names = [groups[i] for i in order], [names[i] for i in order]
    chosen, chosen_names, steps = [], [], []
    current = attr.base
    for step, (g, name) in enumerate(zip(groups, names), start=1):
        if abs(current.effect_size) <= goal or step > max_steps:
            break
        trial = attr.exact(np.concatenate(chosen + [g]))
        # keep a step only if the exact re-check confirms it helps
        if abs(trial.effect_size) < abs(current.effect_size):
            chosen.append(g)
            chosen_names.append(name)
            current = trial
            steps.append({"step": len(chosen), "removed": name, "predicted_effect": trial.effect_size,
                          "predicted_gap": trial.gap})
    if abs(current.effect_size) > goal:
        raise SettingError(f"the goal |d| <= {goal} was not reached: the best reachable value was "
                           f"{current.effect_size:.3f} after removing {len(chosen)} {unit}s"
                           + (f" (raise --max-steps, now {max_steps}, or use --unit source)" if unit == "document"
                              else ""))
    if not chosen:
        raise SettingError(f"|d| is already {base:.3f}, within the goal {goal}: nothing to remove")
    removed = np.concatenate(chosen)
    mask = np.zeros(ws.n_documents, bool)
    mask[removed] = True
    after = reduced_slice(sl, ws, mask, f"{len(chosen)} {unit}s of the plan")
    emb_before = emb  # the slice's model, made above from the same counts and settings
    emb_after = train_embedding(ws, after, "ppmi-svd", counts, settings, save=False)
    verified = weat(emb_after.unit_vectors, emb_after.index, test, with_p=False).effect_size
    pairs = read_pairs(bundled_wordsim353())
    ws_before, ws_after = evaluate_similarity(emb_before, pairs), evaluate_similarity(emb_after, pairs)
    kept = len(set(emb_before.words) & set(emb_after.words))
    usefulness = pd.DataFrame([
        {"measure": "WordSim-353 Spearman rho", "before": ws_before.spearman_rho, "after": ws_after.spearman_rho},
        {"measure": "WordSim-353 pairs covered", "before": ws_before.pairs_used, "after": ws_after.pairs_used},
        {"measure": "vocabulary (words at min count)", "before": len(emb_before.words), "after": len(emb_after.words)},
        {"measure": "share of the vocabulary kept", "before": 1.0, "after": kept / len(emb_before.words)},
    ])
    tokens = int(docs["n_tokens"].to_numpy()[removed].sum())
    return Plan(unit, chosen_names, removed, tokens, tokens / max(1, sl.n_tokens), base, current.effect_size,
                verified, pd.DataFrame(steps), usefulness)


def write_filtered_corpus(ws, keep: np.ndarray, path: str | Path) -> int:
    """Write the kept documents as JSONL with their original fields; returns how many were written."""
    text_field = {i["path"]: i.get("fields", {}).get("text", "text") for i in ws.manifest["inputs"]}
    lines = []
    for record, text, src_file in ws.stored_records(np.flatnonzero(keep)):
        record[text_field.get(src_file, "text")] = text
        lines.append(json.dumps(record, ensure_ascii=False) + "\n")
    write_atomic(Path(path), "".join(lines))
    return len(lines)
