"""Counting on a dask.distributed cluster: counts add over documents, so partitions of the
documents are counted as separate tasks and summed on the workers.

Every worker opens the workspace by its path (memory-mapped, read only), so the path must
name the same folder on every machine of the cluster (a shared file system), as it does on
a :class:`distributed.LocalCluster`. Connect with ``scheduler="tcp://HOST:8786"`` (an
existing cluster's address) or pass a ``distributed.Client``. Needs the ``dask`` extra:
``pip install 'corpus-tracer[dask]'``.

With whole-number document weights (slices, bootstrap counts) the result equals the local
count bit for bit: every cell is a sum of whole numbers, exact in float64 in any order.
Other weights agree to rounding.

Other independent tasks (bootstrap replicates and verification retrains, PPMI-SVD or word2vec) go to the same
cluster through :class:`ClusterTasks`, the cluster's :class:`tracer.core.replicate_pool.Tasks`;
:func:`tasks_for` picks it for a workspace opened with a scheduler and the local replicate pool
otherwise. Each task runs the same function on the same inputs as the local path, made by the
caller, so the results are the same bit for bit where BLAS runs on one thread on both sides: the
SVD sets that itself on its default products (:func:`tracer.core.ppmi_svd.blas_threads_for`; a
spawned process with ``OPENBLAS_NUM_THREADS=1`` gave the same vectors at 28,924 words), and a
worker started by ``dask worker`` (or a ``LocalCluster`` with processes) runs one BLAS thread, its
nanny setting ``OPENBLAS_NUM_THREADS=1`` and the like, while this process uses the library's own
number elsewhere, so code outside the SVD may agree to rounding only. The cluster's own failures
(no scheduler at the address, a worker lost, workers without the package or the workspace) are
raised as one :class:`tracer.errors.ClusterError`.
"""

from __future__ import annotations

import contextlib
import operator
from pathlib import Path
from typing import Callable, Iterable

import numpy as np
import scipy.sparse as sp

from tracer.core.count_engine import split_by_tokens
from tracer.core.counting import CountSettings, ModelVocab, build_vocab, count_matrix
from tracer.core.replicate_pool import LocalTasks, Tasks, workers_for
from tracer.errors import ClusterError, SettingError, TracerError, WorkspaceNotFound


def _client(scheduler):
    try:
        from distributed import Client
    except ImportError:
        raise SettingError("counting on a cluster needs dask.distributed: "
                           "pip install 'corpus-tracer[dask]'") from None
    if isinstance(scheduler, Client):
        return scheduler, False
    why = _address_problem(str(scheduler))
    if why is None:
        try:
            # not the process's default client: a library user's own client stays theirs
            return Client(scheduler, set_as_default=False), True
        except (OSError, ValueError) as e:  # nothing answers there (OSError), not an address (ValueError)
            why = str(e)
    raise ClusterError(f"cannot connect to the dask scheduler {scheduler}: {why} "
                       "(check --scheduler or [compute] scheduler)")


def _address_problem(address: str) -> str | None:
    """What is wrong with a scheduler address, or None when it has a known scheme (``tcp`` when
    none is given) and, for the network schemes, a host and a port number.

    Checked before a Client is made, because a Client that fails on a malformed address is left
    half-made (status "connecting"): the garbage collector closes it later, at any allocation,
    and when that falls inside another Client's start the two wait forever for distributed's one
    event-loop lock (seen as a hung test). A Client that finds nothing at a well-formed address
    closes itself.
    """
    from distributed.comm.addressing import parse_address
    from distributed.comm.registry import backends
    try:
        scheme, location = parse_address(address)
    except ValueError as e:
        return str(e)
    if scheme not in backends:
        return f"unknown address scheme {scheme!r} (known: {', '.join(sorted(backends))})"
    if scheme in ("tcp", "tls", "ws", "wss"):
        host, _, port = location.rpartition(":")
        if not host or not port.isdigit() or not 0 < int(port) < 65536:
            return f"a {scheme} address is {scheme}://HOST:PORT, e.g. {scheme}://10.0.0.5:8786"
    return None


def _cluster_failure(e: BaseException, scheduler) -> ClusterError | None:
    """``e`` as a :class:`ClusterError` when it is the cluster's own failure rather than a task's:
    a connection lost, a worker lost, workers without the package or the workspace's files."""
    from distributed import KilledWorker
    where = f"the dask scheduler {scheduler}" if isinstance(scheduler, str) else "the dask client's scheduler"
    if isinstance(e, KilledWorker):
        return ClusterError(f"a worker of {where} died while running a task ({e}); "
                            "check the workers' memory and logs, then run again")
    if isinstance(e, ImportError) and (e.name or "").split(".")[0] == "tracer":
        return ClusterError(f"the workers of {where} cannot import tracer ({e}); "
                            "install corpus-tracer, this version, where the workers run")
    if isinstance(e, OSError):  # the connection lost (CommClosedError), or a worker's files
        return ClusterError(f"running on {where} failed: {e}; the workers must reach the scheduler and "
                            "see the workspace at the same path")
    return None


@contextlib.contextmanager
def _cluster_errors(scheduler):
    """Raise the cluster's own failures inside as one :class:`ClusterError` (see
    :func:`_cluster_failure`); a task's named error, or a bug in it, passes as it is."""
    try:
        yield
    except TracerError:
        raise
    except Exception as e:
        named = _cluster_failure(e, scheduler)
        if named is None:
            raise
        raise named from e


class ClusterTasks:
    """:class:`tracer.core.replicate_pool.Tasks` on a dask.distributed cluster.

    Parameters
    ----------
    scheduler : str or distributed.Client
        The scheduler's address (a client is opened per ``submit`` and closed when its results
        are in) or a connected client (left open).

    Each item is sent to a worker on its own (``scatter``, round robin over the workers) and
    ``fn`` runs there on it; ``fn`` and the results must be picklable, and ``fn`` importable on
    the workers (a module-level function or a ``functools.partial`` of one, as for the local pool).
    The items are consumed as they come, so a generator can make the next one while the cluster
    works on those before.
    """

    def __init__(self, scheduler):
        self.scheduler = scheduler

    def submit(self, fn: Callable, items: Iterable) -> Callable[[], list]:
        client, owned = _client(self.scheduler)
        try:
            with _cluster_errors(self.scheduler):
                # each item scattered whole (a tuple or list would be scattered element by element)
                futures = [client.submit(fn, client.scatter([item], hash=False)[0], pure=False) for item in items]
        except BaseException:
            if owned:
                client.close()
            raise

        def results() -> list:
            try:
                with _cluster_errors(self.scheduler):
                    return client.gather(futures)  # in the order of the futures; a task's error is raised here
            finally:
                if owned:
                    client.close()
        return results


def tasks_for(ws, per_task_bytes: int, n_tasks: int) -> Tasks:
    """Where to run ``n_tasks`` independent tasks for ``ws``: its scheduler's cluster when it was
    opened with one (``ws.scheduler``), else the local replicate pool with as many workers as the
    memory allows for tasks of ``per_task_bytes`` at their peak (:func:`workers_for`)."""
    scheduler = getattr(ws, "scheduler", None)
    if scheduler:
        return ClusterTasks(scheduler)
    return LocalTasks(workers_for(per_task_bytes, n_tasks))


def task_workspace(path: str):
    """The workspace at ``path``, opened by a task (on a worker, the same folder as the caller's: a
    shared file system); a worker that does not see it says so."""
    from tracer.corpus.workspace import Workspace
    try:
        return Workspace(path)
    except WorkspaceNotFound as e:
        raise ClusterError(f"a task cannot open the workspace {path} ({e}); the workers must see it "
                           "at the same path as this machine") from None


def _count_part(ws_path: str, weights: np.ndarray, docs: np.ndarray, vocab: ModelVocab,
                settings: CountSettings) -> sp.csr_array:
    """One task: the count of ``docs`` (their weights kept, every other document 0)."""
    ws = task_workspace(ws_path)
    part = np.zeros_like(weights)
    part[docs] = weights[docs]
    return count_matrix(ws.tokens, ws.doc_offsets, part, vocab, len(ws.vocab), settings, workers=1)


def _tree_sum(client, futures):
    """Sum futures pairwise on the workers, so only the total travels to the client."""
    while len(futures) > 1:
        paired = [client.submit(operator.add, a, b, pure=False) for a, b in zip(futures[0::2], futures[1::2])]
        futures = paired + ([futures[-1]] if len(futures) % 2 else [])
    return futures[0].result()


def count_on_cluster(ws, weights: np.ndarray, settings: CountSettings, *, scheduler,
                     vocab: ModelVocab | None = None, partition_tokens: int = 5_000_000) -> tuple[sp.csr_array, ModelVocab]:
    """The co-occurrence matrix of ``ws`` under ``weights``, counted by document partitions on a cluster.

    Parameters
    ----------
    ws : Workspace
    weights : numpy.ndarray, shape (n_documents,)
    settings : CountSettings
    scheduler : str or distributed.Client
        The scheduler's address, or a connected client (left open).
    vocab : ModelVocab, optional
        Built from the documents of nonzero weight when not given (on the client: one
        ``bincount`` over the tokens).
    partition_tokens : int
        About this many tokens per task.

    Returns
    -------
    (scipy.sparse.csr_array of float64, shape (len(vocab), len(vocab)), ModelVocab)
    """
    weights = np.asarray(weights, dtype=np.float64)
    if vocab is None:
        vocab = build_vocab(ws.tokens, ws.doc_offsets, weights, ws.vocab.words, settings)
    docs = np.flatnonzero(weights > 0)
    n = len(vocab)
    if len(docs) == 0:
        return sp.csr_array((n, n), dtype=np.float64), vocab
    parts = split_by_tokens(ws.doc_offsets, docs, partition_tokens)
    client, owned = _client(scheduler)
    try:
        with _cluster_errors(scheduler):
            path = str(Path(ws.path).resolve())
            w_future, v_future = client.scatter([weights, vocab], broadcast=True)
            futures = [client.submit(_count_part, path, w_future, part, v_future, settings, pure=False)
                       for part in parts]
            total = _tree_sum(client, futures)
    finally:
        if owned:
            client.close()
    total = sp.csr_array(total)
    total.sort_indices()
    return total, vocab
