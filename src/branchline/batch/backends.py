"""Where a batch's members run: one executor interface over three backends.

Every backend is a :class:`concurrent.futures.Executor`, so the batch loop in
:mod:`branchline.batch.execute` is one code path for all of them:

- ``jobs == 1``: :class:`InlineExecutor` runs each member in the calling process;
- ``jobs > 1``: a :class:`concurrent.futures.ProcessPoolExecutor` of local processes;
- ``cluster`` given: a Dask distributed client's executor
  (``distributed.Client(address).get_executor()``), the optional ``cluster`` extra.
"""

from __future__ import annotations

import multiprocessing
import os
import signal
from collections.abc import Callable, Iterator
from concurrent.futures import Executor, Future, ProcessPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass

# Seconds to wait for a Dask scheduler to answer before saying it cannot be reached.
CLUSTER_CONNECT_SECONDS = 20


class BackendError(Exception):
    """A backend that cannot be used (a cluster out of reach, Dask not installed)."""


class InlineExecutor(Executor):
    """Runs each task at once in the calling process (``--jobs 1``)."""

    def submit(self, fn: Callable, /, *args, **kwargs) -> Future:
        future: Future = Future()
        try:
            future.set_result(fn(*args, **kwargs))
        except Exception as error:  # delivered through the future, as the other backends do
            future.set_exception(error)
        return future


@dataclass(frozen=True)
class Backend:
    """An open backend: its executor, how many members may run at once, and a description."""

    executor: Executor
    slots: int
    description: str
    shared_disk: bool = False  # workers write member folders into the batch folder themselves


def default_jobs() -> int:
    """The number of cores this process may use (the ``--jobs`` default)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        return os.cpu_count() or 1


@contextmanager
def open_backend(jobs: int | None = None, cluster: str | None = None) -> Iterator[Backend]:
    """Open the backend for ``jobs`` local workers or a Dask cluster at ``cluster``.

    Raises
    ------
    BackendError
        If ``jobs`` is not positive, Dask is not installed, or the scheduler
        at ``cluster`` cannot be reached.
    """
    if cluster:
        with _dask_backend(cluster) as backend:
            yield backend
        return
    jobs = default_jobs() if jobs is None else jobs
    if jobs < 1:
        raise BackendError(f"--jobs must be at least 1, got {jobs}")
    if jobs == 1:
        yield Backend(InlineExecutor(), 1, "this process", shared_disk=True)
        return
    # Fresh workers from a fork server that has imported branchline once: each
    # worker starts fast, compiles its own models (none inherited half-built
    # from this process) and is safe even when this process runs threads.
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(["branchline.batch.member"])
    pool = ProcessPoolExecutor(max_workers=jobs, mp_context=context, initializer=_ignore_interrupt)
    try:
        yield Backend(pool, jobs, f"{jobs} local processes", shared_disk=True)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _ignore_interrupt() -> None:
    """Leave Ctrl-C to the batch: it stops submitting and lets running members finish."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


@contextmanager
def _dask_backend(address: str) -> Iterator[Backend]:
    try:
        from distributed import Client
    except ImportError:
        raise BackendError(
            'the Dask backend needs dask.distributed: pip install "branchline[cluster]" '
            '(or ".[cluster]" from a checkout)'
        ) from None
    try:
        client = Client(address, timeout=CLUSTER_CONNECT_SECONDS, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as error:
        raise BackendError(f"cannot reach the Dask scheduler at {address}: {error}") from None
    try:
        threads = sum(w.get("nthreads", 1) for w in client.scheduler_info()["workers"].values())
        executor = client.get_executor(pure=False)
        yield Backend(executor, max(threads, 1), f"the Dask cluster at {address}")
    finally:
        client.close()


__all__ = ["Backend", "BackendError", "InlineExecutor", "default_jobs", "open_backend"]
