"""The result cache: keyed by the weights actually counted, never a binary key for other weights,
entries written whole, and pruning (other corpus hashes and versions first, then a size limit)."""

import json
import os

import numpy as np
import pytest

from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.corpus.slices import slice_from_spec
from tracer.provenance.cache import ResultCache, open_workspace
from tracer.provenance.counts import count_slice
from tracer.provenance.models import train_embedding

COUNTS = CountSettings(min_count=3)
SVD = PpmiSvdSettings(dim=16)


@pytest.fixture
def cached_lee(lee_ws, tmp_path):
    """The Lee workspace opened with a cache of its own in a temporary folder."""
    ws = open_workspace(lee_ws.path, cache=False)
    ws.cache = ResultCache(tmp_path / "cache")
    return ws


def test_custom_weights_never_get_the_slices_cached_model(cached_lee, lee_ws):
    whole = slice_from_spec(cached_lee, "all")
    full = train_embedding(cached_lee, whole, "ppmi-svd", COUNTS, SVD, save=False)
    dropped = (lee_ws.documents["source"].to_numpy() != "Ashford Post").astype(np.float64)
    with_cache = train_embedding(cached_lee, whole, "ppmi-svd", COUNTS, SVD, weights=dropped, save=False)
    without = train_embedding(lee_ws, whole, "ppmi-svd", COUNTS, SVD, weights=dropped, save=False)
    assert not np.array_equal(with_cache.vectors, full.vectors)
    # the cached path gives what the uncached path computes from the weights themselves
    np.testing.assert_array_equal(with_cache.vectors, without.vectors)


def test_non_binary_weights_are_never_cached(cached_lee, lee_ws):
    n = lee_ws.n_documents
    ones = np.ones(n)
    with pytest.raises(ValueError, match="only slice weights"):
        ResultCache.key("h", np.full(n, 2.0), "counts")
    with pytest.raises(ValueError, match="only slice weights"):
        ResultCache.key("h", np.where(np.arange(n) % 2, 1.0, 0.5), "counts")
    twice = count_slice(cached_lee, 2 * ones, COUNTS)  # a bootstrap-like weight: counted, never stored
    assert list(cached_lee.cache.folder.glob("counts-*")) == []
    once = count_slice(cached_lee, ones, COUNTS)
    assert len(list(cached_lee.cache.folder.glob("counts-*"))) == 1
    # doubling every weight doubles every count (a check from the definition of weighted counts)
    np.testing.assert_allclose(twice.matrix.toarray(), 2 * once.matrix.toarray())
    assert count_slice(cached_lee, 2 * ones, COUNTS).matrix.sum() == pytest.approx(2 * once.matrix.sum())


def test_entries_are_written_whole_and_say_what_made_them(cached_lee):
    count_slice(cached_lee, np.ones(cached_lee.n_documents), COUNTS)
    folder = cached_lee.cache.folder
    entries = [p for p in folder.iterdir()]
    assert len(entries) == 1 and entries[0].name.startswith("counts-")  # no temporary folder left
    entry = json.loads((entries[0] / "entry.json").read_text())
    assert entry["corpus_hash"] == cached_lee.corpus_hash and entry["kind"] == "counts"


def test_prune_removes_other_corpora_and_versions_first_then_the_oldest(cached_lee, tmp_path):
    cache = cached_lee.cache
    w = np.ones(cached_lee.n_documents)
    for min_count in (3, 4, 5):
        count_slice(cached_lee, w, CountSettings(min_count=min_count))
    entries = sorted(cache.folder.glob("counts-*"), key=lambda p: p.stat().st_mtime)
    # one entry of another corpus, one of another version, one abandoned temporary folder
    other = entries[0]
    meta = json.loads((other / "entry.json").read_text())
    (other / "entry.json").write_text(json.dumps({**meta, "corpus_hash": "elsewhere"}))
    old = entries[1]
    (old / "entry.json").write_text(json.dumps({**meta, "versions": "tracer 0.0.1 numpy 1 scipy 1"}))
    abandoned = cache.folder / f".tmp-counts-abc-{2 ** 22 + 4321}-1"
    abandoned.mkdir()
    newest = entries[2]
    removed, freed = cache.prune(cached_lee.corpus_hash, max_bytes=None)
    assert removed == 2 and freed > 0
    assert not other.exists() and not old.exists() and not abandoned.exists() and newest.is_dir()
    # a size limit removes the least recently used entries until the rest fit
    count_slice(cached_lee, w, CountSettings(min_count=6))
    later = [p for p in cache.folder.glob("counts-*") if p != newest][0]
    os.utime(newest, (1, 1))  # used long ago
    size = sum(f.stat().st_size for f in later.rglob("*") if f.is_file())
    assert cache.prune(cached_lee.corpus_hash, max_bytes=size)[0] == 1
    assert not newest.exists() and later.is_dir()


# A writer of one cache entry, run as its own process. Its os.replace (the rename that commits an
# entry) first waits until every writer has reached it, so both processes have checked that the
# entry is missing and written their whole temporary copy before either commits: the interleaving
# that concurrent writers meet by chance, made certain.
WRITER = """
import os, sys, time
from pathlib import Path
import numpy as np, scipy.sparse as sp
from tracer.core.counting import Counts, CountSettings, ModelVocab
from tracer.provenance.cache import ResultCache

folder, me, writers = Path(sys.argv[1]), sys.argv[2], int(sys.argv[3])
real_replace = os.replace

def replace_together(src, dst):
    if Path(dst).name.startswith("counts-"):
        (folder.parent / f"ready-{me}").touch()
        deadline = time.monotonic() + 60
        while len(list(folder.parent.glob("ready-*"))) < writers and time.monotonic() < deadline:
            time.sleep(0.01)
    return real_replace(src, dst)

os.replace = replace_together
matrix = sp.csr_array(np.array([[0.0, 2.0, 1.0], [2.0, 0.0, 0.0], [1.0, 0.0, 4.0]]))
counts = Counts(matrix, ModelVocab(["a", "b", "c"], np.arange(3), np.array([3, 2, 5])), CountSettings(), "all")
cache = ResultCache(folder)
key = ResultCache.key("corpus", np.ones(3), "counts")
cache.put_counts(key, counts, "corpus")
print(key)
"""


def test_two_processes_writing_the_same_entry_both_succeed_and_leave_it_whole(tmp_path):
    import subprocess
    import sys
    folder = tmp_path / "cache"
    procs = [subprocess.Popen([sys.executable, "-c", WRITER, str(folder), str(i), "2"], stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True) for i in range(2)]
    results = [p.communicate(timeout=120) + (p.returncode,) for p in procs]
    for out, err, code in results:
        assert code == 0, err
    assert len(list(tmp_path.glob("ready-*"))) == 2  # both really reached the rename
    key = results[0][0].strip()
    assert [p.name for p in folder.iterdir()] == [f"counts-{key}"]  # one entry, no temporary folder left
    got = ResultCache(folder).get_counts(key)
    expected = np.array([[0.0, 2.0, 1.0], [2.0, 0.0, 0.0], [1.0, 0.0, 4.0]])
    np.testing.assert_array_equal(got.matrix.toarray(), expected)
    assert got.vocab.words == ["a", "b", "c"] and got.vocab.counts.tolist() == [3, 2, 5]


def test_a_stored_model_is_written_under_the_workspace_lock(small_ws, monkeypatch):
    import tracer.provenance.models as models
    from tracer.corpus.lock import holds_lock
    held = []
    real_save = models.save_embedding

    def save(emb, folder):
        held.append(holds_lock(small_ws.path))
        return real_save(emb, folder)

    monkeypatch.setattr(models, "save_embedding", save)
    emb = train_embedding(small_ws, slice_from_spec(small_ws, "all"), "ppmi-svd", CountSettings(min_count=1),
                          PpmiSvdSettings(dim=3))
    assert held == [True] and not holds_lock(small_ws.path)  # held while writing, released after
    stored = models.load_embedding(small_ws, "ppmi-svd", "all")
    np.testing.assert_array_equal(stored.vectors, emb.vectors)
