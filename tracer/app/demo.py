"""The demo: ``tracer run`` on the bundled demo experiment, plus stored models to explore afterwards."""

from __future__ import annotations

import dataclasses
import json
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Callable

import pandas as pd

from tracer.core.replicate_pool import start_workers
from tracer.core.word2vec import Word2VecSettings
from tracer.errors import InputError
from tracer.app.output import render, wrap
from tracer.provenance.vectors_io import write_word2vec_format


def _demo_root() -> Path:
    """Where the demo archive and configs are: copied into the package by the build (an installed
    wheel holds them in tracer/app/demo_data), else the source checkout."""
    packaged = Path(__file__).resolve().parent / "demo_data"
    if (packaged / "configs" / "demo.toml").is_file():
        return packaged
    return Path(__file__).resolve().parents[2]


ROOT = _demo_root()
DEMO_CORPUS = ROOT / "corpora_demo" / "archive.jsonl.gz"
DEMO_EXPERIMENT = ROOT / "configs" / "demo.toml"
# one worker: gensim's word2vec gives the same vectors on every run only with one training thread
DEMO_WORD2VEC = Word2VecSettings(dim=100, workers=1)


@dataclasses.dataclass(frozen=True)
class DemoResult:
    workspace: Path
    run_folder: Path
    text: str
    seconds: float


def _table(folder: Path, name: str) -> pd.DataFrame:
    return pd.DataFrame(json.loads((folder / "tables" / f"{name}.json").read_text(encoding="utf-8")))


def demo_word2vec(ws, counts, *, slice_spec: str = "all", save: bool = True, progress: bool = False):
    """The demo's word2vec model of the whole archive, or of one slice of it (one worker: the same
    vectors on every run)."""
    from tracer.corpus.slices import slice_from_spec
    from tracer.provenance.models import train_embedding
    return train_embedding(ws, slice_from_spec(ws, slice_spec), "word2vec", counts, DEMO_WORD2VEC, save=save,
                           progress=progress)


def run_demo(workspace: str | Path, *, progress: bool = False,
             say: Callable[[str], None] = lambda s: None) -> DemoResult:
    """Run the demo experiment with its workspace in ``workspace``; return a printable account."""
    from tracer.provenance.experiment import load_experiment
    from tracer.corpus.slices import slice_from_spec
    from tracer.corpus.workspace import Workspace
    from tracer.corpus.ingest import ingest
    from tracer.corpus.lock import workspace_lock
    from tracer.provenance.models import model_folder, train_embedding
    from tracer.provenance.vectors_io import save_embedding
    from tracer.app.pipeline import run_experiment

    if not DEMO_CORPUS.is_file() or not DEMO_EXPERIMENT.is_file():
        raise InputError(f"the demo files are missing ({DEMO_CORPUS}, {DEMO_EXPERIMENT}); reinstall tracer (a built "
                         "wheel holds them in tracer/app/demo_data; a source checkout has them in place)")
    t0 = time.perf_counter()
    workspace = Path(workspace).resolve()
    exp = dataclasses.replace(load_experiment(DEMO_EXPERIMENT), workspace=workspace)
    # the word2vec model the demo stores does not depend on the run: it is trained on a thread of
    # its own beside it (gensim's training loop releases the GIL; one gensim worker, so the same
    # vectors as alone), after the archive is ingested (the run then finds nothing new to ingest)
    ingest(workspace, exp.inputs, fields=exp.fields, tokenizer=exp.tokenizer, progress=progress)
    start_workers()  # the run's bootstrap replicates will need them
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="demo-word2vec") as side:
        w2v_job = side.submit(demo_word2vec, Workspace(workspace), exp.counts, save=False)
        result = run_experiment(exp, progress=progress, say=say, command=f"tracer demo -w {workspace}")
        w2v = w2v_job.result()
    ws = Workspace(workspace)
    say("storing PPMI-SVD and word2vec models of the whole archive for tracer neighbours and export")
    whole = slice_from_spec(ws, "all")
    ppmi = train_embedding(ws, whole, "ppmi-svd", exp.counts, exp.ppmi_svd, progress=progress)
    with workspace_lock(ws.path, command="store the demo's word2vec model of slice all"):
        save_embedding(w2v, model_folder(ws, "word2vec", "all"))
    export_path = workspace / "exports" / "ppmi-svd-all.txt"
    export_path.parent.mkdir(exist_ok=True)
    write_word2vec_format(ppmi, export_path)

    folder = result.folder
    s = ws.summary()
    out = [f"Demo archive: {s['documents']} documents, {s['tokens']} tokens, {s['sources']} outlets, "
           f"{s['first_year']}-{s['last_year']} (invented; corpora_demo/README.md says what was planted).\n\n"]
    m = _table(folder, "measure")
    shown = m[(m.slice.isin(["all", "source=Gazette", "source=Tribune", "time=1980..1989"])) & (m.kind == "two-target")]
    out.append("Effect sizes (WEAT d, population sd; bootstrap interval) in a few slices:\n")
    out.append(render(shown[["test", "slice", "effect_size", "ci_low", "ci_high", "p_value", "gap"]]) + "\n")
    for name in exp.trace_tests:
        src = _table(folder, f"trace_{name}_sources")
        ver = _table(folder, f"trace_{name}_verification")
        head = (f"the source that carries it most is {src.source.iloc[0]} ({src.token_share.iloc[0]:.0%} of the "
                f"tokens); " if bool(ver.confirmed.iloc[0]) else "")
        out.append(wrap(f"Trace of {name}: {head}{ver.headline.iloc[0]}."))
    for name in exp.drift_tests:
        trend = _table(folder, f"drift_{name}_trend").iloc[0]
        ch = _table(folder, f"drift_{name}_changes")
        overall = ch[ch.overall.astype(bool)].iloc[0] if ch.overall.astype(bool).any() else None
        line = f"Drift of {name}: gap slope {trend.slope:+.3f} per decade (Kendall p {trend.p_value:.3g})"
        if overall is not None:
            line += (f"; first to last period {overall.total:+.3f}, of which the mix of sources "
                     f"{overall.mix_part:+.3f} and change within the sources {overall.within_part:+.3f}")
        out.append(wrap(line + "."))
    out.append("\nNearest neighbours (whole archive):\n")
    for word in ("harbour", "wheat", "nurse"):
        for name, emb in (("ppmi-svd", ppmi), ("word2vec", w2v)):
            out.append(f"  {word:8s} {name:9s} {', '.join(w for w, _ in emb.neighbours(word, 6))}\n")
    seconds = time.perf_counter() - t0
    out.append(_closing(workspace, folder, ws.models_dir, export_path, result.run_id, seconds))
    return DemoResult(workspace, folder, "".join(out), seconds)


def _closing(workspace: Path, folder: Path, models_dir: Path, export_path: Path, run_id: str, seconds: float) -> str:
    """Where everything went, one path a line, then what to try next."""
    return (f"\nWrote the workspace to {workspace}.\n"
            f"Report:  {folder / 'report.html'}\n"
            f"Tables:  {folder / 'tables'}\n"
            f"Models:  {models_dir}\n"
            f"Export:  {export_path} (word2vec text format)\n"
            f"Try:  tracer info -w {workspace} --sources\n"
            f"      tracer trace -w {workspace} --tests {DEMO_EXPERIMENT.parent / 'demo_tests.toml'} --test gazette_outlet\n"
            f"      tracer neighbours -w {workspace} captain,harvest --model word2vec\n"
            f"Done in {seconds:.1f} s (run {run_id}).\n"
            + wrap("Caution: these are invented data; an association in an embedding is not proof of discrimination, "
                   "word lists encode choices, and small corpora give unstable numbers."))
