"""tracer pmi's table from the probe's windows must equal the table from the full count."""

import numpy as np
import pytest

from tracer.analysis import pmi_table as pmi_table_module
from tracer.analysis.pmi_table import pmi_table
from tracer.core.counting import CountSettings
from tracer.corpus.slices import slice_from_spec, slices_by
from tracer.provenance.cache import open_workspace
from tracer.provenance.counts import count_slice

CONTEXTS = ["said", "fire", "the", "minister", "police"]


def table_from_full_counts(ws, word, contexts, slices, settings, alpha):
    """The table the old path made: every pair counted, then PMI written out with numpy.
    The counter is itself checked against NLTK's windowed bigram counts on this corpus
    (tests/core/test_counting.py); the formula is tracer.core.pmi's docstring, typed again."""
    out = []
    for sl in slices:
        c = count_slice(ws, sl.weights, settings, slice_name=sl.name)
        rows = np.asarray(c.matrix.sum(axis=1)).ravel()
        cols = np.asarray(c.matrix.sum(axis=0)).ravel()
        z = np.sum(cols[cols > 0] ** alpha)
        for ctx in contexts:
            if word not in c.vocab.index or ctx not in c.vocab.index:
                out.append((sl.name, ctx, 0.0, np.nan, np.nan, np.nan))
                continue
            i, j = c.vocab.index[word], c.vocab.index[ctx]
            n = c.matrix[i, j]
            p = np.log(n) - np.log(rows[i]) - alpha * np.log(cols[j]) + np.log(z) if n > 0 else np.nan
            out.append((sl.name, ctx, n, rows[i], cols[j], p))
    return out


@pytest.mark.parametrize("settings,alpha", [(CountSettings(), 0.75),
                                            (CountSettings(window=2, weighting="harmonic", min_count=3), 1.0),
                                            (CountSettings(window=4, weighting="linear", max_vocab=800), 0.5)])
def test_the_table_equals_the_one_from_the_full_count(lee_ws, settings, alpha):
    slices = [slice_from_spec(lee_ws, "all")] + slices_by(lee_ws, "source") + slices_by(lee_ws, "time:10y")
    got = pmi_table(lee_ws, "police", CONTEXTS, slices, settings, alpha=alpha)
    want = table_from_full_counts(lee_ws, "police", CONTEXTS, slices, settings, alpha)
    assert list(zip(got["slice"], got["context"])) == [(s, c) for s, c, *_ in want]
    for column, k in (("count", 2), ("word_count", 3), ("context_count", 4), ("pmi", 5)):
        np.testing.assert_allclose(got[column].to_numpy(float), [w[k] for w in want], rtol=1e-12, atol=1e-12,
                                   err_msg=column)


def test_a_slice_whose_counts_are_cached_is_read_not_recounted(lee_ws, tmp_path, monkeypatch):
    """With the slice's counts in the cache (as tracer run leaves them) the table comes from
    them, and equals the one from the probe's windows."""
    settings = CountSettings()
    slices = slices_by(lee_ws, "source")
    fresh = pmi_table(lee_ws, "police", CONTEXTS, slices, settings)
    ws = open_workspace(lee_ws.path, cache=True)
    ws.cache.folder = tmp_path / "cache"
    for sl in slices:
        count_slice(ws, sl.weights, settings, slice_name=sl.name)
    hits = ws.cache.hits

    def no_windows(*a, **k):
        raise AssertionError("the cached counts should have been used")

    monkeypatch.setattr(pmi_table_module, "probe_rows", no_windows)
    cached = pmi_table(ws, "police", CONTEXTS, slices, settings)
    assert ws.cache.hits == hits + len(slices)
    np.testing.assert_allclose(cached[["count", "word_count", "context_count", "pmi", "ppmi"]].to_numpy(float),
                               fresh[["count", "word_count", "context_count", "pmi", "ppmi"]].to_numpy(float),
                               rtol=1e-12)
