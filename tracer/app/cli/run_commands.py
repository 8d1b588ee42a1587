"""Commands on experiments and their runs: run, report, demo."""

from __future__ import annotations

from pathlib import Path

import click

from tracer.app.cli.group import cli, progress_on, say, scheduler_address
from tracer.app.cli.options import check_out, workspace_option


@cli.command()
@click.argument("experiment", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--open-report", is_flag=True, help="Print only the report's path (for scripts).")
def run(experiment, open_report):
    """Run an experiment file: ingest (if needed), measure, trace, drift, report.

    Example:  tracer run configs/demo.toml
    """
    from tracer.app.pipeline import run_experiment
    from tracer.provenance.experiment import load_experiment
    import dataclasses
    exp = load_experiment(experiment)
    if scheduler_address():  # the command line's --scheduler over the file's [compute] scheduler
        exp = dataclasses.replace(exp, scheduler=scheduler_address())
    result = run_experiment(exp, progress=progress_on(), say=say, command=f"tracer run {experiment}")
    report_path = result.folder / "report.html"
    if open_report:
        click.echo(str(report_path))
        return
    click.echo(f"{'Reused' if result.reused else 'Stored'} run {result.run_id} in {result.folder}\n"
               f"Report: {report_path}\nTables: {result.folder / 'tables'}")
    if result.status != "complete":
        click.echo(f"Partial run: {len(result.not_measured)} parts not measured, each with its reason in "
                   f"{result.folder / 'tables' / 'not_measured.csv'}")


@cli.group()
def cache():
    """The workspace's cache of counts and models.

    Example:  tracer cache prune -w tracer-demo
    """


@cache.command("prune")
@workspace_option()
@click.option("--max-size", type=click.FloatRange(min=0), default=None,
              help="Keep at most this many MB (the least recently used entries go first); default: 4096.")
def cache_prune(workspace, max_size):
    """Remove cache entries of other corpora or versions, then the oldest over a size limit.

    Example:  tracer cache prune -w tracer-demo --max-size 500
    """
    from tracer.corpus.workspace import Workspace
    from tracer.provenance.cache import DEFAULT_MAX_BYTES, ResultCache
    ws = Workspace(workspace)
    limit = DEFAULT_MAX_BYTES if max_size is None else int(max_size * 2 ** 20)
    removed, freed = ResultCache(ws.path / "cache").prune(ws.corpus_hash, limit)
    click.echo(f"Removed {removed} cache entries ({freed / 2 ** 20:.1f} MB) from {ws.path / 'cache'}")


@cli.command()
@workspace_option()
@click.option("--run", "run_id", default="latest", show_default=True, help="Run id, or latest.")
@click.option("-o", "--out", type=click.Path(dir_okay=False, path_type=Path), required=True,
              help="Where to write the HTML report (the result).")
def report(workspace, run_id, out):
    """Write the self-contained HTML report of a stored run.

    Example:  tracer report -w tracer-demo --run latest -o report.html
    """
    from tracer.app.pipeline import find_run
    from tracer.app.report.html import write_report
    check_out(out)
    folder = find_run(workspace, run_id)
    write_report(folder, out)
    say(f"wrote the report of run {folder.name} to {out}")


@cli.command()
@workspace_option(required=False)
def demo(workspace):
    """Run the whole path on the bundled demo archive and say where the results are.

    Example:  tracer demo -w demo-work
    """
    from tracer.app.demo import run_demo
    result = run_demo(workspace or Path("tracer-demo"), progress=progress_on(), say=say)
    click.echo(result.text, nl=False)
