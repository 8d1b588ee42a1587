"""What a command does between its options and the library, shared by the command line and the
Python API (:mod:`tracer.app.api`), so both give the same results for the same values.

Settings are built here from plain values with the command line's defaults (the click options
in :mod:`tracer.app.cli.options` carry the same numbers; ``tests/app/test_api.py`` checks that
they agree). Nothing here imports click, and the library is imported inside the functions so
that importing this module costs nothing.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

MODELS = ("ppmi-svd", "word2vec")
SEEDS_DEFAULT = 3
DOCUMENT_BOOTSTRAP_DEFAULT = {"ppmi-svd": 20, "word2vec": 0}

# the terminal view of a measure summary: the finding first, then its evidence and bookkeeping
MEASURE_COLUMNS = ["test", "slice", "effect_size", "ci_low", "ci_high", "p_value", "q_value", "gap", "measured",
                   "reason", "dropped_words", "model", "pmi_effect_size", "pmi_p_value", "p_method", "mean_score",
                   "n_targets_x", "n_targets_y", "n_attributes_a", "n_attributes_b"]


@dataclasses.dataclass(frozen=True)
class ModelChoice:
    """The model a command trains: its name, its settings, and the seed of the statistics."""

    name: str
    settings: object
    ppmi_svd: object
    seed: int

    @property
    def alpha(self) -> float:
        return self.ppmi_svd.alpha


def count_settings(window: int = 5, min_count: int = 5, weighting: str = "uniform", max_vocab: int | None = None):
    """The window counting settings (a :class:`tracer.core.counting.CountSettings`)."""
    from tracer.core.counting import CountSettings
    return CountSettings(window=window, weighting=weighting, min_count=min_count, max_vocab=max_vocab)


def model_choice(model: str = "ppmi-svd", dim: int = 100, seed: int | None = None, eig_power: float = 0.5,
                 alpha: float = 0.75, shift: float = 1.0, cbow: bool = False, negative: int = 5, epochs: int = 5,
                 workers: int = 1) -> ModelChoice:
    """The model to train and its settings; ``seed`` None means 0 for ppmi-svd and the statistics,
    1 for word2vec. Raises :class:`SettingError` for a model other than ``MODELS``."""
    from tracer.core.ppmi_svd import PpmiSvdSettings
    from tracer.core.word2vec import Word2VecSettings
    from tracer.errors import SettingError
    if model not in MODELS:
        raise SettingError(f"unknown model {model!r}; the models are {', '.join(MODELS)}")
    ppmi = PpmiSvdSettings(dim=dim, eig_power=eig_power, alpha=alpha, shift=shift, seed=0 if seed is None else seed)
    if model == "ppmi-svd":
        settings = ppmi
    else:
        settings = Word2VecSettings(dim=dim, skip_gram=not cbow, negative=negative, epochs=epochs,
                                    seed=1 if seed is None else seed, workers=workers)
    return ModelChoice(model, settings, ppmi, 0 if seed is None else seed)


def measure_settings(model: ModelChoice, bootstrap: int | None = None, seeds: int = SEEDS_DEFAULT,
                     min_words: int = 3, permutations: int = 10_000, exact_budget: int = 200_000,
                     per_slice_words: bool = False):
    """How tests are measured on ``model`` (``bootstrap`` None: 20 replicates for ppmi-svd, 0 for word2vec)."""
    from tracer.analysis.measure import MeasureSettings
    bootstrap = DOCUMENT_BOOTSTRAP_DEFAULT[model.name] if bootstrap is None else bootstrap
    return MeasureSettings(min_words=min_words, bootstrap=bootstrap, seeds=seeds, permutations=permutations,
                           exact_budget=exact_budget, seed=model.seed, alpha=model.alpha,
                           per_slice_words=per_slice_words)


def known_words(words: list[str], vocabulary, where: str) -> tuple[list[str], list[str]]:
    """(the words in ``vocabulary``, a note naming the others) for commands that can go on without
    some of the words they were given; none known is the library's error to raise."""
    kept = [w for w in words if w in vocabulary]
    missing = [w for w in words if w not in vocabulary]
    if not kept:
        return words, []
    return kept, [f"skipped, not in {where}: {', '.join(missing)}"] if missing else []


def read_drop_list(path: Path | None) -> list[str]:
    """Document ids, one per line, from a drop list (an empty list without a path)."""
    from tracer.errors import InputError
    if path is None:
        return []
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    ids = [line.strip() for line in path.read_text(encoding="utf-8").splitlines() if line.strip()]
    if not ids:
        raise InputError(f"{path}: the drop list is empty")
    return ids


def summary_view(table, wide: bool):
    """The summary columns the terminal shows (all of them with ``wide``)."""
    cols = [c for c in MEASURE_COLUMNS if c in table.columns]
    return table[cols + [c for c in table.columns if c not in cols]] if wide else table[cols]


def distinct_warnings(warnings) -> list[str]:
    """The different warnings of a table's rows, each once: a row's warning that only joins
    others with '; ' is left out, since its parts are listed."""
    kept: list[str] = []
    for w in sorted({w for w in warnings if w}, key=len):
        rest = w
        for k in kept:
            rest = rest.replace(k, "")
        if rest.strip("; "):
            kept.append(w)
    return sorted(kept)


def ingest_table(summary):
    """One row per input of an :class:`tracer.corpus.ingest.IngestSummary`: what became of it."""
    import pandas as pd
    return pd.DataFrame([{"input": i.path, "status": i.status, "records": i.records, "documents": i.documents,
                          "tokens": i.tokens, "rejected": i.rejects} for i in summary.inputs])


def check_periods(by: str) -> None:
    """Drift follows periods of time: ``time:Ny`` or ``year`` groupings only."""
    from tracer.errors import InputError
    if not by.startswith("time") and by != "year":
        raise InputError(f"--by {by}: drift needs periods of time (time:Ny or year)")


def drift_chosen(tests: dict, named: bool) -> dict:
    """The tests a drift follows: the named ones, else every two-target test."""
    return {n: t for n, t in tests.items() if named or t.two_target}


def correlation_pairs(ws, slices, model: ModelChoice, counts, *, progress: bool = False) -> list[tuple]:
    """(embedding, counts) of each slice, trained unsaved, for :func:`tracer.analysis.correlate.correlate`."""
    from tracer.provenance.counts import count_slice
    from tracer.provenance.models import train_embedding
    return [(train_embedding(ws, sl, model.name, counts, model.settings, save=False, progress=progress),
             count_slice(ws, sl.weights, counts, slice_name=sl.name)) for sl in slices]


def correlation(ws, test, table_file, word_column: str, value_column: str, slices, model: ModelChoice, counts, *,
                resamples: int, progress: bool = False):
    """``tracer correlate``: the table's words (normalised as the corpus) against the test, per slice;
    returns (summary, points) of :func:`tracer.analysis.correlate.correlate`."""
    from tracer.analysis.correlate import correlate
    from tracer.provenance.tables import read_word_values
    table = read_word_values(table_file, word_column, value_column, ws.tokenizer_settings)
    pairs = correlation_pairs(ws, slices, model, counts, progress=progress)
    return correlate(pairs, test, table, n_boot=resamples, seed=model.seed)


def plan_summary(p) -> dict:
    """The one-row summary of a :class:`tracer.analysis.plan.Plan`."""
    return {"goal_reached": p.reached, "unit": p.unit, "removed": len(p.removed),
            "documents_removed": len(p.doc_indices), "tokens_removed": p.tokens_removed,
            "token_share_removed": p.token_share, "effect_before": p.effect_before,
            "predicted_effect": p.predicted_effect, "verified_effect": p.verified_effect,
            "verified_low": p.verified_low, "verified_high": p.verified_high, "interval_method": p.interval_method}


def plan_tables(p) -> dict:
    """The tables of a plan by their ``--show`` names."""
    import pandas as pd
    return {"summary": pd.DataFrame([plan_summary(p)]), "rounds": p.rounds, "removed-by-source": p.removed_table,
            "test-words-removed": p.losses, "frequent-words-falling": p.falling, "usefulness": p.usefulness,
            "steps": p.steps}


def word_list(words) -> list[str]:
    """Words from comma-separated text (as every word-list option takes them) or a list."""
    listed = words.split(",") if isinstance(words, str) else list(words)
    return [w.strip() for w in listed if w.strip()]


def stored_model(ws, model: str, slice_name: str):
    """The model stored for a slice (named as ``--slice`` takes it)."""
    from tracer.corpus.slices import slice_from_spec
    from tracer.provenance.models import load_embedding
    return load_embedding(ws, model, slice_from_spec(ws, slice_name).name)


def neighbour_table(emb, words: list[str], n: int):
    """The ``n`` nearest words of each word by cosine: word, rank, neighbour, cosine."""
    import pandas as pd
    return pd.DataFrame([{"word": w, "rank": r + 1, "neighbour": x, "cosine": c}
                         for w in words for r, (x, c) in enumerate(emb.neighbours(w, n))])
