"""Slices of a corpus: each one is a weight vector over documents (1 inside, 0 outside).

Specifications:

- grouping (``--by``): ``source``, ``year``, or ``time:Ny`` (bins of N years
  aligned on multiples of N, so ``time:10y`` gives decades ``1960..1969``);
- one slice (``--slice``): ``all``, ``source=NAME``, ``time=1960..1979``
  (years, both ends included), ``time=1965`` or ``year=1965``.

Documents without a time belong to no time slice.
"""

from __future__ import annotations

import dataclasses
import re

import numpy as np

from tracer.errors import SliceError
from tracer.corpus.workspace import Workspace

_TIME_BY = re.compile(r"^time:(\d+)y$")
_RANGE = re.compile(r"^(-?\d+)(?:\.\.(-?\d+))?$")


@dataclasses.dataclass(frozen=True)
class Slice:
    """A named weight vector over the documents of a workspace.

    Attributes
    ----------
    name : str
        ``all``, ``source=NAME`` or ``time=A..B``.
    weights : numpy.ndarray of float64, shape (n_documents,)
    """

    name: str
    weights: np.ndarray
    n_documents: int
    n_tokens: int

    @classmethod
    def from_mask(cls, name: str, mask: np.ndarray, ws: Workspace) -> "Slice":
        weights = mask.astype(np.float64)
        return cls(name, weights, int(mask.sum()), int(ws.documents["n_tokens"].to_numpy()[mask].sum()))


def _years(ws: Workspace) -> np.ndarray:
    y = ws.documents["year"]
    return y.to_numpy(dtype="float64", na_value=np.nan)


def _time_name(lo: int, hi: int) -> str:
    return f"time={lo}" if lo == hi else f"time={lo}..{hi}"


def slices_by(ws: Workspace, by: str) -> list[Slice]:
    """All slices of one grouping, in order (sources by name, periods by time)."""
    docs = ws.documents
    if by == "source":
        src = docs["source"].to_numpy()
        return [Slice.from_mask(f"source={s}", src == s, ws) for s in sorted(set(src))]
    if by == "year":
        width = 1
    else:
        m = _TIME_BY.match(by)
        if not m or int(m.group(1)) < 1:
            raise SliceError(f"cannot read the grouping {by!r}; use source, year or time:Ny (e.g. time:10y)")
        width = int(m.group(1))
    years = _years(ws)
    known = ~np.isnan(years)
    if not known.any():
        raise SliceError(f"--by {by}: no document has a time; ingest with a time or date field")
    bins = np.full(len(years), np.nan)
    bins[known] = np.floor(years[known] / width) * width
    return [Slice.from_mask(_time_name(int(b), int(b) + width - 1), bins == b, ws)
            for b in np.unique(bins[known])]


def slice_from_spec(ws: Workspace, spec: str) -> Slice:
    """One slice from ``all``, ``source=NAME``, ``time=A..B``, ``time=A`` or ``year=A``."""
    spec = spec.strip()
    if spec == "all":
        return Slice.from_mask("all", np.ones(ws.n_documents, dtype=bool), ws)
    key, sep, value = spec.partition("=")
    if not sep:
        raise SliceError(f"cannot read the slice {spec!r}; use all, source=NAME or time=1960..1979")
    if key == "source":
        src = ws.documents["source"].to_numpy()
        mask = src == value
        if not mask.any():
            names = sorted(set(src))
            shown = ", ".join(names[:20]) + (" ..." if len(names) > 20 else "")
            raise SliceError(f"slice {spec} has no documents; the sources are: {shown}")
        return Slice.from_mask(spec, mask, ws)
    if key in ("time", "year"):
        m = _RANGE.match(value)
        if not m:
            raise SliceError(f"cannot read the years in slice {spec!r}; write time=1960..1979 or time=1965")
        lo = int(m.group(1))
        hi = int(m.group(2)) if m.group(2) is not None else lo
        if hi < lo:
            raise SliceError(f"slice {spec}: the range ends before it starts")
        years = _years(ws)
        mask = (years >= lo) & (years <= hi)
        if not mask.any():
            known = years[~np.isnan(years)]
            span = f"{int(known.min())}..{int(known.max())}" if len(known) else "no times at all"
            raise SliceError(f"slice {spec} has no documents; the corpus spans {span}")
        return Slice.from_mask(_time_name(lo, hi), mask, ws)
    raise SliceError(f"cannot read the slice {spec!r}; the keys are source and time")


def resolve_slices(ws: Workspace, by: list[str] | tuple[str, ...] = (),
                   picks: list[str] | tuple[str, ...] = ()) -> list[Slice]:
    """The slices a command works on: every ``--slice`` and every group of every ``--by``.

    With neither, the whole corpus (``all``).
    """
    out = [slice_from_spec(ws, p) for p in picks]
    for b in by:
        out.extend(slices_by(ws, b))
    if not out:
        out = [slice_from_spec(ws, "all")]
    seen, unique = set(), []
    for s in out:
        if s.name not in seen:
            seen.add(s.name)
            unique.append(s)
    return unique
