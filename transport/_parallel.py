"""Threads for work whose heavy parts release the GIL (numpy, scipy.fft, pandas' parser)."""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable
from concurrent.futures import ThreadPoolExecutor
from typing import TypeVar

__all__ = ["available_cpus", "thread_map"]

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
