"""Named errors raised by the library.

Every error a user can cause by their input or their options derives from
:class:`TracerError`; the command line turns it into one line, ``Error: ...``,
and exit code 1. Messages say what was wrong and how to fix it.
"""

from __future__ import annotations


class TracerError(Exception):
    """Base class of every error a user can meet."""


class InputError(TracerError):
    """A corpus file that cannot be read, or a record that cannot be used."""


class WorkspaceNotFound(TracerError):
    """The workspace folder does not exist or holds no corpus."""


class WorkspaceError(TracerError):
    """The workspace exists but does not fit the request (settings differ, damaged files)."""


class WordNotInVocabulary(TracerError):
    """A probe word is not in the vocabulary of the model or slice asked about."""


class SliceError(TracerError):
    """A slice specification that cannot be parsed, or a slice with no documents."""


class ModelNotFound(TracerError):
    """No trained model matches the request."""


class SettingError(TracerError):
    """An option or setting with a value outside what it accepts."""


class WorkspaceBusy(WorkspaceError):
    """Another process holds the workspace's write lock."""


class GoalNotReached(TracerError):
    """A plan did not reach its goal (raised by the command line only when the goal is required)."""


class NotEnoughMemory(TracerError):
    """A step's estimated peak memory is more than the memory available (tracer.core.memory)."""


class ClusterError(TracerError):
    """The dask.distributed cluster asked for (``--scheduler``, ``[compute] scheduler``) cannot be
    reached, lost a worker, or has workers that cannot run the package's tasks."""
