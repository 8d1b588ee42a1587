"""The ``tracer`` command: parse options, call the library, print. No analysis here.

This package is the only one that imports click. ``group`` holds the command group and the one
place where errors and warnings become lines for the user, ``options`` the option groups shared
by the commands, ``output`` rules live in :mod:`tracer.app.output`; each ``*_command(s)`` module
registers its commands on the group when imported below. Library modules are imported inside
the command functions, for start-up time only: ``tracer --help`` and option errors need neither
numpy, pandas, numba nor gensim.
"""

from tracer.app.cli import (corpus_commands, drift_command, measure_commands, model_commands,  # noqa: F401
                            run_commands, trace_command)
from tracer.app.cli.group import cli, main

__all__ = ["cli", "main"]
