"""Versions of tracer and the libraries its numbers depend on (recorded with every result)."""

from __future__ import annotations

import importlib
import importlib.metadata
import sys

import numpy as np

from tracer._version import __version__


def _version(name: str) -> str:
    """The installed distribution's version, without importing the package (gensim and scipy.stats
    take a second to import, and ingest records the versions but uses neither); the package's
    ``__version__`` if no distribution metadata is found."""
    try:
        return importlib.metadata.version(name)
    except importlib.metadata.PackageNotFoundError:
        return importlib.import_module(name).__version__


def package_versions() -> dict[str, str]:
    return {"tracer": __version__, "python": sys.version.split()[0], "numpy": np.__version__,
            "scipy": _version("scipy"), "nltk": _version("nltk"), "gensim": _version("gensim"),
            "numba": _version("numba")}
