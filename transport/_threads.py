"""Threads for work whose heavy parts release the GIL (numpy, scipy.fft, pandas' parser)."""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import TypeVar

__all__ = ["THREADS_ENV", "available_cpus", "lane_map", "limit_threads", "thread_map"]

#: Environment variable capping the threads a process uses for its own work (thread pools
#: and ``scipy.fft`` workers). Set by :func:`transport.parallel.run_tasks` in each worker
#: process so that N processes on N cores do not each start N threads.
THREADS_ENV = "TRANSPORT_THREADS"

T = TypeVar("T")
R = TypeVar("R")


def available_cpus() -> int:
    """Threads this process should use: the CPUs it may run on (its affinity mask where the
    system has one), capped by ``TRANSPORT_THREADS`` or else ``OMP_NUM_THREADS``.

    ``OMP_NUM_THREADS`` is the usual per-process thread budget of numerical code (common
    practice); Dask's worker processes are started with it set to 1 by default, which keeps
    a task on a Dask worker to one thread as well.
    """
    try:
        n = max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        n = max(1, os.cpu_count() or 1)
    for var in (THREADS_ENV, "OMP_NUM_THREADS"):
        cap = os.environ.get(var, "").strip()
        if cap:
            try:
                return max(1, min(n, int(cap)))
            except ValueError:
                continue  # not a number: ignored, as numerical libraries do
    return n


def limit_threads(n: int) -> None:
    """Cap this process's threads at `n` from now on (its :func:`available_cpus`, and the
    BLAS / OpenMP pools when ``threadpoolctl`` is installed).

    Called at the start of each worker process of a pool, so that the workers together
    use one thread per core.
    """
    global _POOL
    os.environ[THREADS_ENV] = str(max(1, int(n)))
    with _POOL_LOCK:
        if _POOL is not None:  # a lane pool sized for more threads: drop it
            _POOL.shutdown(wait=False)
            _POOL = None
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # optional: numpy's BLAS is hardly used by the analyses
        return
    threadpool_limits(max(1, int(n)))


def thread_map(fn: Callable[[T], R], items: Iterable[T], workers: int | None = None
               ) -> list[R]:
    """``[fn(x) for x in items]``, run in up to `workers` threads (default: the CPUs).

    Worth it only when `fn` spends its time in code that releases the GIL; with one item
    or one worker it runs in the calling thread. Exceptions propagate (the first one).
    """
    todo = list(items)
    n = min(len(todo), available_cpus() if workers is None else max(1, workers))
    if n <= 1:
        return [fn(x) for x in todo]
    with ThreadPoolExecutor(max_workers=n) as pool:
        return list(pool.map(fn, todo))


_POOL: ThreadPoolExecutor | None = None
_POOL_LOCK = threading.Lock()


def lane_map(fn: Callable[[T], R], items: Sequence[T]) -> list[R]:
    """``[fn(x) for x in items]`` for many small calls: the items after the first run in a
    pool of threads kept for the life of the process (starting threads for every call would
    cost more than the work), the first in the calling thread.

    For splitting one block of numpy work into lanes (disjoint parts of the same arrays);
    `fn` must release the GIL for most of its time to gain anything. Exceptions propagate.
    """
    global _POOL
    if len(items) <= 1:
        return [fn(x) for x in items]
    with _POOL_LOCK:
        if _POOL is None:
            _POOL = ThreadPoolExecutor(max_workers=max(1, available_cpus() - 1),
                                       thread_name_prefix="transport-lane")
        pool = _POOL
    futures = [pool.submit(fn, x) for x in items[1:]]
    first = fn(items[0])
    return [first, *(f.result() for f in futures)]
