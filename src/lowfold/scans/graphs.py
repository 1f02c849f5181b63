"""The distinct cluster graphs of a linked-cluster sum on Dask, the seam the scans use.

An infinite lattice's ``derive`` and ``series`` (:mod:`lowfold.jobs.lattice`) compute one
effective Hamiltonian per distinct cluster graph; the graphs are independent calculations,
handed over as one list to a *graph map* ``graph_map(function, graphs) -> list``.  Here are
the graph maps that send them to a Dask cluster:

- :func:`client_graph_map`: through a ``distributed.Client`` (Python users, tests);
- :func:`scheduler_graph_map`: connect to a running scheduler by address or scheduler file
  (``lowfold derive --scheduler``), as ``lowfold scan --scheduler`` does;
- :func:`worker_graph_map`: from inside a Dask task (a scan point), through the worker's
  own client: the graphs of one point spread over the scan's cluster.

Each graph runs as a task with one thread for numba/BLAS (:func:`limit_threads`); a lowfold
error raised by a graph is raised again here, with its type.
"""

from __future__ import annotations

from collections.abc import Callable
from contextlib import contextmanager

from lowfold.errors import ModelError
from lowfold.scans.cluster import limit_threads

__all__ = ["client_graph_map", "scheduler_graph_map", "worker_graph_map", "on_dask_worker"]


def _solve_graph(function: Callable, graph):
    """One graph on a worker."""
    limit_threads()
    return function(graph)


def client_graph_map(client) -> Callable:
    """A graph map that computes the graphs as tasks of ``client`` (biggest first: the
    linked-cluster sum lists them so), and returns their results in order."""

    def graph_map(function: Callable, graphs: list) -> list:
        graphs = list(graphs)
        if len(graphs) < 2:
            return [function(graph) for graph in graphs]
        futures = [client.submit(_solve_graph, function, graph, pure=False,
                                 priority=len(graphs) - rank)
                   for rank, graph in enumerate(graphs)]
        try:
            return client.gather(futures)
        finally:
            client.cancel(futures)
    return graph_map


@contextmanager
def scheduler_graph_map(scheduler: str, *, timeout: str = "20s"):
    """A graph map on the Dask scheduler at ``scheduler`` (``tcp://host:8786``, or the
    ``*.json`` scheduler file of ``dask scheduler --scheduler-file``), connected for the
    duration of the ``with`` block; a :class:`~lowfold.errors.ModelError` if it cannot be
    reached."""
    from distributed import Client

    target = ({"scheduler_file": scheduler} if str(scheduler).endswith(".json")
              else {"address": scheduler})
    try:
        client = Client(**target, timeout=timeout)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ModelError(f"cannot connect to the Dask scheduler {scheduler!r}: "
                         f"{str(exc) or type(exc).__name__}") from None
    with client:
        yield client_graph_map(client)


def on_dask_worker() -> bool:
    """Whether this code runs inside a task on a Dask worker."""
    import sys

    if "distributed" not in sys.modules:
        return False
    from distributed import get_worker

    try:
        get_worker()
    except ValueError:
        return False
    return True


def worker_graph_map(function: Callable, graphs: list) -> list:
    """The graph map of a task on a Dask worker: the task leaves the worker's thread pool
    while the graphs run as tasks of the same cluster (``distributed.worker_client``)."""
    from distributed import worker_client

    with worker_client() as client:
        return client_graph_map(client)(function, graphs)
