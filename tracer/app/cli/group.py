"""The ``tracer`` command group: global options, status lines, and the one place where errors
and library warnings are turned into lines a user can read."""

from __future__ import annotations

import logging
import sys
import traceback
import warnings

import click

from tracer._version import __version__
from tracer.errors import TracerError


def _root_obj() -> dict:
    ctx = click.get_current_context(silent=True)
    return (ctx.find_root().obj or {}) if ctx is not None else {}


def scheduler_address() -> str | None:
    """The dask scheduler given with --scheduler, or None."""
    return _root_obj().get("scheduler")


def progress_on() -> bool:
    """Progress bars (on stderr): with --progress, else when stderr is a terminal and not --quiet."""
    obj = _root_obj()
    if obj.get("quiet"):
        return False
    return bool(obj.get("progress")) or sys.stderr.isatty()


def steps(items, desc: str, unit: str):
    """``items`` with a progress bar on stderr (with counts and time left) when progress is on."""
    from tqdm import tqdm
    items = list(items)
    return tqdm(items, desc=desc, unit=f" {unit}", disable=not progress_on() or len(items) < 2, leave=False,
                file=sys.stderr)


def say(text: str, *, always: bool = False) -> None:
    """A status line on stderr (not with --quiet unless ``always``), so stdout stays a clean result;
    written through tqdm so that a progress bar on the screen is redrawn below it, not broken."""
    if always or not _root_obj().get("quiet"):
        from tqdm import tqdm
        tqdm.write(text, file=sys.stderr)


# warnings meant for programmers (an API that will change), not about the user's results
FOR_PROGRAMMERS = (DeprecationWarning, PendingDeprecationWarning, FutureWarning)


def _warning_summary(caught: list[warnings.WarningMessage]) -> str:
    kinds: dict[str, int] = {}
    for w in caught:
        key = f"{w.category.__name__}: {str(w.message).splitlines()[0] if str(w.message) else ''}"
        kinds[key] = kinds.get(key, 0) + 1
    listed = "; ".join(f"{k} ({n}x)" if n > 1 else k for k, n in list(kinds.items())[:3])
    more = f"; and {len(kinds) - 3} more kinds" if len(kinds) > 3 else ""
    return (f"Note: libraries warned {len(caught)} time{'s' * (len(caught) > 1)} "
            f"({listed}{more}); --debug shows where.")


class TracerGroup(click.Group):
    """Runs a command so that the user sees one ``Error: ...`` line and exit code 1 for a library
    error (``--debug`` adds the traceback), and library warnings only as one summary note after a
    result (raw with ``--debug``; dropped when the command fails, so the error line comes first;
    deprecation warnings, meant for programmers, only with ``--debug``)."""

    def invoke(self, ctx):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("default")
            try:
                result = super().invoke(ctx)
            except TracerError as e:
                if (ctx.obj or {}).get("debug"):
                    _show_raw(caught)
                    traceback.print_exc()
                raise click.ClickException(str(e)) from None
            except KeyboardInterrupt:
                click.echo("Interrupted; the workspace is left as it was before this command.", err=True)
                sys.exit(130)
        if (ctx.obj or {}).get("debug"):
            _show_raw(caught)
        elif any(not issubclass(w.category, FOR_PROGRAMMERS) for w in caught):
            say(_warning_summary([w for w in caught if not issubclass(w.category, FOR_PROGRAMMERS)]), always=True)
        return result


def _show_raw(caught) -> None:
    for w in caught:
        click.echo(warnings.formatwarning(w.message, w.category, w.filename, w.lineno).rstrip(), err=True)


@click.group(cls=TracerGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="tracer")
@click.option("-q", "--quiet", is_flag=True, help="Print only results, no progress or status lines.")
@click.option("-v", "--verbose", is_flag=True, help="Print more about each step.")
@click.option("--progress", is_flag=True, help="Show progress bars even when standard error is not a terminal.")
@click.option("--debug", is_flag=True, help="Show the full traceback of an error, and warnings as they came.")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Count, and run bootstrap replicates and verification retrains, on this dask.distributed "
                   "scheduler (e.g. tcp://host:8786; needs the dask extra).")
@click.pass_context
def cli(ctx, quiet, verbose, progress, debug, scheduler):
    """Trace associations in word embeddings back to the corpus that made them.

    Example:  tracer demo -w demo-work
    """
    ctx.obj = {"quiet": quiet, "verbose": verbose, "progress": progress, "debug": debug, "scheduler": scheduler}
    logging.basicConfig(level=logging.INFO if verbose else logging.WARNING, format="%(message)s")


def main() -> None:
    cli(prog_name="tracer")
