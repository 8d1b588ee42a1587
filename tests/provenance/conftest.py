"""Fixtures of the provenance tests."""

import pytest

from tests.conftest import LEE_SOURCES, lee_documents, write_jsonl
from tracer.corpus.ingest import ingest


@pytest.fixture
def lee_copy(tmp_path):
    """The Lee corpus (three invented sources, invented years) in a workspace of its own, for tests
    that store models into it; returns its folder."""
    records = [{"id": f"n{i}", "source": LEE_SOURCES[i % 3], "time": 1990 + i % 20, "text": t}
               for i, t in enumerate(lee_documents()) if t.strip()]
    ingest(tmp_path / "ws", [write_jsonl(tmp_path / "lee.jsonl", records)])
    return tmp_path / "ws"
