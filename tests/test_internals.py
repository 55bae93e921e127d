"""Helpers under the readers and estimators: bulk arrays and thread lanes.

References: the ``/proc/buddyinfo`` layout (one line per memory zone, then the number of
free blocks of 2^0, 2^1, ... pages; Linux ``Documentation/filesystems/proc.rst``, from
memory) and plain arithmetic.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest

from transport import _memory
from transport._threads import lane_map

BUDDYINFO = (
    "Node 0, zone      DMA      0      0      0      0      0      0      0      0      1  1  3\n"
    "Node 0, zone   Normal   6471   6332   3636   3330   1617   1102    965    769    467  259"
    "   1241\n"
)


def test_free_huge_pages_counted_from_buddyinfo():
    # 4 kB pages: the columns are orders 0..10; blocks of order >= 9 (2^9 x 4 kB = 2 MB)
    # count, order 9 as 2 MB and order 10 as 4 MB.
    mb = 1 << 20
    dma = 1 * 2 * mb + 3 * 4 * mb  # order 8 (1 MB) does not count
    normal = 259 * 2 * mb + 1241 * 4 * mb
    assert _memory._free_huge_in(BUDDYINFO, 4096) == dma + normal
    # 64 kB pages (some arm64 kernels): order 5 is already 2 MB
    assert _memory._free_huge_in("Node 0, zone Normal 0 0 0 0 0 7\n", 65536) == 7 * 2 * mb
    bad = "Node 0, zone Normal 0 0 0 0 0 0 0 0 0 x 1\n"  # not a number where it counts
    assert _memory._free_huge_in(bad, 4096) is None
    assert _memory._free_huge_in("", 4096) == 0


@pytest.mark.parametrize("free", [0, 1 << 40], ids=["fragmented", "plenty"])
def test_bulk_empty_either_way_gives_a_writeable_array(monkeypatch, free):
    monkeypatch.setattr(_memory, "free_huge_bytes", lambda: free)
    shape = (3, 1 << 20)  # 24 MB of float64: above the small-array cut
    a = _memory.bulk_empty(shape, np.float64, populate=True, huge_pages=True)
    assert a.shape == shape and a.dtype == np.float64 and a.flags.c_contiguous
    a[...] = 1.5
    assert float(a.sum()) == 1.5 * a.size
    # numpy's own allocation only when free 2 MB blocks cover the array twice; otherwise
    # the array lives in an anonymous memory map
    root = a
    while isinstance(root, np.ndarray) and root.base is not None:
        root = root.base
    assert isinstance(root, np.ndarray) == bool(free)
    small = _memory.bulk_empty(10, np.int32)
    assert small.shape == (10,) and small.dtype == np.int32


def test_lane_map_keeps_order_runs_in_threads_and_raises():
    seen = set()

    def work(i):
        seen.add(threading.get_ident())
        return i * i

    assert lane_map(work, range(6)) == [0, 1, 4, 9, 16, 25]
    assert lane_map(work, [7]) == [49]
    assert threading.get_ident() in seen  # the first item runs in the caller

    def boom(i):
        if i == 2:
            raise ValueError("lane 2")
        return i

    with pytest.raises(ValueError, match="lane 2"):
        lane_map(boom, range(4))
