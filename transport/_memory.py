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

import contextlib
import mmap
import os
import tempfile
import threading
import time
import weakref
from pathlib import Path

import numpy as np
from numpy.typing import DTypeLike

__all__ = ["available_bytes", "bulk_empty", "disk_empty", "file_backed", "release_pages",
           "spills"]

#: File mappings made by :func:`disk_empty` (anonymous maps of bulk_empty are not files).
_FILE_MAPS: weakref.WeakSet[mmap.mmap] = weakref.WeakSet()

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


def available_bytes() -> int | None:
    """Memory available to new allocations (``MemAvailable`` of ``/proc/meminfo``, Linux;
    None if unknown)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def spills(spill: bool | None, scratch: object, shape: tuple[int, ...]) -> bool:
    """Keep an array of float64 `shape` in a scratch file? Never without a `scratch`
    folder or with `spill` False; always with `spill` True; with None (automatic) when it
    would take more than a third of the available memory (the analysis after the reader
    needs room too)."""
    if scratch is None or spill is False:
        return False
    if spill:
        return True
    avail = available_bytes()
    return avail is not None and 3 * 8 * int(np.prod(shape, dtype=np.int64)) > avail


def disk_empty(shape: tuple[int, ...], folder: str | os.PathLike[str],
               dtype: DTypeLike = np.float64) -> np.ndarray:
    """A writeable array backed by a scratch file in `folder` (a shared file mapping).

    The file is sparse (capacity never written takes no disk) and is unlinked as soon as
    it is mapped, so that it disappears with the last array using it, also when the
    process is killed. Its pages are written back by the kernel; :func:`release_pages`
    drops them from the process, so a pass over the array keeps only what it touches
    since the last release resident.
    """
    dt = np.dtype(dtype)
    nbytes = max(int(np.prod(shape, dtype=np.int64)) * dt.itemsize, 1)
    Path(folder).mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix=".scratch-", suffix=".f64", dir=folder)
    try:
        os.ftruncate(fd, nbytes)
        buf = mmap.mmap(fd, nbytes, flags=mmap.MAP_SHARED,
                        prot=mmap.PROT_READ | mmap.PROT_WRITE)
    finally:
        os.close(fd)
        with contextlib.suppress(OSError):  # (not allowed while open on Windows)
            os.unlink(name)
    _FILE_MAPS.add(buf)
    _start_releaser()
    return np.frombuffer(buf, dtype=dt).reshape(shape)


#: Seconds between two releases of the scratch mappings' pages (see _start_releaser).
RELEASE_EVERY = 0.05
_releaser: threading.Thread | None = None
_releaser_lock = threading.Lock()


def _start_releaser() -> None:
    """Release the pages of every live scratch mapping every :data:`RELEASE_EVERY` s.

    The whole-array passes of the reader and the checks after it (unit conversion in
    place, value checks, means) would otherwise leave every page they touch resident: a
    pass over a 4.8 GB scratch array would show 4.8 GB resident although the kernel could
    drop it at any time. Touching memory runs at a few GB/s here, so at most a few hundred
    MB are resident between two releases. Dropped pages of a shared file mapping are read
    again from the page cache on the next access (no data lost; a minor fault per page).
    The thread ends when no scratch mapping is left.
    """
    global _releaser
    with _releaser_lock:
        if _releaser is not None and _releaser.is_alive():
            return

        def loop() -> None:
            while True:
                time.sleep(RELEASE_EVERY)
                maps = list(_FILE_MAPS)
                if not maps:
                    return
                for m in maps:
                    with contextlib.suppress(OSError, ValueError):
                        m.madvise(mmap.MADV_DONTNEED)
                del maps

        if hasattr(mmap, "MADV_DONTNEED"):
            _releaser = threading.Thread(target=loop, name="transport-release-pages",
                                         daemon=True)
            _releaser.start()


def file_backed(a: np.ndarray) -> mmap.mmap | None:
    """The file mapping `a` is a view of, or None (ordinary or anonymous memory)."""
    base = a
    while base is not None:
        if isinstance(base, np.memmap):  # np.load(..., mmap_mode=...), np.memmap
            return getattr(base, "_mmap", None)
        if isinstance(base, mmap.mmap):
            return base if base in _FILE_MAPS else None
        base = base.obj if isinstance(base, memoryview) else getattr(base, "base", None)
    return None


def release_pages(a: np.ndarray) -> None:
    """Drop the resident pages of a file-backed array from this process.

    For a shared file mapping the data stay in the file (and the page cache); the next
    access maps them in again. Nothing happens for other arrays (an anonymous map would
    lose its data: those are never file-backed here).
    """
    base = file_backed(a)
    if base is None or not hasattr(mmap, "MADV_DONTNEED"):
        return
    with contextlib.suppress(OSError, ValueError):  # a closed or odd mapping: keep them
        base.madvise(mmap.MADV_DONTNEED)
