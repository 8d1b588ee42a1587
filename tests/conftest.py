"""Shared fixtures: small corpora written to temporary folders, and gensim's bundled data."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp

from tracer.corpus.ingest import ingest
from tracer.corpus.workspace import Workspace


def gensim_data(name: str) -> Path:
    from gensim.test.utils import datapath
    return Path(datapath(name))


def write_jsonl(path: Path, records: list[dict]) -> Path:
    with open(path, "w", encoding="utf-8") as f:
        for r in records:
            f.write(json.dumps(r) + "\n")
    return path


SMALL_RECORDS = [
    {"id": "d1", "source": "Alpha", "time": 1961, "text": "The cat sat on the mat. The cat ate."},
    {"id": "d2", "source": "Alpha", "time": "1965-06-01", "text": "A dog sat on the log. The dog ran."},
    {"id": "d3", "source": "Beta", "time": "1972", "text": "The cat and the dog sat together on the mat."},
    {"id": "d4", "source": "Beta", "date": "1979-12-31", "text": "The bird sang. The cat watched the bird."},
]


@pytest.fixture
def small_jsonl(tmp_path) -> Path:
    return write_jsonl(tmp_path / "small.jsonl", SMALL_RECORDS)


@pytest.fixture
def small_ws(tmp_path, small_jsonl) -> Workspace:
    ingest(tmp_path / "ws", [small_jsonl])
    return Workspace(tmp_path / "ws")


LEE_SOURCES = ["Ashford Post", "Bramble Wire", "Cinder Daily"]
# a two-target test over words the Lee corpus has (a tests file's text), for runs on it
LEE_TESTS = """
[tests.power]
targets_x = ["government", "police", "security"]
targets_y = ["palestinian", "israeli", "australian"]
attributes_a = ["against", "after", "before"]
attributes_b = ["new", "first", "last"]
"""


def lee_documents() -> list[str]:
    """gensim's Lee background corpus: 300 news documents, one per line."""
    return gensim_data("lee_background.cor").read_text(encoding="utf-8").splitlines()


@pytest.fixture(scope="session")
def lee_ws(tmp_path_factory) -> Workspace:
    """The Lee corpus, split over three invented sources and given invented years."""
    folder = tmp_path_factory.mktemp("lee")
    records = [{"id": f"lee-{i:03d}", "source": LEE_SOURCES[i % 3], "time": 1990 + i % 20, "text": t}
               for i, t in enumerate(lee_documents()) if t.strip()]
    write_jsonl(folder / "lee.jsonl", records)
    ingest(folder / "ws", [folder / "lee.jsonl"])
    return Workspace(folder / "ws")


DEMO_CORPUS = Path(__file__).resolve().parent.parent / "corpora_demo" / "archive.jsonl.gz"


@pytest.fixture(scope="session")
def demo_ws(tmp_path_factory) -> Workspace:
    folder = tmp_path_factory.mktemp("demo")
    ingest(folder / "ws", [DEMO_CORPUS])
    return Workspace(folder / "ws")


def random_sparse(shape: tuple[int, int], density: float, rng: np.random.Generator, format: str = "csr"):
    """A random sparse array of uniform values (what scipy.sparse.random_array gives, which scipy
    1.11, the lowest declared version, does not have)."""
    n = int(round(density * shape[0] * shape[1]))
    rows, cols = np.divmod(rng.choice(shape[0] * shape[1], n, replace=False), shape[1])
    return sp.coo_array((rng.random(n), (rows, cols)), shape=shape).asformat(format)
