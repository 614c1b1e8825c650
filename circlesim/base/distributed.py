"""Where many independent pieces of work run: local processes, or a Dask cluster.

:func:`map_chunks` applies a function to a list of work items and returns the results in
order. By default the items run on local worker processes, one per core (in this process when
there are fewer than two items per core, or when asked for one worker). Given the address of a
Dask distributed scheduler (``tcp://host:8786``) or a connected ``dask.distributed.Client``,
they run on that cluster instead. A scheduler that cannot be reached is an error naming the
address — unless the caller asked to fall back to local processes, in which case a warning
says so and the work runs locally. ``docs/population.md`` explains how to start a cluster.

The work function is called as ``func(item, parallel)``. ``parallel`` is True only when the
item runs in this process with the machine to itself, so the function may use numba's threads;
in worker processes, on a cluster and on this process's threads (``threads=True``) each
worker is one thread of work.
"""

from __future__ import annotations

import multiprocessing
import os
import socket
import warnings
from collections.abc import Callable, Sequence
from concurrent.futures import (
    Executor,
    ProcessPoolExecutor,
    ThreadPoolExecutor,
    as_completed,
)
from typing import Any, NamedTuple

from circlesim.base.validation import InputError, Interval, check_whole_number

__all__ = ["ChunkRun", "SchedulerUnreachableError", "check_scheduler_address", "local_workers",
           "map_chunks"]

#: Seconds allowed to reach a scheduler.
CONNECT_TIMEOUT_S = 10.0
_SCHEMES = ("tcp", "tls", "ws", "wss", "inproc", "ucx")
_PROBED = ("tcp", "tls", "ws", "wss")


class SchedulerUnreachableError(InputError):
    """The Dask scheduler at the given address could not be reached."""


class ChunkRun(NamedTuple):
    """Results of :func:`map_chunks`, in the order of the items, and where they ran."""

    results: list
    where: str


def local_workers() -> int:
    """Number of cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


def check_scheduler_address(address: Any) -> str:
    """Return ``address`` if it looks like a Dask scheduler address, else raise InputError.

    An address is ``scheme://host:port`` with scheme one of tcp, tls, ws, wss, ucx (or
    ``inproc://...`` inside one process), e.g. ``tcp://10.0.0.5:8786``.
    """
    text = address.strip() if isinstance(address, str) else None
    scheme, sep, rest = (text or "").partition("://")
    ok = bool(sep) and scheme in _SCHEMES and bool(rest)
    if ok and scheme in _PROBED:
        host, colon, port = rest.rpartition(":")
        ok = bool(colon) and bool(host) and port.isdigit() and 0 < int(port) < 65536
    if not ok:
        raise InputError(f"scheduler must be a Dask scheduler address such as "
                         f"tcp://10.0.0.5:8786 (scheme {', '.join(_SCHEMES)}); got {address!r}.")
    return text


def _probe(address: str, timeout_s: float) -> None:
    """Open and close a plain TCP connection to the scheduler, to fail fast and cleanly."""
    scheme, _, rest = address.partition("://")
    if scheme not in _PROBED:
        return
    host, _, port = rest.rpartition(":")
    host = host.strip("[]")
    try:
        with socket.create_connection((host, int(port)), timeout=timeout_s):
            pass
    except OSError as exc:
        raise SchedulerUnreachableError(
            f"the Dask scheduler at {address} could not be reached ({exc}). Check the address "
            "and that the scheduler is running (start one with `dask scheduler` and workers "
            "with `dask worker ADDRESS`), or ask to fall back to local processes "
            "(--fallback-local on the command line).") from None


def connect(address: str, timeout_s: float = CONNECT_TIMEOUT_S):
    """A ``dask.distributed.Client`` connected to ``address``.

    Raises
    ------
    InputError
        If the address is malformed.
    SchedulerUnreachableError
        If nothing answers at the address within ``timeout_s`` seconds.
    """
    from dask.distributed import Client

    address = check_scheduler_address(address)
    _probe(address, timeout_s)
    try:
        return Client(address, timeout=timeout_s, set_as_default=False)
    except Exception as exc:  # Dask raises OSError, TimeoutError and others here
        raise SchedulerUnreachableError(
            f"the Dask scheduler at {address} did not accept a connection "
            f"({type(exc).__name__}: {exc}).") from None


def _run_here(func: Callable, items: Sequence, progress: Callable[[int], Any] | None) -> list:
    out = []
    for item in items:
        out.append(func(item, True))
        if progress is not None:
            progress(1)
    return out


def _run_pool(pool: Executor, func: Callable, items: Sequence,
              progress: Callable[[int], Any] | None) -> list:
    """Every item on ``pool`` as ``func(item, False)``; the first error is raised at once."""
    try:
        futures = [pool.submit(func, item, False) for item in items]
        for future in as_completed(futures):
            future.result()
            if progress is not None:
                progress(1)
        return [f.result() for f in futures]
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _run_threads(func: Callable, items: Sequence, threads: int,
                 progress: Callable[[int], Any] | None) -> list:
    pool = ThreadPoolExecutor(max_workers=threads, thread_name_prefix="circlesim-chunk")
    return _run_pool(pool, func, items, progress)


def _run_processes(func: Callable, items: Sequence, workers: int,
                   progress: Callable[[int], Any] | None) -> list:
    # "spawn": a fresh interpreter per worker; forking a process that has started numba's
    # threads is not safe.
    context = multiprocessing.get_context("spawn")
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=context)
    return _run_pool(pool, func, items, progress)


def _run_dask(client, func: Callable, items: Sequence,
              progress: Callable[[int], Any] | None) -> list:
    from dask.distributed import as_completed as dask_completed

    futures = client.map(func, list(items), parallel=False, pure=False)
    try:
        for future in dask_completed(futures, loop=client.loop):
            future.result()
            if progress is not None:
                progress(1)
        return client.gather(futures)
    finally:
        client.cancel(futures)


def map_chunks(func: Callable[[Any, bool], Any], items: Sequence, *,
               scheduler: Any = None, workers: int | None = None,
               fallback_to_local: bool = False,
               progress: Callable[[int], Any] | None = None,
               timeout_s: float = CONNECT_TIMEOUT_S, threads: bool = False) -> ChunkRun:
    """Apply ``func(item, parallel)`` to every item and return the results in order.

    Parameters
    ----------
    func : callable
        A module-level function (it is sent to other processes by reference).
    items : sequence
        Picklable work items.
    scheduler : str, dask.distributed.Client or None
        None: local processes. A scheduler address (``tcp://host:port``) or a connected
        client: run on that Dask cluster.
    workers : int or None, 1–1024
        Local worker processes. Default: one per core, or this process alone when there are
        fewer than two items per core (starting a worker process costs about a second, and
        in this process numba's threads share the cores just as well). 1 runs every item in
        this process.
    fallback_to_local : bool
        If the scheduler cannot be reached, warn and run on local processes instead of
        raising :class:`SchedulerUnreachableError`.
    progress : callable or None
        Called with 1 each time an item finishes.
    timeout_s : float, s
        Time allowed to reach the scheduler.
    threads : bool
        In this process, run the items on one thread per core, each called with
        ``parallel=False``, instead of one after another with ``parallel=True``. For work
        whose heavy part releases the GIL (the compiled batch integrator): one thread's
        integration then runs while another does the Python and numpy work of its finished
        item, where numba's threads would leave a core idle during that work.

    Returns
    -------
    ChunkRun
        The results and a description of where they ran.
    """
    items = list(items)
    if workers is not None:
        workers = check_whole_number("workers", workers, Interval(1, 1024))
    if scheduler is not None:
        if hasattr(scheduler, "submit") and hasattr(scheduler, "gather"):
            return ChunkRun(_run_dask(scheduler, func, items, progress),
                            f"Dask cluster at {scheduler.scheduler.address}")
        address = check_scheduler_address(scheduler)
        try:
            client = connect(address, timeout_s)
        except SchedulerUnreachableError as exc:
            if not fallback_to_local:
                raise
            warnings.warn(f"{exc} Running on local processes instead, as asked.",
                          RuntimeWarning, stacklevel=2)
        else:
            try:
                return ChunkRun(_run_dask(client, func, items, progress),
                                f"Dask cluster at {address}")
            finally:
                client.close()
    n_workers = min(workers or local_workers(), max(len(items), 1))
    if workers is None and len(items) < 2 * n_workers:
        n_workers = 1  # too little work to pay for starting worker processes
    if n_workers <= 1:
        cores = min(local_workers(), len(items))
        if threads and cores > 1:
            return ChunkRun(_run_threads(func, items, cores, progress),
                            f"this process, {cores} threads")
        return ChunkRun(_run_here(func, items, progress), "this process")
    return ChunkRun(_run_processes(func, items, n_workers, progress),
                    f"{n_workers} local processes")
