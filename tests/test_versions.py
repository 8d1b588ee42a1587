"""The recorded versions are those the packages themselves report."""

import sys

import gensim
import nltk
import numba
import numpy
import scipy

from tracer._version import __version__
from tracer.versions import package_versions


def test_versions_are_the_packages_own():
    # package_versions reads the installed distributions' metadata instead of importing them;
    # the reference is each imported package's __version__
    v = package_versions()
    assert v == {"tracer": __version__, "python": sys.version.split()[0], "numpy": numpy.__version__,
                 "scipy": scipy.__version__, "nltk": nltk.__version__, "gensim": gensim.__version__,
                 "numba": numba.__version__}
