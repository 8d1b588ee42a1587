"""Counterfactual runs for curators: ablate (drop and re-measure); the drop masks and the filtered
corpus that :mod:`tracer.analysis.plan` (find what to drop) also uses."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from tracer.core.association import effect_size_gradient, score_sd, weat
from tracer.core.intervals import delta_interval
from tracer.core.counting import CountSettings
from tracer.corpus.slices import Slice, slice_from_spec
from tracer.files import write_atomic
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import train_embedding
from tracer.errors import InputError, SettingError
from tracer.analysis.measure import MeasureSettings, bootstrap_weights, measure
from tracer.core.association import AssociationTest

Z95 = 1.959964  # two-sided 95% point of the standard normal (scipy.stats.norm.ppf(0.975))


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
    ``documents_dropped``, ``tokens_dropped`` and, on the after rows, ``change`` of the effect
    size with ``change_ci_low``/``change_ci_high`` made as ``change_interval`` says: for
    PPMI-SVD a paired document bootstrap (each replicate resamples the slice, then drops the
    documents from that same resample, so what the two runs share cancels), the change -/+ t(n-1)
    delta-method standard errors from the replicates' gaps and score sds; for word2vec the seed
    spread of both runs.
    """
    after = reduced_slice(sl, ws, mask, what)
    res = measure(ws, tests, model, [sl, after], counts, model_settings, settings).summary
    res.insert(0, "run", np.where(res["slice"] == sl.name, "before", "after"))
    dropped = mask & (sl.weights > 0)
    res["documents_dropped"] = np.where(res["run"] == "after", int(dropped.sum()), 0)
    res["tokens_dropped"] = np.where(res["run"] == "after", int(ws.documents["n_tokens"].to_numpy()[dropped].sum()), 0)
    before = res[res["run"] == "before"].set_index("test")["effect_size"]
    res["change"] = [r.effect_size - before[r.test] if r.run == "after" else np.nan for r in res.itertuples()]
    ci, method = _change_intervals(ws, tests, model, sl, after, res, counts, model_settings, settings)
    res["change_ci_low"] = [ci[r.test][0] if r.run == "after" and r.test in ci else np.nan for r in res.itertuples()]
    res["change_ci_high"] = [ci[r.test][1] if r.run == "after" and r.test in ci else np.nan for r in res.itertuples()]
    res["change_interval"] = np.where(res["run"] == "after", method, "")
    return res


def _change_intervals(ws, tests, model, sl, after, res, counts, model_settings, settings) -> tuple[dict, str]:
    """The 95% interval of the change of d per test, and how it was made.

    PPMI-SVD: a paired document bootstrap; the change d_after - d_before is a function of the two
    runs' gaps and score sds, so its standard error is the delta method's on the replicates of those
    four (derivatives at the two full-data models, as ``measure`` does for d), t(n-1), centred on the
    change. word2vec: the seed spread of both runs' means, normal quantile.
    """
    two = [t for t in tests.values() if t.two_target]
    rows = res.set_index(["run", "test"])
    if model != "ppmi-svd":
        if settings.seeds < 2:
            return {}, "none (word2vec: give --seeds 2 or more for a seed-spread interval)"
        spread = rows["effect_size_seed_sd"]
        out = {}
        for t in two:
            sd = float(np.sqrt((spread[("before", t.name)] ** 2 + spread[("after", t.name)] ** 2) / settings.seeds))
            change = float(rows.loc[("after", t.name), "change"])
            out[t.name] = (change - Z95 * sd, change + Z95 * sd)
        return out, f"change -/+ 1.96 x the seed spread of both runs' means ({settings.seeds} seeds)"
    if settings.bootstrap < 2:
        return {}, "none (give --bootstrap 2 or more for a paired bootstrap interval)"
    model_settings = model_settings or PpmiSvdSettings()
    full_b = train_embedding(ws, sl, "ppmi-svd", counts, model_settings, save=False)
    full_a = train_embedding(ws, after, "ppmi-svd", counts, model_settings, save=False)
    rng = np.random.default_rng([settings.seed, 23])
    reps = {t.name: [] for t in two}
    for _ in range(settings.bootstrap):
        w = bootstrap_weights(sl, rng)
        e_b = train_embedding(ws, sl, "ppmi-svd", counts, model_settings, weights=w, save=False)
        e_a = train_embedding(ws, after, "ppmi-svd", counts, model_settings, weights=w * (after.weights > 0),
                              save=False)
        for t in two:
            reps[t.name].append(gap_and_score_sd(e_a, t) + gap_and_score_sd(e_b, t))
    out = {}
    for t in two:
        (ga, sa), (gb, sb) = gap_and_score_sd(full_a, t), gap_and_score_sd(full_b, t)
        gradient = [*effect_size_gradient(ga, sa), *(-x for x in effect_size_gradient(gb, sb))]
        i = delta_interval(float(rows.loc[("after", t.name), "change"]), gradient, reps[t.name])
        out[t.name] = (i.low, i.high)
    return out, (f"change -/+ t(n-1) x the delta method's standard error (both runs' gaps and score sds) over "
                 f"{settings.bootstrap} paired document-bootstrap replicates")


def gap_and_score_sd(emb, test) -> tuple[float, float]:
    """The gap and the score sd of a test on one model (d = gap / sd)."""
    r = weat(emb.unit_vectors, emb.index, test, with_p=False)
    return r.gap, score_sd(r)


def write_filtered_corpus(ws, keep: np.ndarray, path: str | Path) -> int:
    """Write the kept documents as JSONL with their original fields; returns how many were written."""
    text_field = {i["path"]: i.get("fields", {}).get("text", "text") for i in ws.manifest["inputs"]}
    lines = []
    for record, text, src_file in ws.stored_records(np.flatnonzero(keep)):
        record[text_field.get(src_file, "text")] = text
        lines.append(json.dumps(record, ensure_ascii=False) + "\n")
    write_atomic(Path(path), "".join(lines))
    return len(lines)
