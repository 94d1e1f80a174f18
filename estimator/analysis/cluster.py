"""Dask scale-out for the benchmark (the optional ``cluster`` extra: ``pip install socfuse[cluster]``).

:func:`open_client` gives a ``distributed.Client`` either on a fresh local cluster bound to the
loopback interface (``workers=N``) or on an existing scheduler (``scheduler="tcp://host:8786"``).
Nothing here changes results: the benchmark submits the same pure tasks it runs serially and
puts the results back in submission order.
"""
from __future__ import annotations

import contextlib

__all__ = ["ClusterError", "open_client", "dask_available"]


class ClusterError(ValueError):
    """Dask is missing or the cluster cannot be reached (message says what to do)."""


def dask_available() -> bool:
    """Whether the optional ``distributed`` package (Dask) can be imported.

    Parameters
    ----------
    None

    Returns
    -------
    bool
    """
    try:
        import distributed  # noqa: F401
    except ImportError:
        return False
    return True


def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise ClusterError("parallel runs need dask.distributed: install the cluster extra, "
                           "pip install 'socfuse[cluster]' (or pip install 'dask[distributed]')") from None
    return distributed


@contextlib.contextmanager
def open_client(workers: int | None = None, scheduler: str | None = None, processes: bool = True,
                threads_per_worker: int = 1):
    """Context manager yielding a ``distributed.Client``.

    Parameters
    ----------
    workers : int, optional
        Start a ``distributed.LocalCluster`` with this many workers on 127.0.0.1 (no dashboard).
    scheduler : str, optional
        Address of a running scheduler (``tcp://host:port``); exclusive with ``workers``.
    processes : bool
        Local cluster workers as processes (default) or threads in this process.
    threads_per_worker : int
        Threads in each local worker (1: the kernels are single-threaded numba code).

    Yields
    ------
    distributed.Client
        Closed (with the local cluster) on exit.

    Raises
    ------
    ClusterError
        For both or neither of ``workers`` and ``scheduler``, fewer than one worker, or an
        unreachable scheduler.
    """
    if (workers is None) == (scheduler is None):
        raise ClusterError("give either workers (a local cluster) or a scheduler address, not both or neither")
    distributed = _import_distributed()
    if scheduler is not None:
        try:
            client = distributed.Client(scheduler, timeout="10s")
        except (OSError, TimeoutError) as e:
            raise ClusterError(f"cannot reach the Dask scheduler at {scheduler}: {e}") from None
        try:
            yield client
        finally:
            client.close()
        return
    if int(workers) < 1:
        raise ClusterError(f"--workers must be at least 1, got {workers}")
    # processes talk TCP on the loopback interface only; thread workers use the in-process transport
    net = {"host": "127.0.0.1"} if processes else {}
    cluster = distributed.LocalCluster(n_workers=int(workers), threads_per_worker=int(threads_per_worker),
                                       processes=processes, dashboard_address=None, silence_logs=40, **net)
    client = distributed.Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()
