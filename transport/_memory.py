"""Large arrays for bulk data (columns of a log, frames of a trajectory).

numpy asks the kernel for transparent huge pages (2 MB) for every large array. When the
kernel has free 2 MB blocks, writing a fresh array that way is fast (one fault per 2 MB:
120 MB in 0.02 s on the 2-core machine this project is measured on). When it has few (the
memory is fragmented, typically after reading big files filled the page cache) every fault
first compacts memory: a fresh 640 MB array then took 1.9 s to write, against 0.45 s with
ordinary 4 kB pages (``DEVELOPERS.md``, performance notes). So :func:`bulk_empty` looks at
the kernel's free-block counts (``/proc/buddyinfo``, Linux) and, where the caller allows it
(``huge_pages=True``), uses numpy's allocation when free 2 MB blocks cover the array twice
over, and an anonymous map without huge pages otherwise; such a map can also be filled
by the kernel at once (``populate``), which spares a trap per 4 kB page (120 MB: 0.06 s
instead of 0.1 s).
"""

from __future__ import annotations

import mmap

import numpy as np
from numpy.typing import DTypeLike

__all__ = ["bulk_empty"]

_SMALL = 1 << 22  # below 4 MB numpy's own allocator is as good
_HUGE = 1 << 21  # the transparent huge page size on x86-64 and most arm64 kernels


def free_huge_bytes() -> int | None:
    """Free memory in blocks of 2 MB or more, from ``/proc/buddyinfo`` (None if unknown).

    Each line of that file counts the free blocks of 2^k pages, k = 0, 1, ..., per memory
    zone (Linux ``Documentation/filesystems/proc.rst``; from memory).
    """
    try:
        with open("/proc/buddyinfo") as fh:
            text = fh.read()
    except OSError:
        return None
    return _free_huge_in(text, mmap.PAGESIZE)


def _free_huge_in(text: str, page: int) -> int | None:
    """Bytes in free blocks of at least 2 MB listed in a ``/proc/buddyinfo`` text."""
    total = 0
    try:
        for line in text.splitlines():
            fields = line.split()
            if "zone" not in fields:
                continue
            counts = fields[fields.index("zone") + 2:]
            for order, count in enumerate(counts):
                block = page << order
                if block >= _HUGE:
                    total += int(count) * block
    except ValueError:
        return None
    return total


def bulk_empty(shape: int | tuple[int, ...], dtype: DTypeLike = np.float64, *,
               populate: bool = False, huge_pages: bool = False) -> np.ndarray:
    """An uninitialised (in fact zero-filled on first touch) C-ordered array.

    Parameters
    ----------
    shape : int or tuple of int
        Array shape.
    dtype : dtype-like
        Element type.
    populate : bool
        The whole array will be written: where it is mapped without huge pages, have the
        kernel fill it in at once (``MAP_POPULATE``) rather than page by page.
    huge_pages : bool
        Use numpy's (huge-page) allocation when the kernel has free 2 MB blocks for twice
        the array. Off by default: the log reader's store was measured (viscosity
        benchmark, 1.5 GB inputs filling the page cache) only without huge pages.

    Returns
    -------
    ndarray
        Writeable; from ``np.empty`` when small or when free huge pages abound, otherwise
        backed by an anonymous memory map (freed with the last array that uses it).
    """
    shape_t = (shape,) if isinstance(shape, (int, np.integer)) else tuple(shape)
    dt = np.dtype(dtype)
    nbytes = int(np.prod(shape_t, dtype=np.int64)) * dt.itemsize
    if nbytes < _SMALL:
        return np.empty(shape_t, dtype=dt)
    if huge_pages:
        free = free_huge_bytes()
        if free is not None and free >= 2 * nbytes:
            return np.empty(shape_t, dtype=dt)
    flags = getattr(mmap, "MAP_PRIVATE", 0) | getattr(mmap, "MAP_ANONYMOUS", 0)
    if populate and flags and hasattr(mmap, "MAP_POPULATE"):
        buf = mmap.mmap(-1, nbytes, flags=flags | mmap.MAP_POPULATE)
    else:
        buf = mmap.mmap(-1, nbytes)
    return np.frombuffer(buf, dtype=dt).reshape(shape_t)
