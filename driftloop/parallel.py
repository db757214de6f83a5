"""Running drifters in parallel with Dask, results in input order.

:func:`ordered_map` applies a function to a stream of items and yields the
results in the order of the items, whatever order the workers finish in:

- ``workers=1`` and no scheduler: in this process, one item after the
  other; Dask is not imported;
- ``workers=N``: a :class:`dask.distributed.LocalCluster` of N single-thread
  worker processes on 127.0.0.1, started for the run and closed after it;
- ``scheduler=ADDRESS``: the work goes to a running ``dask.distributed``
  cluster (``dask scheduler`` and ``dask worker ADDRESS``), whose workers
  must have driftloop installed.

At most a few items per worker thread are in flight at once, so the items
(the rows of a batch of drifters) are read from disk as the workers need
them and memory stays bounded.  The result of each item depends on the item
alone, so a parallel run writes the same bytes as a serial one (the
streaming run writes the results in item order).
"""

from __future__ import annotations

import contextlib
import logging
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from typing import Any

from driftloop.errors import InputError

__all__ = ["IN_FLIGHT_PER_THREAD", "Executor", "executor", "ordered_map"]

#: Items submitted ahead per worker thread.
IN_FLIGHT_PER_THREAD = 3


class Executor:
    """Runs functions on items, in this process or on a Dask client, results in order."""

    def __init__(self, client: Any = None) -> None:
        self.client = client
        #: Worker threads (1 in this process).
        self.threads = 1 if client is None else max(1, sum(client.nthreads().values()))
        self._warming: list = []

    def warm_up(self, func: Callable[..., Any], *args: Any) -> None:
        """Run ``func(*args)`` once on every worker, without waiting for it.

        Parameters
        ----------
        func : callable
            A module-level function.
        *args
            Its arguments.
        """
        if self.client is None:
            return
        for address in self.client.scheduler_info()["workers"]:
            self._warming.append(self.client.submit(func, *args, workers=[address],
                                                    pure=False, allow_other_workers=False))

    def map(self, func: Callable[..., Any], items: Iterable[Any], args: tuple = ()
            ) -> Iterator[Any]:
        """Yield ``func(item, *args)`` for each item, in item order.

        Parameters
        ----------
        func : callable
            A module-level function (workers import it by name).
        items : iterable
            The items; consumed lazily, a few per worker thread ahead.
        args : tuple
            Further arguments, the same for every item (sent once).

        Yields
        ------
        object
            The results, in item order.
        """
        if self.client is None:
            for item in items:
                yield func(item, *args)
            return
        client = self.client
        threads = max(1, sum(client.nthreads().values()))
        limit = IN_FLIGHT_PER_THREAD * threads
        pending: deque = deque()
        shared = client.scatter(list(args), broadcast=True) if args else []
        try:
            for item in items:
                pending.append(client.submit(func, item, *shared, pure=False))
                if len(pending) >= limit:
                    yield pending.popleft().result()
            while pending:
                yield pending.popleft().result()
        finally:
            for future in pending:
                future.cancel()


@contextlib.contextmanager
def executor(workers: int = 1, scheduler: str | None = None) -> Iterator[Executor]:
    """Give an :class:`Executor` for the run, starting and stopping a local cluster if asked.

    Parameters
    ----------
    workers : int
        Worker processes on this machine (1: run in this process, no Dask).
    scheduler : str, optional
        Address of a running Dask scheduler, e.g. ``tcp://10.0.0.5:8786``;
        takes precedence over ``workers``.

    Yields
    ------
    Executor
        The executor.

    Raises
    ------
    InputError
        If Dask is not installed or the scheduler cannot be reached.
    """
    if workers < 1:
        raise ValueError(f"workers must be at least 1, got {workers}")
    if scheduler is None and workers == 1:
        yield Executor()
        return
    with _client(workers, scheduler) as client:
        yield Executor(client)


def ordered_map(func: Callable[..., Any], items: Iterable[Any], *, args: tuple = (),
                workers: int = 1, scheduler: str | None = None) -> Iterator[Any]:
    """Yield ``func(item, *args)`` for each item, in item order.

    Parameters
    ----------
    func : callable
        A module-level function (it is pickled by reference for workers).
    items : iterable
        The items; consumed lazily.
    args : tuple
        Further arguments, the same for every item.
    workers : int
        Worker processes on this machine (1: run in this process).
    scheduler : str, optional
        Address of a running Dask scheduler; takes precedence over ``workers``.

    Yields
    ------
    object
        The results, in item order.
    """
    with executor(workers, scheduler) as ex:
        yield from ex.map(func, items, args)


@contextlib.contextmanager
def _client(workers: int, scheduler: str | None):
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError as exc:  # pragma: no cover - dask is a dependency
        raise InputError("--workers", f"parallel runs need dask[distributed]: {exc}") from exc
    # the cluster's own chatter (start, stop, heartbeats) is not the run's business
    for name in ("distributed", "distributed.scheduler", "distributed.nanny",
                 "distributed.worker", "distributed.core", "distributed.http.proxy"):
        logging.getLogger(name).setLevel(logging.ERROR)
    if scheduler is not None:
        try:
            client = Client(scheduler, timeout=30)
        except (OSError, TimeoutError) as exc:
            raise InputError(scheduler, f"cannot reach the Dask scheduler: {exc}") from exc
        try:
            yield client
        finally:
            client.close()
        return
    cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                           host="127.0.0.1", dashboard_address=None,
                           silence_logs=logging.ERROR)
    try:
        with Client(cluster) as client:
            yield client
    finally:
        cluster.close()
