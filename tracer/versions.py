"""Versions of tracer and the libraries its numbers depend on (recorded with every result)."""

from __future__ import annotations

import sys

import numpy as np

from tracer._version import __version__


def package_versions() -> dict[str, str]:
    import gensim
    import nltk
    import numba
    import scipy
    return {"tracer": __version__, "python": sys.version.split()[0], "numpy": np.__version__,
            "scipy": scipy.__version__, "nltk": nltk.__version__, "gensim": gensim.__version__,
            "numba": numba.__version__}
