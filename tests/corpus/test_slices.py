import numpy as np
import pytest

from tracer.corpus.slices import resolve_slices, slice_from_spec, slices_by
from tracer.errors import SliceError


def test_groupings(small_ws):
    by_source = slices_by(small_ws, "source")
    assert [s.name for s in by_source] == ["source=Alpha", "source=Beta"]
    assert [list(s.weights) for s in by_source] == [[1, 1, 0, 0], [0, 0, 1, 1]]
    decades = slices_by(small_ws, "time:10y")
    assert [(s.name, s.n_documents) for s in decades] == [("time=1960..1969", 2), ("time=1970..1979", 2)]
    assert [s.name for s in slices_by(small_ws, "year")] == ["time=1961", "time=1965", "time=1972", "time=1979"]
    assert [s.name for s in slices_by(small_ws, "time:20y")] == ["time=1960..1979"]


def test_single_slices(small_ws):
    assert slice_from_spec(small_ws, "all").n_documents == 4
    s = slice_from_spec(small_ws, "time=1962..1972")
    assert list(s.weights) == [0, 1, 1, 0] and s.n_tokens == int(small_ws.documents["n_tokens"][1:3].sum())
    assert slice_from_spec(small_ws, "year=1979").name == "time=1979"
    assert np.array_equal(slice_from_spec(small_ws, "source=Beta").weights, [0, 0, 1, 1])


def test_resolve_combines_and_defaults_to_all(small_ws):
    assert [s.name for s in resolve_slices(small_ws)] == ["all"]
    names = [s.name for s in resolve_slices(small_ws, ["source"], ["all", "source=Alpha"])]
    assert names == ["all", "source=Alpha", "source=Beta"]


@pytest.mark.parametrize("spec, message", [
    ("source=Gamma", "slice source=Gamma has no documents; the sources are: Alpha, Beta"),
    ("time=1900..1910", r"slice time=1900..1910 has no documents; the corpus spans 1961..1979"),
    ("time=1970..1960", "the range ends before it starts"),
    ("time=sixties", "cannot read the years"),
    ("colour=red", "the keys are source and time"),
    ("everything", "cannot read the slice 'everything'"),
])
def test_bad_slices(small_ws, spec, message):
    with pytest.raises(SliceError, match=message):
        slice_from_spec(small_ws, spec)


def test_bad_grouping(small_ws):
    with pytest.raises(SliceError, match="use source, year or time:Ny"):
        slices_by(small_ws, "decade")
