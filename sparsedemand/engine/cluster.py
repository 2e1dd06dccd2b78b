"""The Dask client the engine runs on, and running one function on every partition.

A local cluster started here listens on 127.0.0.1 only, has no dashboard,
and runs one thread per worker process (kernels are not oversubscribed).
"""

from __future__ import annotations

import contextlib
import logging

from .. import io as _io
from ..errors import InputError
from ..runs import whole_number

__all__ = ["WORKER_ENV", "LOCAL_CLUSTER_OPTIONS", "start_client", "gather", "threads"]

#: Environment of the worker processes of a cluster started here: one thread per kernel.
WORKER_ENV = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1",
              "OPENBLAS_NUM_THREADS": "1"}
#: Options of the local cluster started here: loopback only, no dashboard; the scheduler's own HTTP
#: routes (health, metrics) on a free loopback port rather than the default 8787 another cluster may hold.
LOCAL_CLUSTER_OPTIONS = {"threads_per_worker": 1, "processes": True, "host": "127.0.0.1", "dashboard_address": None,
                         "scheduler_kwargs": {"dashboard_address": "127.0.0.1:0"}, "env": WORKER_ENV}
_QUIET_LOGGERS = ("distributed.shuffle._scheduler_plugin", "distributed.shuffle")


@contextlib.contextmanager
def start_client(scheduler=None, *, n_workers: int = 2):
    """A Dask client: connected to ``scheduler``, or on a local cluster started (and closed) here.

    Parameters
    ----------
    scheduler : str, distributed.Client or None
        Address of a running scheduler (``tcp://host:8786``), or a client
        the caller owns (left open). ``None`` starts a
        ``distributed.LocalCluster`` of ``n_workers`` processes with one
        thread each, on 127.0.0.1 only, with no dashboard, and with
        ``NUMBA_NUM_THREADS=1`` and ``OMP_NUM_THREADS=1`` in the workers.
    n_workers : int, default 2
        Worker processes of the local cluster.

    Examples
    --------
    >>> with start_client(n_workers=2) as client:  # doctest: +SKIP
    ...     client.ncores()
    """
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise InputError("--engine dask needs dask.distributed: pip install 'sparsedemand[dask]'") from None
    # The local scheduler runs in this process: keep its shuffle notices off stderr (a failed
    # partition's error reaches the caller as an InputError, not as a worker log).
    for name in _QUIET_LOGGERS:
        logging.getLogger(name).setLevel(logging.ERROR)
    if isinstance(scheduler, Client):
        yield scheduler
        return
    if scheduler is not None:
        if not isinstance(scheduler, str) or not scheduler.strip():
            raise InputError(f"--scheduler must be an address such as tcp://host:8786, got {scheduler!r}")
        try:
            client = Client(scheduler.strip(), timeout="20s")
        except (OSError, TimeoutError) as exc:
            raise InputError(f"--scheduler {scheduler}: cannot connect ({_io._first_line(exc)})") from None
        try:
            yield client
        finally:
            client.close()
        return
    n = whole_number("--workers", n_workers, minimum=1)
    cluster = LocalCluster(n_workers=n, silence_logs=logging.CRITICAL, **LOCAL_CLUSTER_OPTIONS)
    try:
        client = Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()





def threads(client) -> int:
    return max(1, sum(client.nthreads().values()))

def gather(client, parts, func, *args, indexed: bool = False) -> list:
    """Run ``func(part, *args[, index])`` on every partition; wait for all, then raise the first failure.

    Waiting for every task before raising keeps a failed run from leaving a
    worker still writing into a staging folder that is being removed.
    """
    from distributed import wait

    extra = [list(range(len(parts)))] if indexed else []
    futures = client.map(func, parts, *[[a] * len(parts) for a in args], *extra, pure=False)
    wait(futures)
    for future in futures:
        if future.status == "error":
            exc = future.exception()
            client.cancel(futures)
            if isinstance(exc, InputError):
                raise InputError(str(exc)) from None
            raise exc
    out = client.gather(futures)
    client.cancel(futures)
    return out
