"""corpus-tracer: trace associations in word embeddings back to the corpus that made them.

``import tracer`` gives the Python API of :mod:`tracer.app.api` (``tracer.measure``,
``tracer.trace``, ...). It is loaded on first use, so that importing the package (and the
``tracer`` command's start-up) does not load numpy, pandas, numba and gensim.
"""

from tracer._version import __version__

API = ("open_workspace", "ingest", "measure", "trace", "drift", "ablate", "plan", "correlate", "pmi", "neighbours")
__all__ = ["__version__", *API]


def __getattr__(name: str):
    if name in API:
        from tracer.app import api
        return getattr(api, name)
    raise AttributeError(f"module 'tracer' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(API))
