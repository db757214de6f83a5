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
import os
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

from driftloop.errors import InputError

__all__ = ["IN_FLIGHT_PER_THREAD", "Executor", "executor", "ordered_map"]

#: Items submitted ahead per worker thread.
IN_FLIGHT_PER_THREAD = 3


class Executor:
    """Runs functions on items, in this process or on a Dask client, results in order."""

    def __init__(self, client: Any = None, starting: Future | None = None,
                 stop: Callable[[], Any] | None = None) -> None:
        self._client = client
        self._starting = starting
        self._stop = stop
        self._warming: list = []

    def close_soon(self) -> None:
        """Start stopping the cluster in the background; the executor is not used after this.

        The caller goes on (e.g. writing the outputs) while the workers shut
        down; leaving the :func:`executor` block waits for the end.
        """
        if self._stop is not None:
            self._stop()
            self._stop = None

    @property
    def client(self) -> Any:
        """The Dask client (None in this process); waits for a cluster still starting."""
        if self._starting is not None:
            self._client = self._starting.result()  # raises what the start raised
            self._starting = None
        return self._client

    @property
    def threads(self) -> int:
        """Worker threads (1 in this process)."""
        client = self.client
        return 1 if client is None else max(1, sum(client.nthreads().values()))

    def warm_up(self, func: Callable[..., Any], *args: Any) -> None:
        """Run ``func(*args)`` once on every worker, without waiting for it.

        If the cluster is still starting, the calls are made as soon as it
        is up.

        Parameters
        ----------
        func : callable
            A module-level function.
        *args
            Its arguments.
        """
        if self._starting is not None:
            def later(started: Future) -> None:
                if not started.cancelled() and started.exception() is None:
                    self._submit_warm_up(started.result(), func, args)

            self._starting.add_done_callback(later)
            return
        if self._client is not None:
            self._submit_warm_up(self._client, func, args)

    def _submit_warm_up(self, client: Any, func: Callable[..., Any], args: tuple) -> None:
        for address in client.scheduler_info()["workers"]:
            self._warming.append(client.submit(func, *args, workers=[address],
                                               pure=False, allow_other_workers=False))

    def submit(self, func: Callable[..., Any], *args: Any) -> Any:
        """Start ``func(*args)`` on a worker; the returned object's ``result()`` gives its value.

        In this process the call is made when ``result()`` is first asked
        for.  The arguments are scattered to the cluster first, so that
        large ones travel as data, not inside the task.

        Parameters
        ----------
        func : callable
            A module-level function.
        *args
            Its arguments.

        Returns
        -------
        object
            A :class:`concurrent.futures.Future`-like object.
        """
        client = self.client
        if client is None:
            return _Deferred(func, args)
        shared = client.scatter(list(args), hash=False) if args else []
        return client.submit(func, *shared, pure=False)

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
        # hash=False: keys made from the content would be shared with another map of
        # the same arguments, whose end releases the data this one still needs
        shared = client.scatter(list(args), broadcast=True, hash=False) if args else []
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


class _Deferred:
    """A call made when its result is first asked for (in this process)."""

    def __init__(self, func: Callable[..., Any], args: tuple) -> None:
        self._call: tuple | None = (func, args)
        self._value: Any = None

    def result(self) -> Any:
        if self._call is not None:
            func, args = self._call
            self._value = func(*args)
            self._call = None
        return self._value


@contextlib.contextmanager
def executor(workers: int = 1, scheduler: str | None = None,
             preload: Sequence[str] = ()) -> Iterator[Executor]:
    """Give an :class:`Executor` for the run, starting and stopping a local cluster if asked.

    Parameters
    ----------
    workers : int
        Worker processes on this machine (1: run in this process, no Dask).
    scheduler : str, optional
        Address of a running Dask scheduler, e.g. ``tcp://10.0.0.5:8786``;
        takes precedence over ``workers``.
    preload : sequence of str
        Modules that the work imports: the workers of a local cluster start
        with them imported (they are forked from a server process that
        imported them once).

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
    if scheduler is None:
        _start_fork_server(preload)
    # the cluster starts (or the scheduler is reached) in a thread of its own
    # while the caller goes on, e.g. reading the inputs; the first use of the
    # executor's client waits for it
    stack = contextlib.ExitStack()
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="driftloop-cluster")
    stopping: list[Future] = []
    try:
        # closed in the thread that opened it (the client keeps context
        # variables of that thread)
        yield Executor(starting=pool.submit(stack.enter_context,
                                               _client(workers, scheduler)),
                       stop=lambda: stopping.append(pool.submit(stack.close)))
    finally:
        try:
            pool.submit(stack.close).result()  # after the start (and any earlier stop)
            for future in stopping:
                future.result()
        finally:
            pool.shutdown(wait=True)


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


#: Environment of local worker processes: one thread for the numerical
#: libraries (each worker has one thread and there is a worker per core), as
#: Dask sets it for the workers it spawns.
WORKER_ENVIRONMENT = {"OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1",
                      "OPENBLAS_NUM_THREADS": "1"}


#: Set, it turns off glibc's adaptive mmap threshold (see :func:`_client`);
#: local workers run without it.
_TRIM = "MALLOC_TRIM_THRESHOLD_"


def _start_fork_server(preload: Sequence[str]) -> None:
    """Start the process that local workers are forked from, with ``preload`` imported.

    Started first thing, it imports the stack on the second core while this
    process goes on (reading the inputs, starting the scheduler); the
    workers, forked from it, start with everything imported.  The libraries
    read their thread counts when imported and glibc its malloc settings
    when a process starts, so the server starts with
    :data:`WORKER_ENVIRONMENT` and without ``MALLOC_TRIM_THRESHOLD_`` (this
    process's environment is left as it was).  A server already running
    (from an earlier run in this process) is kept.
    """
    import multiprocessing
    from multiprocessing import forkserver

    multiprocessing.get_context("forkserver").set_forkserver_preload(
        ["distributed", "distributed.nanny", "numpy", "pandas", *preload])
    saved = {name: os.environ.get(name) for name in (*WORKER_ENVIRONMENT, _TRIM)}
    os.environ.update(WORKER_ENVIRONMENT)
    os.environ.pop(_TRIM, None)  # e.g. left here by Dask's own spawning of workers
    try:
        forkserver.ensure_running()
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value


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
    # - no dashboard; the scheduler's small HTTP server (health, metrics) takes a
    #   free port, so that runs at the same time do not compete for 8787;
    # - no statistical profiler in the workers: sampling every thread's stack
    #   every 10 ms competes with the work for the interpreter lock (a run on
    #   two cores took a third longer with it);
    # - workers are forked from a server process that has imported the modules
    #   of the work once, instead of each worker starting a new interpreter and
    #   importing them while the inputs are read (on two cores, three processes
    #   then share them);
    # - no MALLOC_TRIM_THRESHOLD_ in the workers' environment (Dask sets one):
    #   setting it turns off glibc's adaptive mmap threshold, so every array of
    #   more than 128 KiB is a fresh mapping and its pages fault in again (the
    #   QC of a batch took twice as long)
    # (the server is already running, started by executor() with the preload:
    # Dask's own preload list, set on its first use of the method, has no effect)
    import dask

    with dask.config.set({"distributed.worker.profile.enabled": False,
                          "distributed.worker.multiprocessing-method": "forkserver",
                          "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}):
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None,
                               scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                               silence_logs=logging.ERROR)
    try:
        with Client(cluster) as client:
            yield client
    finally:
        cluster.close()
