"""Large arrays for bulk data (columns of a log, frames of a trajectory).

numpy asks the kernel for transparent huge pages for every large array. Where huge pages
must first be assembled (compacted) when the memory is touched, as on the 2-core machine
this project is measured on, writing a fresh 640 MB array took 1.9 s with huge pages and
0.45 s without (``DEVELOPERS.md``, performance notes). Bulk storage that is written once,
front to back, gains nothing from huge pages, so it is mapped directly without them.
"""

from __future__ import annotations

import mmap

import numpy as np
from numpy.typing import DTypeLike

__all__ = ["bulk_empty"]

_SMALL = 1 << 22  # below 4 MB numpy's own allocator is as good


def bulk_empty(shape: int | tuple[int, ...], dtype: DTypeLike = np.float64
               ) -> np.ndarray:
    """An uninitialised (in fact zero-filled on first touch) C-ordered array.

    Parameters
    ----------
    shape : int or tuple of int
        Array shape.
    dtype : dtype-like
        Element type.

    Returns
    -------
    ndarray
        Writeable; large arrays are backed by an anonymous memory map (freed with the last
        array that uses it), small ones come from ``np.empty``.
    """
    shape_t = (shape,) if isinstance(shape, (int, np.integer)) else tuple(shape)
    dt = np.dtype(dtype)
    nbytes = int(np.prod(shape_t, dtype=np.int64)) * dt.itemsize
    if nbytes < _SMALL:
        return np.empty(shape_t, dtype=dt)
    buf = mmap.mmap(-1, nbytes)
    return np.frombuffer(buf, dtype=dt).reshape(shape_t)
