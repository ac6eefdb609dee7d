"""Where the strata of a study run: a Dask cluster, local or given by its scheduler's address.

With no address, :func:`connect` starts a local cluster of worker *processes* (Dask's
``distributed.LocalCluster``, one thread each) sized so that the workers times the cores
one fit uses stay within the machine's cores (:func:`local_workers`): one fit runs its
chains one after the other on one core unless the study's ``[sampler] cores`` says more.
With an address (``--scheduler tcp://HOST:PORT``, or ``scheduler`` in ``[cluster]``), it
connects to a cluster started with Dask's own commands::

    dask scheduler --port 8786
    dask worker tcp://HOST:8786 --nworkers 4 --nthreads 1

whose workers can import bayeszi (and so PyMC) in the same versions as the client. An
address that cannot be reached, or a scheduler with no workers, is a
:class:`~bayeszi.base.errors.BayesziError` that says so, before anything is written.

Example
-------
>>> local_workers(cores_per_fit=1, cores=8)
8
>>> local_workers(cores_per_fit=2, cores=8)
4
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Callable, Iterator
from typing import Any

from bayeszi.base.errors import BayesziError

#: seconds to wait for a scheduler to answer, and for a cluster to have a worker
CONNECT_SECONDS = 15
WORKER_SECONDS = 60


def machine_cores() -> int:
    """The cores this process may use (its CPU affinity where the system tells it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def local_workers(cores_per_fit: int, workers: int | None = None, cores: int | None = None
                  ) -> int:
    """The size of a local cluster: ``workers`` when given, else as many workers as fit in
    the machine's cores with ``cores_per_fit`` cores each (at least one)."""
    if workers is not None:
        return max(1, int(workers))
    return max(1, (cores or machine_cores()) // max(1, cores_per_fit))


def _remote(address: str) -> Any:
    from distributed import Client

    try:
        client = Client(address, timeout=f"{CONNECT_SECONDS}s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as err:
        first = " ".join(str(err).split())[:200] or type(err).__name__
        raise BayesziError(
            f"cannot reach the Dask scheduler at {address!r} ({first}); start one with "
            "'dask scheduler' and its workers with 'dask worker ADDRESS', check the address "
            "(e.g. tcp://10.0.0.5:8786), or leave out --scheduler to run on a local cluster"
        ) from None
    try:
        client.wait_for_workers(1, timeout=WORKER_SECONDS)
    except (OSError, TimeoutError) as err:
        client.close()
        raise BayesziError(f"the Dask scheduler at {address!r} has no workers after "
                           f"{WORKER_SECONDS} s ({type(err).__name__}); start some with "
                           f"'dask worker {address} --nthreads 1'") from None
    return client


def _local(n_workers: int, cores_per_fit: int) -> tuple[Any, Any]:
    import dask
    from distributed import Client, LocalCluster

    # PyMC runs parallel chains in child processes, which daemonic workers may not have
    settings = {"distributed.worker.daemon": cores_per_fit <= 1}
    with dask.config.set(settings):
        # no dashboard; the scheduler's small HTTP server on a free port of 127.0.0.1 (its
        # default, 8787 on every interface, clashes with any other Dask on the machine)
        cluster = LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None,
                               scheduler_kwargs={"dashboard": False,
                                                 "dashboard_address": "127.0.0.1:0"},
                               silence_logs=logging.ERROR)
    try:
        client = Client(cluster, set_as_default=False)
    except BaseException:
        cluster.close()
        raise
    return cluster, client


@contextlib.contextmanager
def connect(scheduler: str | None = None, workers: int | None = None, cores_per_fit: int = 1,
            say: Callable[[str], None] = lambda _: None) -> Iterator[Any]:
    """A Dask ``Client``: of the scheduler at ``scheduler``, or of a new local cluster.

    The local cluster (and the client) are closed when the block ends, however it ends.

    Example
    -------
    >>> with connect(workers=1) as client:                            # doctest: +SKIP
    ...     client.submit(sum, [1, 2]).result()
    3
    """
    cluster = None
    if scheduler:
        client = _remote(scheduler)
        n = len(client.scheduler_info().get("workers", {}))
        say(f"connected to the Dask scheduler at {scheduler} ({n} worker(s))")
    else:
        n = local_workers(cores_per_fit, workers)
        cluster, client = _local(n, cores_per_fit)
        say(f"started a local Dask cluster: {n} worker process(es) x {cores_per_fit} "
            f"core(s) per fit, {machine_cores()} core(s) on this machine")
    try:
        yield client
    finally:
        with contextlib.suppress(Exception):
            client.close()
        if cluster is not None:
            with contextlib.suppress(Exception):
                cluster.close()


__all__ = ["CONNECT_SECONDS", "WORKER_SECONDS", "connect", "local_workers", "machine_cores"]
