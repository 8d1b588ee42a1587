"""The Python API: the commands as functions of plain arguments, for notebooks and scripts.

``import tracer`` gives these functions (``tracer.measure``, ``tracer.trace``, ...). Each takes

- ``workspace``: a folder path or a workspace from :func:`open_workspace`;
- ``tests``: a tests file (TOML), one :class:`~tracer.core.association.AssociationTest` or a list of
  them; ``test`` picks tests by name (one name or a list; default: all, or the only one);
- ``model``: ``"ppmi-svd"`` or ``"word2vec"``; ``slices``: ``"all"``, ``"source=Gazette"``,
  ``"time=1960..1979"`` (one slice) or ``"source"``, ``"year"``, ``"time:10y"`` (one slice per
  group), or a list of these;
- the command line's other options as keyword arguments of the same names and defaults
  (``window``, ``min_count``, ``dim``, ``bootstrap``, ``seeds``, ...; see :data:`OPTIONS`).

Settings are made by :mod:`tracer.app.commands`, as for the command line, so the same values
give the same tables. Each function returns a small result holding pandas DataFrames; printing
it shows what the terminal would. Bad input raises the named errors of :mod:`tracer.errors`.
"""

from __future__ import annotations

import dataclasses
import inspect
import os
from pathlib import Path

import pandas as pd

from tracer.analysis.counterfactual import ablate as _ablate, drop_mask
from tracer.analysis.drift import drift_tests, word_drift
from tracer.analysis.measure import measure as _measure
from tracer.analysis.plan import plan as _plan
from tracer.analysis.pmi_table import pmi_table
from tracer.analysis.trace import TraceSettings, trace as _trace
from tracer.app import commands
from tracer.app.output import TERMINAL_WIDTH, render, wrap
from tracer.app.texts import CAUTIONS, DRIFT_LEGEND, ESTIMATE_NOTE, measure_legend
from tracer.core.association import AssociationTest
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.corpus.ingest import FieldMap, ingest as _ingest
from tracer.corpus.slices import resolve_slices, slice_from_spec, slices_by
from tracer.corpus.workspace import Workspace
from tracer.errors import SettingError
from tracer.provenance.cache import open_workspace as _open_workspace
from tracer.provenance.specs import load_tests, select_tests
from tracer.provenance.vectors_io import read_word2vec_format

# the keyword options every model-training function takes, with the command line's defaults
COUNT_OPTIONS = list(inspect.signature(commands.count_settings).parameters)
MODEL_OPTIONS = [p for p in inspect.signature(commands.model_choice).parameters if p != "model"]
MEASURE_OPTIONS = [p for p in inspect.signature(commands.measure_settings).parameters if p != "model"]
OPTIONS = COUNT_OPTIONS + MODEL_OPTIONS + MEASURE_OPTIONS


def _width(wide: bool) -> int | None:
    return None if wide else TERMINAL_WIDTH


class _Result:
    """Printing a result shows its text view (what the terminal prints)."""

    def text(self, wide: bool = False) -> str:
        raise NotImplementedError

    def __repr__(self) -> str:
        return self.text()


def open_workspace(workspace) -> Workspace:
    """The workspace at a path (raises :class:`WorkspaceNotFound` if nothing was ingested there),
    reusing the counts and models ``tracer run`` stored, as the commands do; a workspace is returned as is."""
    if isinstance(workspace, Workspace):
        return workspace
    return _open_workspace(workspace, cache="read")


def _tests(tests, test=None) -> dict[str, AssociationTest]:
    """The tests by name: from a file, one test, or a list; ``test`` selects by name."""
    names = [test] if isinstance(test, str) else list(test or [])
    if isinstance(tests, (str, os.PathLike)):
        return select_tests(load_tests(tests), names, tests)
    given = [tests] if isinstance(tests, AssociationTest) else list(tests.values() if isinstance(tests, dict) else tests)
    if not given or not all(isinstance(t, AssociationTest) for t in given):
        raise SettingError("tests must be a tests file, an AssociationTest or a list of them")
    return select_tests({t.name: t for t in given}, names, "the tests given")


def _one_test(tests, test=None) -> AssociationTest:
    chosen = _tests(tests, test)
    if len(chosen) != 1:
        raise SettingError(f"give test=NAME, one of {', '.join(chosen)}")
    return next(iter(chosen.values()))


def _slices(ws, slices) -> list:
    """Slices from spec strings: ``all``, ``KEY=VALUE`` picks one, a grouping (``time:10y``) splits;
    none: the whole corpus."""
    specs = [slices] if isinstance(slices, str) else list(slices or [])
    picks = [s for s in specs if s.strip() == "all" or "=" in s]
    return resolve_slices(ws, [s for s in specs if s not in picks], picks)


def _settings(model: str, options: dict, allowed: list[str]):
    """(counts, model choice, measure settings) from keyword options; an unknown one is an error."""
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise SettingError(f"unknown option {unknown[0]!r}; the options are {', '.join(allowed)}")
    def pick(keys):
        return {k: v for k, v in options.items() if k in keys}

    choice = commands.model_choice(model, **pick(MODEL_OPTIONS))
    return (commands.count_settings(**pick(COUNT_OPTIONS)), choice,
            commands.measure_settings(choice, **pick(MEASURE_OPTIONS)))


# ---- ingest -------------------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True, repr=False)
class Ingested(_Result):
    """What :func:`ingest` read: ``inputs`` (one row per file), the workspace, and its totals."""

    inputs: pd.DataFrame
    workspace: Workspace
    summary: object

    def text(self, wide: bool = False) -> str:
        s = self.summary
        return (render(self.inputs, width=_width(wide))
                + f"workspace {s.workspace}: {s.documents_total} documents, {s.tokens_total} tokens, "
                  f"{s.vocabulary_total} word types\n")


def ingest(workspace, inputs, *, text_field: str = "text", id_field: str = "id", source_field: str = "source",
           time_field: str | None = None, title_field: str = "title", source: str | None = None,
           input_format: str | None = None, strict: bool = False, replace: bool = False) -> Ingested:
    """Read corpus files (one path or a list) into the workspace (created if needed), as ``tracer ingest``."""
    paths = [inputs] if isinstance(inputs, (str, os.PathLike)) else list(inputs)
    fields = FieldMap(text=text_field, id=id_field, source=source_field, time=time_field, title=title_field)
    summary = _ingest(workspace, paths, fields=fields, input_format=input_format, default_source=source,
                      strict=strict, replace=replace, command="tracer.ingest " + " ".join(map(str, paths)))
    return Ingested(commands.ingest_table(summary), open_workspace(workspace), summary)


# ---- measure ------------------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True, repr=False)
class Measured(_Result):
    """The tables of :func:`measure` (see :func:`tracer.analysis.measure.measure` for their columns),
    the distinct ``warnings`` of its rows, and the ``legend`` of the summary's columns."""

    summary: pd.DataFrame
    words: pd.DataFrame
    leave_one_out: pd.DataFrame
    replicates: pd.DataFrame
    warnings: list[str]
    legend: str

    def text(self, wide: bool = False) -> str:
        width = _width(wide)
        return (render(commands.summary_view(self.summary, wide), width=width)
                + "".join(wrap(f"Warning: {w}", width) for w in self.warnings) + wrap(self.legend, width))


def measure(workspace, tests, test=None, *, model: str = "ppmi-svd", slices=None, vectors=None,
            **options) -> Measured:
    """Measure association tests on each slice, as ``tracer measure``: effect size, p-value,
    bootstrap interval (20 replicates for ppmi-svd unless ``bootstrap=``), PMI view.

    ``vectors``: a word2vec-format file measured beside the slices (alone with ``slices=None``).
    """
    ws = open_workspace(workspace)
    counts, choice, measuring = _settings(model, options, OPTIONS)
    ext = read_word2vec_format(Path(vectors)) if vectors is not None else None
    chosen = _slices(ws, slices) if slices is not None or ext is None else []
    res = _measure(ws, _tests(tests, test), choice.name, chosen, counts, choice.settings, measuring, vectors=ext)
    warnings = commands.distinct_warnings(res.summary["warning"])
    return Measured(res.summary, res.words, res.leave_one_out, res.replicates, warnings,
                    measure_legend(res.summary["std_convention"].iloc[0] if len(res.summary) else "",
                                   measuring.bootstrap) + CAUTIONS)


# ---- trace --------------------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True, repr=False)
class Traced(_Result):
    """The tables of :func:`trace`; ``verdict`` is the verification's headline (None without
    ``verify``), ``confirmed`` its outcome; ``result`` the library's whole
    :class:`~tracer.analysis.trace.TraceResult`."""

    headline: str
    verdict: str | None
    confirmed: bool | None
    sources: pd.DataFrame
    documents: pd.DataFrame
    passages: pd.DataFrame
    first_order: pd.DataFrame
    verification: pd.DataFrame | None
    notes: list[str]
    result: object

    def text(self, wide: bool = False) -> str:
        width = _width(wide)
        parts = [wrap(f"{self.headline}\n{ESTIMATE_NOTE}", width), "\n== sources ==\n",
                 render(self.sources, width=width), "\n== documents ==\n", render(self.documents, width=width)]
        if self.verification is not None:
            parts += ["\n== verification ==\n", render(self.verification, width=width), wrap(self.verdict, width)]
        return "".join(parts + [wrap(f"Note: {n}", width) for n in self.notes])


def trace(workspace, tests, test=None, *, model: str = "ppmi-svd", slice: str = "all", top: int = 10,
          per_doc: int = 3, candidates: int = 200, verify: int = 0, rank_by: str = "gap",
          seeds: int = commands.SEEDS_DEFAULT, **options) -> Traced:
    """Link a two-target test's association to the sources, documents and passages that carry it,
    as ``tracer trace``; ``verify=K`` retrains without the top K and gives the verdict."""
    ws = open_workspace(workspace)
    counts, choice, _ = _settings(model, options, COUNT_OPTIONS + MODEL_OPTIONS)
    settings = TraceSettings(top=top, candidates=candidates, verify=verify, rank_by=rank_by,
                             passages_per_doc=per_doc, seeds=seeds, seed=choice.seed)
    r = _trace(ws, _one_test(tests, test), choice.name, slice_from_spec(ws, slice), counts, choice.settings, settings)
    v = r.verification
    return Traced(r.headline(), None if v is None else v.headline(), r.confirmed, r.sources, r.documents,
                  r.passages, r.first_order, None if v is None else v.rows, list(r.notes), r)


# ---- drift --------------------------------------------------------------------------------------

def _tables_text(tables: dict, notes: list[str], wide: bool) -> str:
    width = _width(wide)
    return ("".join(f"== {name} ==\n" + render(df, width=width) for name, df in tables.items())
            + "".join(wrap(f"Note: {n}", width) for n in notes))


@dataclasses.dataclass(frozen=True, repr=False)
class Drifted(_Result):
    """The tables of :func:`drift`, every test's rows with a ``test`` column (see
    :class:`tracer.analysis.drift.DriftResult`); ``results`` the library's own, one per test."""

    periods: pd.DataFrame
    trend: pd.DataFrame
    changes: pd.DataFrame
    sources: pd.DataFrame
    notes: list[str]
    results: list

    def text(self, wide: bool = False) -> str:
        return _tables_text({"periods": self.periods, "trend": self.trend, "changes": self.changes},
                            self.notes, wide) + wrap(DRIFT_LEGEND, _width(wide))


@dataclasses.dataclass(frozen=True, repr=False)
class WordDrift(_Result):
    """:func:`drift` of words: each word's ``change`` between aligned periods and its ``neighbours``."""

    change: pd.DataFrame
    neighbours: pd.DataFrame
    notes: list[str]

    def text(self, wide: bool = False) -> str:
        return _tables_text({"change": self.change, "neighbours": self.neighbours}, self.notes, wide)


def drift(workspace, tests=None, test=None, *, words=None, by: str = "time:10y", model: str = "ppmi-svd",
          min_tokens: int = 20_000, neighbours: int = 10, **options) -> Drifted | WordDrift:
    """How tests' associations (default: every two-target test) or ``words`` (a list or
    comma-separated text) moved from period to period, as ``tracer drift``."""
    ws = open_workspace(workspace)
    commands.check_periods(by)
    counts, choice, measuring = _settings(model, options, OPTIONS)
    periods = slices_by(ws, by)
    if words is not None:
        kept, skipped = commands.known_words(ws.normalize_words(commands.word_list(words)), ws.vocab.index,
                                             "the corpus at all")
        change, near, notes = word_drift(ws, kept, periods, counts, choice.ppmi_svd, neighbours=neighbours)
        return WordDrift(change, near, skipped + list(notes))
    if tests is None:
        raise SettingError("give tests (and test=NAME), or words")
    chosen = commands.drift_chosen(_tests(tests, test), test is not None)
    results = list(drift_tests(ws, chosen, choice.name, periods, counts, choice.settings, measuring,
                               min_tokens=min_tokens).values())
    def joined(get):
        return pd.concat([get(r).assign(test=r.test) for r in results], ignore_index=True)

    return Drifted(joined(lambda r: r.periods), joined(lambda r: pd.DataFrame([r.trend])),
                   joined(lambda r: r.changes), joined(lambda r: r.source_parts),
                   [n for r in results for n in r.notes], results)


# ---- ablate, plan, correlate --------------------------------------------------------------------

@dataclasses.dataclass(frozen=True, repr=False)
class Table(_Result):
    """One table (``table``) with the notes printed under it."""

    table: pd.DataFrame
    notes: list[str] = dataclasses.field(default_factory=list)

    def text(self, wide: bool = False) -> str:
        width = _width(wide)
        return render(self.table, width=width) + "".join(wrap(n, width) for n in self.notes)


def ablate(workspace, tests, test=None, *, drop=(), drop_docs=None, slice: str = "all", model: str = "ppmi-svd",
           **options) -> Table:
    """Retrain without some documents and re-measure, as ``tracer ablate``: ``drop`` is a slice
    spec or a list of them (``source=NAME``, ``time=A..B``), ``drop_docs`` a list of document ids
    or a file of them, one per line."""
    ws = open_workspace(workspace)
    counts, choice, measuring = _settings(model, options, OPTIONS)
    ids = commands.read_drop_list(drop_docs) if isinstance(drop_docs, (str, os.PathLike)) else list(drop_docs or [])
    mask, what = drop_mask(ws, [drop] if isinstance(drop, str) else list(drop), ids)
    return Table(_ablate(ws, _tests(tests, test), choice.name, slice_from_spec(ws, slice), mask, what, counts,
                         choice.settings, measuring))


@dataclasses.dataclass(frozen=True, repr=False)
class Planned(_Result):
    """A :func:`plan`: ``message`` (reached or not, and how), the one-row ``summary`` and the other
    tables by name in ``tables``; ``doc_ids`` the documents it removes; ``plan`` the library's own."""

    message: str
    summary: pd.DataFrame
    tables: dict
    doc_ids: list[str]
    plan: object

    def text(self, wide: bool = False) -> str:
        width = _width(wide)
        return wrap(self.message, width) + render(self.summary, width=width) + "== rounds ==\n" + render(
            self.tables["rounds"], width=width) + wrap(CAUTIONS, width)


def plan(workspace, tests, test=None, *, goal: float, unit: str = "document", slice: str = "all",
         max_steps: int = 500, dim: int = 100, interval_replicates: int = 0, goal_on_interval: bool = False,
         **options) -> Planned:
    """A small set of documents (or sources, ``unit="source"``) whose removal brings |d| to
    ``goal``, verified by retraining, as ``tracer plan``."""
    ws = open_workspace(workspace)
    counts, _, _ = _settings("ppmi-svd", options, COUNT_OPTIONS)
    p = _plan(ws, _one_test(tests, test), slice_from_spec(ws, slice), goal, unit=unit, max_steps=max_steps,
              counts=counts, settings=PpmiSvdSettings(dim=dim), bootstrap=interval_replicates,
              on_interval=goal_on_interval)
    tables = commands.plan_tables(p)
    ids = [str(i) for i in ws.documents["doc_id"].to_numpy()[p.doc_indices]]
    return Planned(p.message, tables.pop("summary"), tables, ids, p)


@dataclasses.dataclass(frozen=True, repr=False)
class Correlated(Table):
    """:func:`correlate`: ``table`` of correlations per view and slice, ``points`` the words'
    scores and values (one row per word and slice)."""

    points: pd.DataFrame = None


def correlate(workspace, tests, test=None, *, table, value_column: str, word_column: str = "word",
              slices=None, model: str = "ppmi-svd", resamples: int = 1000, **options) -> Correlated:
    """Correlate each word's association score with a numeric column of a CSV file ``table``, per
    slice, as ``tracer correlate``."""
    ws = open_workspace(workspace)
    counts, choice, _ = _settings(model, options, COUNT_OPTIONS + MODEL_OPTIONS)
    summary, points = commands.correlation(ws, _one_test(tests, test), table, word_column, value_column,
                                           _slices(ws, slices), choice, counts, resamples=resamples)
    return Correlated(summary, [CAUTIONS], points)


# ---- words --------------------------------------------------------------------------------------

def pmi(workspace, word: str, contexts, *, slices=None, alpha: float = 0.75, shift: float = 1.0,
        **options) -> Table:
    """Window counts, marginals, PMI and PPMI of ``word`` with each context word (a list or
    comma-separated text), per slice, as ``tracer pmi``."""
    ws = open_workspace(workspace)
    counts, _, _ = _settings("ppmi-svd", options, COUNT_OPTIONS)
    kept, notes = commands.known_words(ws.normalize_words(commands.word_list(contexts)), ws.vocab.index,
                                       "the corpus at all")
    return Table(pmi_table(ws, word, kept, _slices(ws, slices), counts, alpha=alpha, shift=shift),
                 [f"Note: {n}" for n in notes])


def neighbours(workspace, words, *, model: str = "ppmi-svd", slice: str = "all", neighbours: int = 10) -> Table:
    """The nearest words by cosine in a stored model (``tracer train`` or ``tracer run`` stores
    them), as ``tracer neighbours``."""
    ws = open_workspace(workspace)
    emb = commands.stored_model(ws, commands.model_choice(model).name, slice)
    kept, notes = commands.known_words(ws.normalize_words(commands.word_list(words)), emb.index,
                                       f"the {model} model of slice {slice}")
    return Table(commands.neighbour_table(emb, kept, neighbours), [f"Note: {n}" for n in notes])
