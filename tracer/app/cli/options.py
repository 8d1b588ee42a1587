"""Option groups shared by the commands: each has one meaning and hands the command one object.

A group is a decorator that adds its click options and replaces their values by the object
they describe (``counts: CountSettings``, ``model: ModelChoice``, ``measuring:
MeasureSettings``, ``slices: SliceChoice``, ``out: Output``), so a command receives settings,
not option values, and an option means the same in every command that takes it.

The library is imported inside the wrappers, not at the top: it loads numpy, pandas, numba and
gensim, and ``tracer --help`` (or a typo) should not wait for them. That is the only reason.
"""

from __future__ import annotations

import dataclasses
import functools
from pathlib import Path
from typing import Callable

import click

from tracer.app.cli.group import say, scheduler_address

from tracer.app.commands import (DOCUMENT_BOOTSTRAP_DEFAULT, MODELS, SEEDS_DEFAULT,  # noqa: F401
                                 ModelChoice)


def option_group(options: list, build: Callable[[dict], dict]):
    """A decorator adding ``options``; ``build`` turns their values (popped from the keyword
    arguments by parameter name) into the keyword arguments the command receives."""
    names = [opt_name(o) for o in options]

    def decorator(f):
        @functools.wraps(f)
        def wrapper(*args, **kwargs):
            values = {n: kwargs.pop(n) for n in names}
            return f(*args, **kwargs, **build(values))

        for opt in reversed(options):
            wrapper = opt(wrapper)
        return wrapper

    return decorator


def opt_name(option_decorator) -> str:
    """The parameter name of a click option decorator (made once to read it)."""
    probe = option_decorator(lambda **kw: None)
    return probe.__click_params__[-1].name


def workspace_option(required: bool = True):
    return click.option("-w", "--workspace", type=click.Path(file_okay=False, path_type=Path),
                        required=required, help="Workspace folder (one per corpus).")


def open_workspace(path: Path):
    from tracer.provenance.cache import open_workspace as open_ws
    # counts and models that tracer run stored are reused (same corpus, documents and settings);
    # the other commands store nothing there
    return open_ws(path, cache="read", scheduler=scheduler_address())


def words_of(value: str) -> list[str]:
    """Comma-separated words, as every word-list option takes them."""
    return [w.strip() for w in value.split(",") if w.strip()]


# ---- counting ---------------------------------------------------------------------------------

COUNT_OPTIONS = [
    click.option("--window", type=click.IntRange(min=1), default=5, show_default=True, help="Tokens each side."),
    click.option("--min-count", type=click.IntRange(min=1), default=5, show_default=True,
                 help="Words rarer than this in the slice are removed before windowing."),
    click.option("--weighting", type=click.Choice(["uniform", "harmonic", "linear"]), default="uniform",
                 show_default=True, help="Weight of a pair by distance: 1, 1/d, or word2vec-style linear."),
    click.option("--max-vocab", type=click.IntRange(min=1), default=None,
                 help="Keep at most this many words (the most frequent)."),
]


def _count_settings(v: dict) -> dict:
    from tracer.app.commands import count_settings
    return {"counts": count_settings(**v)}


counting_options = option_group(COUNT_OPTIONS, _count_settings)
"""Window counting settings; the command receives ``counts: CountSettings``."""


# ---- slices -----------------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True)
class SliceChoice:
    """The slices named by ``--by`` and ``--slice`` (none: the whole corpus)."""

    by: tuple[str, ...]
    picks: tuple[str, ...]

    @property
    def given(self) -> bool:
        return bool(self.by or self.picks)

    def resolve(self, ws) -> list:
        from tracer.corpus.slices import resolve_slices
        return resolve_slices(ws, self.by, self.picks)


SLICE_OPTIONS = [
    click.option("--by", multiple=True, help="Slices by source, year or time:Ny, e.g. time:10y (repeatable)."),
    click.option("--slice", "picks", multiple=True,
                 help="One slice: all, source=NAME, time=1960..1979 (repeatable)."),
]
slice_options = option_group(SLICE_OPTIONS, lambda v: {"slices": SliceChoice(tuple(v["by"]), tuple(v["picks"]))})
"""Several slices; the command receives ``slices: SliceChoice``."""


def one_slice_option(help_text: str = "The slice to work in: all, source=NAME, time=A..B."):
    return click.option("--slice", "slice_spec", default="all", show_default=True, help=help_text)


def one_slice(ws, spec: str):
    from tracer.corpus.slices import slice_from_spec
    return slice_from_spec(ws, spec)


# ---- models -----------------------------------------------------------------------------------

DIM_OPTION = click.option("--dim", type=click.IntRange(min=1), default=100, show_default=True, help="Vector size.")
MODEL_OPTIONS = [
    click.option("--model", type=click.Choice(MODELS), default="ppmi-svd", show_default=True,
                 help="The embedding model to train."),
    DIM_OPTION,
    click.option("--seed", type=int, default=None,
                 help="Random seed (default: 0 for ppmi-svd and the statistics, 1 for word2vec)."),
    click.option("--eig-power", type=float, default=0.5, show_default=True, help="ppmi-svd: p in W = U S^p."),
    click.option("--alpha", type=click.FloatRange(0, 1, min_open=True), default=0.75, show_default=True,
                 help="Context-distribution smoothing of PMI (1: none)."),
    click.option("--shift", type=click.FloatRange(min=1), default=1.0, show_default=True,
                 help="k of shifted PPMI, max(PMI - log k, 0)."),
    click.option("--cbow", is_flag=True, help="word2vec: CBOW instead of skip-gram."),
    click.option("--negative", type=click.IntRange(min=0), default=5, show_default=True,
                 help="word2vec: negative samples."),
    click.option("--epochs", type=click.IntRange(min=1), default=5, show_default=True, help="word2vec: epochs."),
    click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True,
                 help="word2vec: training threads; 1 gives the same vectors on every run, more are faster "
                      "but not reproducible."),
]


def _model_choice(v: dict) -> dict:
    from tracer.app.commands import model_choice
    if v["model"] == "word2vec" and v["workers"] > 1:
        click.echo(f"Note: word2vec on {v['workers']} workers: the vectors are not reproducible "
                   "(another run gives other vectors); --workers 1 makes them reproducible", err=True)
    return {"model": model_choice(**v)}


model_options = option_group(MODEL_OPTIONS, _model_choice)
"""The model and its settings; the command receives ``model: ModelChoice``."""

SEEDS_OPTION = click.option(
    "--seeds", type=click.IntRange(min=1), default=SEEDS_DEFAULT, show_default=True,
    help="word2vec: models trained with consecutive seeds for each measurement (mean and spread); "
         "ppmi-svd is deterministic and trains one.")
BOOTSTRAP_OPTION = click.option(
    "--bootstrap", type=click.IntRange(min=0), default=None,
    help="Document-bootstrap replicates for the intervals (default: 20 for ppmi-svd, 0 for word2vec).")
MEASURE_OPTIONS = MODEL_OPTIONS + [
    BOOTSTRAP_OPTION,
    SEEDS_OPTION,
    click.option("--min-words", type=click.IntRange(min=1), default=3, show_default=True,
                 help="A target set with fewer words in a slice's vocabulary is not measured there."),
    click.option("--permutations", type=click.IntRange(min=1), default=10_000, show_default=True,
                 help="Monte Carlo re-partitions when exact enumeration does not fit the budget."),
    click.option("--exact-budget", type=click.IntRange(min=1), default=200_000, show_default=True,
                 help="Enumerate every re-partition when there are at most this many."),
    click.option("--per-slice-words", is_flag=True, default=False,
                 help="Each slice keeps the test words it knows (default: only words known in every slice "
                      "compared)."),
]


def _measure_settings(v: dict) -> dict:
    from tracer.app.commands import measure_settings
    model_names = {opt_name(o) for o in MODEL_OPTIONS}
    model = _model_choice({k: x for k, x in v.items() if k in model_names})["model"]
    return {"model": model, "measuring": measure_settings(model, **{k: x for k, x in v.items() if k not in model_names})}


measuring_options = option_group(MEASURE_OPTIONS, _measure_settings)
"""The model and how tests are measured on it; the command receives ``model: ModelChoice`` and
``measuring: MeasureSettings``."""


# ---- what a command lists ---------------------------------------------------------------------

TOP_DOCUMENTS_OPTION = click.option("--top", type=click.IntRange(min=1), default=10, show_default=True,
                                    help="Documents to show.")
PER_DOC_OPTION = click.option("--per-doc", type=click.IntRange(min=1), default=3, show_default=True,
                              help="Passages shown per document.")
LAYOUT_OPTION = click.option("--layout", type=click.Choice(["reading", "kwic"]), default="reading", show_default=True,
                             help="Passages in the terminal: text with the marked words under carets (bold on a "
                                  "terminal), or kwic: one aligned line per marked word.")
NEIGHBOURS_OPTION = click.option("-n", "--neighbours", "n_neighbours", type=click.IntRange(min=1), default=10,
                                 show_default=True, help="Nearest neighbours listed per word.")


# ---- tests ------------------------------------------------------------------------------------

def tests_file_option(required: bool = True):
    return click.option("--tests", "tests_file", type=click.Path(dir_okay=False, path_type=Path),
                        required=required, help="TOML file of association tests.")


def test_names_option():
    return click.option("--test", "test_names", multiple=True, help="Only this test (repeatable; default: all).")


def load_tests(tests_file, names=()) -> dict:
    """The tests of the file, only the named ones if names are given."""
    from tracer.provenance.specs import load_tests as load, select_tests
    return select_tests(load(tests_file), list(names), tests_file)


def one_test(tests_file, name: str):
    return load_tests(tests_file, [name])[name]


# ---- output -----------------------------------------------------------------------------------

_OUTPUT_PARAMS = ("out", "drop_list", "write_corpus")


def check_out(path: Path) -> None:
    """Refuse an output path that would overwrite the workspace's own files or the command's inputs
    (every path-valued parameter of the running command that is not itself an output)."""
    from tracer.corpus.workspace import protected_paths
    from tracer.files import check_output_path
    ctx = click.get_current_context(silent=True)
    params = {k: v for k, v in (ctx.params if ctx else {}).items() if k not in _OUTPUT_PARAMS}
    ws = params.pop("workspace", None)
    protected = [v for val in params.values() for v in (val if isinstance(val, tuple) else (val,))
                 if isinstance(v, Path)]
    check_output_path(path, protected + (protected_paths(ws) if ws is not None else []))


def labelled(note: str) -> str:
    """A note line: ``Note: ...`` unless it is already a ``Warning: ...``."""
    return note if note.startswith(("Warning: ", "Note: ")) else f"Note: {note}"


@dataclasses.dataclass(frozen=True)
class Output:
    """Where and how a command's result goes: ``-o`` (the result, nothing else) or stdout."""

    fmt: str
    path: Path | None
    wide: bool

    @property
    def width(self) -> int | None:
        from tracer.app.output import TERMINAL_WIDTH
        return None if self.wide else TERMINAL_WIDTH

    def write(self, text: str) -> None:
        if self.path is None:
            click.echo(text, nl=False)
        else:
            from tracer.files import write_atomic
            check_out(self.path)
            write_atomic(self.path, text)
            say(f"wrote {self.path}")

    def table(self, df, *, first: list[str] | None = None, notes=(), legend: str = "") -> None:
        """One table. In table format ``first`` columns lead (the rest follow, and fall off first
        at 100 columns) and the notes and the legend follow the table; in CSV and JSON the notes
        go to standard error (even with --quiet) so the result stays machine-readable."""
        from tracer.app.output import render, wrap
        if self.fmt == "table":
            if first:
                df = df[[c for c in first if c in df.columns] + [c for c in df.columns if c not in first]]
            text = render(df, "table", width=self.width)
            text += "".join(wrap(labelled(n), self.width) for n in notes)
            self.write(text + (wrap(legend, self.width) if legend else ""))
            return
        self.write(render(df, self.fmt))
        for n in notes:
            say(labelled(n), always=True)

    def document(self, doc) -> None:
        """A whole result (several tables) as one JSON document."""
        import json

        from tracer.app.output import plain_values
        self.write(json.dumps(plain_values(doc), indent=1, ensure_ascii=False) + "\n")


OUTPUT_OPTIONS = [
    click.option("--format", "fmt", type=click.Choice(["table", "csv", "json"]), default="table",
                 show_default=True, help="Output format."),
    click.option("-o", "--out", type=click.Path(dir_okay=False, path_type=Path), default=None,
                 help="Write the result to this file instead of standard output."),
    click.option("--wide", is_flag=True, help="Tables: every column at full width (default: fit 100 columns)."),
]
output_options = option_group(OUTPUT_OPTIONS, lambda v: {"out": Output(v["fmt"], v["out"], v["wide"])})
"""--format, -o/--out and --wide; the command receives ``out: Output``."""
