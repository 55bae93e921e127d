"""Threads for work whose heavy parts release the GIL (numpy, scipy.fft, pandas' parser)."""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import TypeVar

__all__ = ["available_cpus", "lane_map", "thread_map"]

T = TypeVar("T")
R = TypeVar("R")


def available_cpus() -> int:
    """CPUs this process may run on (its affinity mask where the system has one)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


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
