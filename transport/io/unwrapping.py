"""Unwrapping: continuous coordinates from what a trajectory stores, frame block by block.

Unwrapping, in order of preference (``unwrap="auto"``):

1. unwrapped coordinates written by the engine (LAMMPS dump columns ``xu yu zu``), used as
   they are while the box is constant;
2. image flags (dump columns ``ix iy iz``): ``u(t+1) = u(t) + [x(t+1) - x(t)] +
   [n(t+1) - n(t)] L(t+1)``, which for a constant box is ``x + n L`` exactly;
3. on-the-fly unwrapping of wrapped coordinates that adds, frame by frame, the
   minimum-image displacement in the box of the later frame [1]_:
   ``u(t+1) = u(t) + d - L(t+1) round(d / L(t+1))``, ``d = w(t+1) - w(t)`` with ``w`` the
   coordinates wrapped into the box.

The scheme that adds image counts times the *current* box (``x(t) + n(t) L(t)``) is never
used: under a fluctuating box it adds spurious jumps ``n (L(t) - L(t'))`` and inflates D [1]_.
Unwrapped columns under a fluctuating box are therefore re-wrapped and unwrapped by scheme 3.
Scheme 3 is trusted only if the frames are close: a per-frame displacement above half a box
length would be assigned to the wrong image. When the root-mean-square per-frame displacement
of a coordinate exceeds a twelfth of the shortest box length (so that half a box is six
standard deviations away), the reader refuses with :class:`~transport.errors.InputError`.

Triclinic boxes (cell vectors ``H``, rows a, b, c) use scheme 3 in lattice coordinates:
``d - round(d H(t+1)^-1) H(t+1)``, exact for steps much shorter than the cell heights (the
spacing check then uses the smallest height); image flags count cell vectors
(``x + n H``). The series records the box angles (``PositionSeries.box_angles``).

Coordinates of unknown kind (DCD, XTC, TRR, ...) are unwrapped by scheme 3; if no coordinate
ever jumps by more than half a box and the box is constant, the result equals the coordinates
as stored (they were continuous already) and no spacing check is needed.

For a constant box scheme 3 is applied to the raw steps ``x(t+1) - x(t)`` (they differ from
the steps between wrapped coordinates by whole box lengths only): only the few steps longer
than half a box are corrected.

Each block of frames is unwrapped in float64 with reused work arrays (fresh block-sized
arrays would be page-faulted in every time); for a constant box the block is split into
lanes of atoms worked on in threads. :class:`_FrameProcessor` carries the state between
blocks and also reduces the atoms to particles (:mod:`transport.io.grouping`) and tracks
the centre-of-mass drift; it serves files (:mod:`transport.io._collect`) and in-memory
arrays (:func:`transport.io.trajectory.positions_from_arrays`) alike.

References
----------
.. [1] M. von Bülow, J. T. Bullerjahn and G. Hummer, "Systematic errors in diffusion
   coefficients from long-time molecular dynamics simulations at constant pressure",
   J. Chem. Phys. 153, 021101 (2020).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np

from .._threads import available_cpus, lane_map
from ..errors import InputError
from .grouping import _Particles

Unwrap = Literal["auto", "none", "images", "displacement"]
#: Accepted values of ``unwrap``.
UNWRAP_SCHEMES: tuple[str, ...] = ("auto", "none", "images", "displacement")
#: Largest trusted rms per-frame displacement of one coordinate, as a fraction of the shortest
#: box length: half a box is then 6 standard deviations away (a Gaussian exceeds that with
#: probability 2e-9; liquids have heavier tails, hence the margin).
MAX_STEP_FRACTION = 1.0 / 12.0
#: Relative change of a box length that counts as a fluctuating box (float32 boxes carry
#: ~1e-7 relative rounding).
_BOX_RTOL = 1e-5
#: Coordinates per block above which the constant-box unwrapping is split into lanes.
_LANE_VALUES = 1 << 16


@dataclass
class _UnwrapStats:
    frames: int = 0
    sum_d2: float = 0.0
    n_d: int = 0
    raw_jumps: int = 0
    box_changed: bool = False
    min_box: float = math.inf
    switched_at: int | None = None


def _wrap(x: np.ndarray, box: np.ndarray) -> np.ndarray:
    """Coordinates wrapped into [0, L) (box broadcast over atoms)."""
    return x - box * np.floor(x / box)


class _FrameProcessor:
    """Unwraps every atom block of frames by block, reduces to particles, tracks drift.

    Blocks are arrays of B consecutive frames (B >= 1); the state carried between blocks is
    the last frame's raw and unwrapped coordinates, image flags and box (copies: callers may
    reuse their block buffers), so the result does not depend on how the frames are blocked.
    The input blocks are never modified.
    """

    def __init__(self, *, mode: str, explicit: bool, atom_masses: np.ndarray,
                 particles: _Particles, velocities: bool, path: str | None) -> None:
        self.mode = mode  # none | unwrapped | images | displacement
        self.explicit = explicit  # the user asked for this scheme
        self.masses = np.ascontiguousarray(atom_masses, dtype=np.float64)
        self.mtot = float(atom_masses.sum())
        self.particles = particles
        self.want_v = velocities
        self.path = path
        self.stats = _UnwrapStats()
        self._u: np.ndarray | None = None  # last unwrapped frame (n, 3)
        self._x: np.ndarray | None = None  # last raw frame
        self._n: np.ndarray | None = None  # last image flags
        self._box0: np.ndarray | None = None
        self._last_box: np.ndarray | None = None
        self._half_tile: np.ndarray | None = None  # L0/2 tiled over atoms (n, 3)
        self._cell0: np.ndarray | None = None  # triclinic: first cell (3, 3), rows a, b, c
        self._last_cell: np.ndarray | None = None
        self._lattice: np.ndarray | None = None  # triclinic: steps in lattice coordinates
        self._off: np.ndarray | None = None  # constant box: u - x of the last frame
        self._identity = particles.is_identity(atom_masses.size)
        self._work_arrays: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    @property
    def last_raw(self) -> np.ndarray | None:
        return self._x

    # -- unwrapping -----------------------------------------------------------------------
    def _first(self, x: np.ndarray, box: np.ndarray | None, images: np.ndarray | None
               ) -> np.ndarray:
        u = x + images * box if self.mode == "images" else x.astype(np.float64)
        self._u, self._x = u.copy(), x.copy()
        self._n = None if images is None else images.copy()
        self._box0 = None if box is None else box.copy()
        self._last_box = self._box0
        if box is not None:
            # tiled over atoms: comparisons stay on contiguous arrays (broadcasting a
            # length-3 axis is several times slower)
            self._half_tile = np.tile(0.5 * box, (x.shape[0], 1)).astype(x.dtype)
        self.stats.frames += 1
        if box is not None:
            self.stats.min_box = min(self.stats.min_box, float(box.min()))
        return u

    def unwrap(self, x: np.ndarray, box: np.ndarray | None, images: np.ndarray | None,
               cells: np.ndarray | None = None) -> np.ndarray:
        """Continuous coordinates (B, n, 3) of a block of raw frames x (B, n, 3).

        `cells` (B, 3, 3), rows the box vectors, is given for triclinic boxes. The result
        may be `x` itself (no unwrapping needed) or a new array.
        """
        if cells is not None:
            return self._unwrap_cells(x, cells, images)
        if self._u is None:
            first = self._first(x[0], None if box is None else box[0],
                                None if images is None else images[0])
            if x.shape[0] == 1:
                return first[None]
            rest = self.unwrap(x[1:], None if box is None else box[1:],
                               None if images is None else images[1:])
            return np.concatenate([first[None], rest])
        st = self.stats
        if box is not None:
            st.min_box = min(st.min_box, float(box.min()))
            if not st.box_changed and self._box0 is not None:
                moved = np.any(np.abs(box - self._box0) > _BOX_RTOL * self._box0, axis=1)
                if moved.any():
                    s = int(np.argmax(moved))
                    if s > 0:  # frames before the first change, then the rest
                        a = self.unwrap(x[:s], box[:s], None if images is None else images[:s]
                                        ).copy()  # the next call reuses the work arrays
                        b = self.unwrap(x[s:], box[s:], None if images is None else images[s:])
                        return np.concatenate([a, b])
                    st.box_changed = True
                    if self.mode == "unwrapped":
                        # unwrapped columns were built with the current box: re-derive them
                        self.mode = "displacement"
                        st.switched_at = st.frames
        st.frames += x.shape[0]
        if self.mode == "images":
            u = self._unwrap_images(x, box, images)
            self._off = None  # the offsets follow from _u and _x when next needed
        elif box is not None and st.box_changed:
            u = self._unwrap_fluctuating(x, box)
            self._off = None
        else:
            u = self._unwrap_constant(x, box)
        if box is not None:
            self._last_box = box[-1].copy()
        self._u, self._x = u[-1].copy(), x[-1].copy()
        self.check()
        return u

    def _unwrap_cells(self, x: np.ndarray, cells: np.ndarray,
                      images: np.ndarray | None = None) -> np.ndarray:
        """Triclinic boxes: minimum-image steps in lattice coordinates, or image flags.

        A step ``d`` is reduced by the lattice vector ``round(d H^-1) H`` of the later frame's
        cell ``H`` (rows a, b, c); for steps much shorter than the cell heights (the spacing
        check) that is the step's own image in any cell shape. Once the cell changes, each
        frame is first wrapped into its own cell, as for orthorhombic boxes [1]_. Image
        flags ``n`` (LAMMPS: the unwrapped position is ``x + n H``) give
        ``u(t+1) = u(t) + [x(t+1) - x(t)] + [n(t+1) - n(t)] H(t+1)``.
        """
        st = self.stats
        if self.mode == "images" and images is None:
            raise InputError("unwrapping by image flags needs the flags", path=self.path)
        heights = _cell_heights(cells)
        if self._u is None:
            st.frames += 1
            st.min_box = min(st.min_box, float(heights[0].min()))
            self._off = None
            self._u = x[0].astype(np.float64)
            if self.mode == "images":
                assert images is not None
                self._u = self._u + images[0] @ cells[0]
                self._n = images[0].copy()
            self._x = x[0].copy()
            self._cell0 = cells[0].copy()
            self._last_cell = cells[0].copy()
            first = self._u.copy()
            if x.shape[0] == 1:
                return first[None]
            return np.concatenate([first[None], self._unwrap_cells(
                x[1:], cells[1:], None if images is None else images[1:])])
        st.min_box = min(st.min_box, float(heights.min()))
        scale = float(np.abs(self._cell0).max())
        if not st.box_changed and np.any(np.abs(cells - self._cell0) > _BOX_RTOL * scale):
            st.box_changed = True
            if self.mode == "unwrapped":  # built with the current box: re-derive them
                self.mode = "displacement"
                st.switched_at = st.frames
        st.frames += x.shape[0]
        if self.mode == "images":
            assert images is not None and self._n is not None
            xs = np.concatenate([self._x[None], x]).astype(np.float64, copy=False)
            ns = np.concatenate([self._n[None], images])
            u = self._u + np.cumsum(np.diff(xs, axis=0)
                                    + np.matmul(np.diff(ns, axis=0), cells), axis=0)
            self._n = images[-1].copy()
            self._off = None
        elif not st.box_changed:
            u = self._unwrap_fixed_cell(x)
        else:
            self._off = None  # the offsets follow from _u and _x if ever needed again
            xs = np.concatenate([self._x[None], x]).astype(np.float64)
            cs = np.concatenate([self._last_cell[None], cells])
            frac = np.matmul(xs, np.linalg.inv(cs))
            xs = np.matmul(frac - np.floor(frac), cs)
            d = np.diff(xs, axis=0)
            k = np.rint(np.matmul(d, np.linalg.inv(cells)))
            st.raw_jumps += int(np.count_nonzero(k))
            if self.mode in ("none", "unwrapped"):
                u = x
            else:
                d -= np.matmul(k, cells)
                st.sum_d2 += float(np.einsum("bij,bij->", d, d))
                st.n_d += d.size
                u = self._u + np.cumsum(d, axis=0)
        self._last_cell = cells[-1].copy()
        self._x = x[-1].copy()
        self._u = u[-1].astype(np.float64)
        self.check()
        return u

    def _unwrap_fixed_cell(self, x: np.ndarray) -> np.ndarray:
        """A triclinic cell constant so far: per-atom offsets of whole lattice vectors that
        change only at jumps, as :meth:`_unwrap_constant` does for orthorhombic boxes.

        Steps are taken to lattice coordinates with one matrix product per block (BLAS);
        an atom jumps where a lattice coordinate of its step exceeds 1/2, and gets
        ``-round(step H^-1) H`` added from that frame on.
        """
        st = self.stats
        b, n = x.shape[0], x.shape[1]
        cell = self._cell0
        inv = np.linalg.inv(cell)
        # reused work arrays (fresh block-sized ones would be page-faulted in each time)
        d, u, mask = self._work(x.shape, x.dtype)
        full = self._work_arrays[0]  # what `d` is a part of
        if (self._lattice is None or self._lattice.shape != full.shape
                or self._lattice.dtype != full.dtype):
            self._lattice = np.empty_like(full)
        q = self._lattice[:b]
        np.subtract(x[1:], x[:-1], out=d[1:])
        np.subtract(x[0], self._x, out=d[0])
        np.matmul(d.reshape(-1, 3), inv.astype(x.dtype), out=q.reshape(-1, 3))
        np.abs(q, out=q)
        # flat indices, not a reduction over the length-3 axis (several times slower)
        jump_atoms = np.unique(np.flatnonzero(np.greater(q, 0.5, out=mask)) // 3)
        st.raw_jumps += int(jump_atoms.size)
        if self.mode in ("none", "unwrapped"):
            return x
        if self._off is None:
            self._off = self._u - self._x
        np.add(x, self._off, out=u)
        if jump_atoms.size:
            frame, atom = np.divmod(jump_atoms, n)
            before = np.where((frame == 0)[:, None], self._x[atom],
                              x[np.maximum(frame - 1, 0), atom]).astype(np.float64)
            step = x[frame, atom].astype(np.float64) - before
            inc = -np.rint(step @ inv) @ cell  # (jumps, 3)
            st.sum_d2 += float(np.sum((step + inc) ** 2 - step**2))
            _add_from_frames(u.reshape(b, -1), self._off.reshape(-1), np.repeat(frame, 3),
                             (3 * atom[:, None] + np.arange(3)).ravel(), inc.ravel())
        st.sum_d2 += float(np.einsum("bij,bij->", d, d))
        st.n_d += d.size
        return u

    def _work(self, shape: tuple[int, ...], dtype: np.dtype
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Work arrays of `shape`, reused from block to block: the steps (`dtype`, that of
        the coordinates), the continuous coordinates (float64) and a boolean mask.

        Fresh block-sized arrays would be page-faulted in on every block, which costs more
        than the arithmetic; the result of :meth:`unwrap` may be one of these, so it is
        valid until the next call.
        """
        have = self._work_arrays
        if (have is None or have[0].shape[0] < shape[0] or have[0].shape[1:] != shape[1:]
                or have[0].dtype != dtype):
            have = (np.empty(shape, dtype=dtype), np.empty(shape), np.empty(shape, dtype=bool))
            self._work_arrays = have
        b = shape[0]
        return have[0][:b], have[1][:b], have[2][:b]

    def _unwrap_constant(self, x: np.ndarray, box: np.ndarray | None) -> np.ndarray:
        """No box, or a box constant so far: minimum-image steps of the raw coordinates.

        For a constant box the minimum image of a raw step equals that of the step between
        the wrapped coordinates (they differ by whole box lengths), and adding the corrected
        steps one after another is adding ``-L round(d / L)`` to a per-coordinate offset:
        ``u(t) = x(t) + o(t)``, ``o(t) = o(t-1) - L round([x(t) - x(t-1)] / L)``. The offsets
        change only where a step is longer than half a box (a few per cent of the steps of
        wrapped coordinates), so the dense work is one difference, one comparison and one
        addition per coordinate; the offsets are whole multiples of L, so ``u`` is exact.
        Coordinates are independent, so big blocks are split into lanes of atoms worked on
        in threads (numpy releases the GIL); the result does not depend on the lanes.
        """
        st = self.stats
        if box is None:
            return x if self.mode != "displacement" else x.copy()
        b = x.shape[0]
        d, u, mask = self._work(x.shape, x.dtype)
        disp = self.mode == "displacement"
        if disp and self._off is None:
            self._off = self._u - self._x
        flat = [a.reshape(b, -1) for a in (x, d, u, mask)]
        prev, half = self._x.reshape(-1), self._half_tile.reshape(-1)
        off = self._off.reshape(-1) if disp and self._off is not None else None
        ncols = flat[0].shape[1]
        n_lanes = min(available_cpus(), max(1, (b * ncols) // _LANE_VALUES))
        edges = [3 * ((ncols // 3) * i // n_lanes) for i in range(n_lanes + 1)]

        def lane(k: int) -> tuple[float, int]:
            sl = slice(edges[k], edges[k + 1])
            return self._constant_lane(*(a[:, sl] for a in flat), prev[sl], half[sl],
                                       None if off is None else off[sl], sl.start)

        for sum_d2, jumps in lane_map(lane, range(n_lanes)):
            st.sum_d2 += sum_d2
            st.raw_jumps += jumps
        if not disp:
            return x
        st.n_d += d.size
        return u

    def _constant_lane(self, x: np.ndarray, d: np.ndarray, u: np.ndarray, mask: np.ndarray,
                       prev: np.ndarray, half: np.ndarray, off: np.ndarray | None,
                       start: int) -> tuple[float, int]:
        """One lane of :meth:`_unwrap_constant`: 2-D views (frames, coordinates) of the block,
        the work arrays, the previous frame, half the box and the offsets (None: only count
        the jumps) of coordinates ``start ...``. Returns (sum of squared steps, raw jumps)."""
        # raw steps in the coordinates' own precision: only compared with half a box here;
        # the steps that matter are recomputed in float64 below
        np.subtract(x[1:], x[:-1], out=d[1:])
        np.subtract(x[0], prev, out=d[0])
        # einsum, not a BLAS dot: multithreaded BLAS level-1 calls stall on a busy machine
        sum_d2 = float(np.einsum("ij,ij->", d, d)) if off is not None else 0.0
        np.abs(d, out=d)
        jumps = np.flatnonzero(np.greater(d, half, out=mask))
        if off is None:
            return sum_d2, int(jumps.size)
        np.add(x, off, out=u)
        if jumps.size:
            m = x.shape[1]
            frame, col = np.divmod(jumps, m)
            before = np.empty(jumps.size)
            first = frame == 0
            before[first] = prev[col[first]]
            before[~first] = x[frame[~first] - 1, col[~first]]
            step = x[frame, col] - before
            length = self._box0[(start + col) % 3]
            inc = -length * np.rint(step / length)
            # the rms step counts the corrected steps, not the raw jumps
            sum_d2 += float(np.sum((step + inc) ** 2 - step**2))
            _add_from_frames(u, off, frame, col, inc)
        return sum_d2, int(jumps.size)

    def _unwrap_fluctuating(self, x: np.ndarray, box: np.ndarray) -> np.ndarray:
        """Fluctuating box: wrap each frame into its own box, minimum image in the later."""
        st = self.stats
        xs = np.concatenate([self._x[None], x]).astype(np.float64, copy=False)
        if self.mode != "images":
            st.raw_jumps += int(np.count_nonzero(np.abs(np.diff(xs, axis=0))
                                                 > 0.5 * box[:, None, :]))
        if self.mode == "none":
            return x
        ws = _wrap(xs, np.concatenate([self._last_box[None], box])[:, None, :])
        d = np.diff(ws, axis=0)
        d -= box[:, None, :] * np.rint(d / box[:, None, :])
        st.sum_d2 += float(np.einsum("bij,bij->", d, d))
        st.n_d += d.size
        return self._u + np.cumsum(d, axis=0)

    def _unwrap_images(self, x: np.ndarray, box: np.ndarray | None,
                       images: np.ndarray | None) -> np.ndarray:
        """u(t+1) = u(t) + [x(t+1) - x(t)] + [n(t+1) - n(t)] L(t+1)."""
        assert box is not None and images is not None and self._n is not None
        xs = np.concatenate([self._x[None], x]).astype(np.float64, copy=False)
        ns = np.concatenate([self._n[None], images])
        steps = np.diff(xs, axis=0) + np.diff(ns, axis=0) * box[:, None, :]
        self._n = images[-1].copy()
        return self._u + np.cumsum(steps, axis=0)

    # -- the spacing check ------------------------------------------------------------------
    def check_applies(self) -> bool:
        st = self.stats
        if self.mode != "displacement":
            return False
        return self.explicit or st.raw_jumps > 0 or st.box_changed

    def step_rms(self) -> float:
        st = self.stats
        return math.sqrt(st.sum_d2 / st.n_d) if st.n_d else 0.0

    def check(self, final: bool = False) -> None:
        st = self.stats
        if st.n_d == 0 or (st.frames < 4 and not final) or not self.check_applies():
            return
        rms = self.step_rms()
        if rms > MAX_STEP_FRACTION * st.min_box:
            raise InputError(
                f"frames are too far apart to unwrap wrapped coordinates: the rms "
                f"displacement of a coordinate between frames is {rms / st.min_box:.3g} of "
                f"the shortest box length (above {MAX_STEP_FRACTION:.3g}, steps cannot be "
                "assigned to the right periodic image reliably)",
                path=self.path,
                expected="frames written often enough that atoms move much less than half a "
                         "box between them",
                fix="write frames more often, or write unwrapped coordinates (xu yu zu) or "
                    "image flags (ix iy iz); if the coordinates are already unwrapped use "
                    "--unwrap none",
            )

    def scheme_label(self) -> str:
        st = self.stats
        if self.mode == "none":
            return "none"
        if self.mode == "images":
            return "image flags"
        if self.mode == "unwrapped":
            return "unwrapped coordinates"
        if st.switched_at is not None:
            return ("displacement (unwrapped coordinates re-wrapped: the box fluctuates; "
                    "von Bülow et al. 2020)")
        if not self.explicit and st.raw_jumps == 0 and not st.box_changed:
            return "none (coordinates are continuous)"
        return "displacement (minimum-image steps; von Bülow et al. 2020)"

    # -- a block: unwrap, centre of mass, particles ------------------------------------------
    def block(self, x: np.ndarray, box: np.ndarray | None, images: np.ndarray | None,
              v: np.ndarray | None, cells: np.ndarray | None = None
              ) -> dict[str, np.ndarray | None]:
        """Particle positions/velocities, system COM and its velocity, 2 KE, for B frames."""
        u = self.unwrap(x, box, images, cells)
        out: dict[str, np.ndarray | None] = {
            "pos": u if self._identity else self.particles.reduce(u),
            "com": np.matmul(self.masses, u) / self.mtot,
            "box": box,
            "pv": None, "vcom": None, "twoke": None,
        }
        if v is not None and self.want_v:
            vcom = np.matmul(self.masses, v) / self.mtot
            out["pv"] = v if self._identity else self.particles.reduce(v)
            out["vcom"] = vcom
            v2 = np.einsum("bnk,bnk->bn", v, v)
            out["twoke"] = v2 @ self.masses - self.mtot * np.einsum("bk,bk->b", vcom, vcom)
        return out


def _cell_vectors(dims: np.ndarray) -> np.ndarray:
    """Box vectors (B, 3, 3), rows a, b, c, from lengths and angles (B, 6) in degrees.

    The usual convention (a along x, b in the xy plane), as MDAnalysis's
    ``triclinic_vectors`` builds them (checked against it in the tests).
    """
    a, b, c = dims[:, 0], dims[:, 1], dims[:, 2]
    cos_al, cos_be, cos_ga = np.cos(np.radians(dims[:, 3:6])).T
    sin_ga = np.sin(np.radians(dims[:, 5]))
    h = np.zeros((dims.shape[0], 3, 3))
    h[:, 0, 0] = a
    h[:, 1, 0] = b * cos_ga
    h[:, 1, 1] = b * sin_ga
    h[:, 2, 0] = c * cos_be
    h[:, 2, 1] = c * (cos_al - cos_be * cos_ga) / sin_ga
    h[:, 2, 2] = np.sqrt(np.maximum(c * c - h[:, 2, 0] ** 2 - h[:, 2, 1] ** 2, 0.0))
    return h


def _cell_heights(cells: np.ndarray) -> np.ndarray:
    """Distances between opposite faces of each cell (B, 3): volume over face area."""
    a, b, c = cells[:, 0], cells[:, 1], cells[:, 2]
    vol = np.abs(np.einsum("bi,bi->b", a, np.cross(b, c)))
    faces = np.stack([np.cross(b, c), np.cross(c, a), np.cross(a, b)], axis=1)
    return vol[:, None] / np.linalg.norm(faces, axis=2)


def _block_boxes(dims: np.ndarray, need: bool, path: Path, first_frame: int
                 ) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Box lengths (B, 3) and, for triclinic boxes, box vectors (B, 3, 3), in file units,
    from MDAnalysis dimensions (B, 6).

    (None, None) when a frame has no box and none is needed; cells only when unwrapping
    needs them (`need`) and some frame's angles differ from 90 degrees.
    """
    ok = np.all(dims[:, :3] > 0, axis=1)  # False for NaN
    if not ok.all():
        if need:
            raise InputError(
                f"the trajectory has no periodic box (frame {first_frame + int(np.argmin(ok))})",
                path=str(path), expected="box dimensions in every frame",
                fix="use a format that stores the box, or --unwrap none with unwrapped "
                    "coordinates",
            )
        return None, None
    lengths = dims[:, :3].copy()
    tilted = np.any(np.abs(dims[:, 3:] - 90.0) > 1e-3, axis=1)
    if not (need and tilted.any()):
        return lengths, None
    return lengths, _cell_vectors(dims)


def _add_from_frames(u: np.ndarray, off: np.ndarray, frame: np.ndarray, col: np.ndarray,
                     inc: np.ndarray) -> None:
    """Add each jump's increment `inc` to ``u[frame:, col]`` and to the carried offsets.

    `u` is a 2-D view (frames, coordinates) of a block, `off` the per-coordinate offsets
    carried to the next block (both changed in place); each (frame, col) pair occurs once.
    Only the columns that jump are touched: their increments are summed down the frames.
    """
    b, m = u.shape
    # the columns that jump, and each jump's place among them: a mark per column costs
    # less than sorting the jumps when they are many for the columns
    if 8 * col.size >= m:
        marked = np.zeros(m, dtype=np.intp)
        marked[col] = 1
        cols = np.flatnonzero(marked)
        which = (np.cumsum(marked) - 1)[col]
    else:
        cols, which = np.unique(col, return_inverse=True)
    grow = np.zeros((b, cols.size))
    grow[frame, which] = inc
    np.cumsum(grow, axis=0, out=grow)
    u[:, cols] += grow
    off[cols] += grow[-1]
