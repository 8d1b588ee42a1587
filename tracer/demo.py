"""The demo: the whole path on the bundled invented archive, in well under a minute."""

from __future__ import annotations

import dataclasses
import time
from pathlib import Path
from typing import Callable

from .errors import InputError
from .output import render

DEMO_DIR = Path(__file__).resolve().parent.parent / "corpora_demo"
DEMO_CORPUS = DEMO_DIR / "archive.jsonl.gz"


@dataclasses.dataclass(frozen=True)
class DemoResult:
    workspace: Path
    text: str
    seconds: float


def run_demo(workspace: str | Path, *, progress: bool = False,
             say: Callable[[str], None] = lambda s: None) -> DemoResult:
    """Ingest the demo archive into ``workspace``, count, train, export; return a printable account."""
    from .cooccur import CountSettings
    from .corpus.ingest import ingest
    from .corpus.slices import resolve_slices
    from .corpus.workspace import Workspace
    from .embed.ppmi_svd import PpmiSvdSettings
    from .embed.train import load_embedding, train_embedding
    from .embed.word2vec import Word2VecSettings
    from .probes import pmi_table

    if not DEMO_CORPUS.is_file():
        raise InputError(f"the demo archive is missing ({DEMO_CORPUS}); run tracer from a source checkout "
                         "installed with  pip install -e .  or regenerate it with "
                         "python corpora_demo/generate_demo_corpus.py")
    t0 = time.perf_counter()
    workspace = Path(workspace)
    out: list[str] = []
    say(f"ingesting {DEMO_CORPUS.name} into {workspace}")
    ingest(workspace, [DEMO_CORPUS], progress=progress)
    ws = Workspace(workspace)
    s = ws.summary()
    out.append(f"Demo archive: {s['documents']} documents, {s['tokens']} tokens, {s['sources']} outlets, "
               f"{s['first_year']}-{s['last_year']}.\n\n")
    counts = CountSettings()
    say("counting windowed co-occurrence for a planted pair, per outlet")
    table = pmi_table(ws, "velmari", ["agony", "joy"], resolve_slices(ws, ["source"]), counts)
    out.append("PMI of 'velmari' with 'agony' and 'joy', per outlet (planted in the Gazette only):\n")
    out.append(render(table.drop(columns=["note", "word"])) + "\n")
    say("training PPMI-SVD on the whole archive and on each decade")
    svd = PpmiSvdSettings(dim=100)
    slices = resolve_slices(ws, ["time:10y"], ["all"])
    for sl in slices:
        train_embedding(ws, sl, "ppmi-svd", counts, svd, progress=progress)
    say("training word2vec (skip-gram) on the whole archive")
    all_slice = slices[0]
    w2v = train_embedding(ws, all_slice, "word2vec", counts, Word2VecSettings(dim=100, workers=2, epochs=5),
                          progress=progress)
    ppmi_all = load_embedding(ws, "ppmi-svd", "all")
    out.append("Nearest neighbours (whole archive):\n")
    for word in ("harbour", "wheat", "nurse"):
        for name, emb in (("ppmi-svd", ppmi_all), ("word2vec", w2v)):
            near = ", ".join(w for w, _ in emb.neighbours(word, 6))
            out.append(f"  {word:8s} {name:9s} {near}\n")
    export_path = workspace / "exports" / "ppmi-svd-all.txt"
    export_path.parent.mkdir(exist_ok=True)
    ppmi_all.save_word2vec_format(export_path)
    seconds = time.perf_counter() - t0
    out.append(
        f"\nWrote the workspace to {workspace} (models in {ws.models_dir}, "
        f"{len(slices)} PPMI-SVD slices and word2vec on 'all'), and {export_path} in word2vec text format.\n"
        f"Try:  tracer info -w {workspace} --sources\n"
        f"      tracer pmi -w {workspace} dranik --with career,family --by time:10y\n"
        f"      tracer neighbours -w {workspace} captain,harvest --model word2vec\n"
        f"Done in {seconds:.1f} s.\n"
        "Caution: these are invented data; an association in an embedding is not proof of discrimination, "
        "word lists encode choices, and small corpora give unstable numbers.\n")
    return DemoResult(workspace, "".join(out), seconds)
