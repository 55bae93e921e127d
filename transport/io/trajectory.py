"""Trajectories through MDAnalysis: continuous particle positions for self-diffusion.

One pass over the frames turns what a trajectory file stores (wrapped or unwrapped
coordinates, image flags, velocities, the box) into a :class:`~transport.series.PositionSeries`
of continuous positions in internal units (m and s, or reduced Lennard-Jones units), grouped
into particles (atoms, or centres of mass of residues or molecules) and species.

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

Memory and speed: the frames are copied, one copy per frame, into a block of about 2^17
coordinates (float32, as MDAnalysis gives them), and each block is unwrapped in float64 with
reused work arrays (fresh block-sized arrays would be page-faulted in every time), reduced to
particles and scaled to internal units on its way into the store; for a constant box the
block is split into lanes of atoms worked on in threads. Plain DCD files (the CHARMM, NAMD
and LAMMPS layout of fixed-size frame records) are read a whole block of frames at a time
straight from the file (:mod:`transport.io._dcd`), several times faster than MDAnalysis's
frame-by-frame Timesteps; this is used only after the first and last frames read that way
have been compared with MDAnalysis's reader of the same file (positions exactly, box,
time), and every record length is checked. MDAnalysis's XTC/TRR decoder holds the GIL, so
for big XTC/TRR files on Linux a forked child process decodes the later 60% of the frames
into shared memory while this process decodes and processes the rest
(:mod:`transport.io._frames`; the environment variable ``TRANSPORT_NO_FORK`` turns this
off; a child that fails is replaced by reading its frames here). Positions (and velocities) are
stored as float32, in memory or, when they would exceed `memory_limit`, in a scratch
:class:`numpy.memmap` file that is deleted when no longer referenced.

Inputs are only read: MDAnalysis's XTC and TRR readers would write an offsets cache and a
lock file beside the trajectory, so those formats are opened through a link in a private
temporary folder (see :class:`_PrivateLinks`), deleted afterwards.

Units: MDAnalysis reports lengths in Angstrom, times in ps and velocities in Angstrom/ps
(converting from the formats that store other units); these are converted to SI here. LAMMPS
dump files have no unit metadata: their numbers are in the engine units named by `units`.
With ``units="lj"`` no conversion at all is applied (MDAnalysis's own conversion is switched
off) and the numbers are taken as reduced units.

References
----------
.. [1] M. von Bülow, J. T. Bullerjahn and G. Hummer, "Systematic errors in diffusion
   coefficients from long-time molecular dynamics simulations at constant pressure",
   J. Chem. Phys. 153, 021101 (2020).
.. [2] R. J. Gowers et al., "MDAnalysis: a Python package for the rapid analysis of molecular
   dynamics simulations", Proc. 15th Python in Science Conf., 98 (2016); N. Michaud-Agrawal
   et al., J. Comput. Chem. 32, 2319 (2011).
"""

from __future__ import annotations

import contextlib
import gc
import math
import os
import re
import shutil
import sys
import tempfile
import warnings as _warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np
from numpy.typing import ArrayLike

from .._memory import bulk_empty
from .._parallel import available_cpus, lane_map
from ..checks import temperature_plausible
from ..errors import InputError, Note
from ..series import PositionSeries, Source
from ..units import UnitSystem, get_unit_system
from ._dcd import _bulk_dcd, _lammps_dcd
from ._frames import (
    _c_stderr_held,
    _fork_split,
    _ForkedFrames,
    _frames,
    _mda_error,
    _unread_tail,
)

__all__ = [
    "GROUP_BY",
    "UNWRAP_SCHEMES",
    "load_trajectory",
    "positions_from_arrays",
]

GroupBy = Literal["atom", "type", "residue", "molecule"]
Unwrap = Literal["auto", "none", "images", "displacement"]

#: Accepted values of ``group_by``.
GROUP_BY: tuple[str, ...] = ("atom", "type", "residue", "molecule")
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
_ANGSTROM = 1e-10
_PS = 1e-12
_AMU = 1.66053906660e-27  # kg, CODATA 2018 atomic mass constant (= scipy.constants.atomic_mass)


# ---------------------------------------------------------------------------------------
# the one-pass frame processor (shared by files and in-memory arrays)
# ---------------------------------------------------------------------------------------


@dataclass
class _Particles:
    """How selected atoms form particles and species."""

    atom_index: np.ndarray  # indices (into all atoms) of the selected atoms
    weights: Any  # None (each selected atom is a particle) or sparse (P x n_sel) matrix
    species: np.ndarray
    species_names: tuple[str, ...]
    masses: np.ndarray  # per particle, engine mass unit
    atoms_per_particle: np.ndarray

    @property
    def n(self) -> int:
        return int(self.species.size)

    def is_identity(self, n_atoms: int) -> bool:
        """True if the particles are all atoms in order (positions need no copy)."""
        return (self.weights is None and self.atom_index.size == n_atoms
                and bool(np.all(self.atom_index == np.arange(n_atoms))))

    def reduce(self, a: np.ndarray) -> np.ndarray:
        """Particle values (B, P, 3) from atom values (B, n_atoms, 3)."""
        sel = a[:, self.atom_index]
        if self.weights is None:
            return sel
        b, n_sel, _ = sel.shape
        flat = sel.transpose(1, 0, 2).reshape(n_sel, b * 3)
        return np.asarray(self.weights @ flat).reshape(-1, b, 3).transpose(1, 0, 2)


class _Store:
    """Float32 frames x particles x 3 storage, in memory or in a deleted scratch file."""

    def __init__(self, n_frames: int, n_part: int, memory_limit: float,
                 scratch_dir: str | None, n_arrays: int) -> None:
        nbytes = n_frames * n_part * 3 * 4
        self.spilled = nbytes * n_arrays > memory_limit
        self.n_frames = n_frames
        if self.spilled:
            folder = scratch_dir or tempfile.gettempdir()
            fd, name = tempfile.mkstemp(prefix="transport-positions-", suffix=".f32",
                                        dir=folder)
            os.close(fd)
            try:
                self.array: np.ndarray = np.memmap(name, dtype=np.float32, mode="w+",
                                                   shape=(n_frames, n_part, 3))
            finally:
                # the mapping keeps the data alive; the name disappears at once, so nothing
                # is left behind whatever happens next
                Path(name).unlink(missing_ok=True)
        else:
            self.array = bulk_empty((n_frames, n_part, 3), np.float32, populate=True,
                                    huge_pages=True)

    def finish(self, n_used: int) -> np.ndarray:
        a = self.array[:n_used]
        if self.spilled and isinstance(a, np.memmap):
            a.flush()
        return a


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


# ---------------------------------------------------------------------------------------
# building particles from an MDAnalysis selection
# ---------------------------------------------------------------------------------------


def _weights_matrix(owner: np.ndarray, masses: np.ndarray, n_part: int):
    """Sparse (n_part x n_sel) matrix of mass fractions: particle COM = W @ atom positions."""
    from scipy import sparse

    tot = np.bincount(owner, weights=masses, minlength=n_part)
    counts = np.bincount(owner, minlength=n_part)
    w = np.where(tot[owner] > 0, masses / np.where(tot[owner] > 0, tot[owner], 1.0),
                 1.0 / counts[owner])
    mat = sparse.csr_matrix((w, (owner, np.arange(owner.size))), shape=(n_part, owner.size))
    return mat, tot, counts


def _species_codes(labels: Sequence[str]) -> tuple[np.ndarray, tuple[str, ...]]:
    names = tuple(dict.fromkeys(labels))
    index = {n: i for i, n in enumerate(names)}
    return np.array([index[s] for s in labels], dtype=np.intp), names


def _composition(types: np.ndarray) -> str:
    kinds, counts = np.unique(types.astype(str), return_counts=True)
    return "".join(f"{k}{c if c > 1 else ''}" for k, c in zip(kinds, counts, strict=True))


def _build_particles(u: Any, sel: Any, group_by: str, selection: str, masses_all: np.ndarray,
                     path: str) -> _Particles:
    idx = np.asarray(sel.indices, dtype=np.intp)
    m = masses_all[idx]
    if group_by in ("atom", "type"):
        if group_by == "atom":
            labels = [selection] * idx.size
        else:
            labels = [f"type {t}" for t in np.asarray(sel.types).astype(str)]
        codes, names = _species_codes(labels)
        return _Particles(idx, None, codes, names, m, np.ones(idx.size, dtype=np.intp))
    if group_by == "residue":
        owner_raw = np.asarray(sel.resindices)
        resnames = getattr(sel, "resnames", None)
        if resnames is None:
            keys = np.asarray(sel.resids).astype(str)
            label_of = {int(r): "residue" for r in owner_raw}
        else:
            keys = np.asarray(resnames).astype(str)
            label_of = dict(zip(owner_raw.tolist(), keys.tolist(), strict=True))
    else:  # molecule
        try:
            owner_raw = np.asarray(sel.fragindices)
        except Exception:  # MDAnalysis raises NoDataError without bonds
            raise InputError(
                "grouping by molecule needs bonds in the topology, and it has none",
                path=path,
                expected="a topology with bonds (PSF, TPR, LAMMPS data with a Bonds "
                         "section, PDB with CONECT records)",
                fix="use --group-by residue, or give a topology that lists bonds",
            ) from None
        types = np.asarray(sel.types).astype(str)
        try:
            resn = np.asarray(sel.resnames).astype(str)
        except Exception:
            resn = None
        label_of = {}
        order = np.argsort(owner_raw, kind="stable")
        bounds = np.flatnonzero(np.diff(owner_raw[order])) + 1
        for chunk in np.split(order, bounds):
            key = int(owner_raw[chunk[0]])
            if resn is not None and np.unique(resn[chunk]).size == 1 and resn[chunk[0]] \
                    not in ("", "UNK", "SYSTEM"):
                label_of[key] = str(resn[chunk[0]])
            else:
                label_of[key] = _composition(types[chunk])
    uniq, owner = np.unique(owner_raw, return_inverse=True)
    mat, tot, counts = _weights_matrix(owner, m, uniq.size)
    labels = [label_of[int(k)] for k in uniq]
    codes, names = _species_codes(labels)
    return _Particles(idx, mat, codes, names, tot, counts.astype(np.intp))


# ---------------------------------------------------------------------------------------
# opening files with MDAnalysis
# ---------------------------------------------------------------------------------------

_ATOM_STYLES = {
    "atomic": "id type x y z",
    "charge": "id type charge x y z",
    "bond": "id resid type x y z",
    "angle": "id resid type x y z",
    "molecular": "id resid type x y z",
    "full": "id resid type charge x y z",
}
_DATA_ATOMS = re.compile(rb"^\s*Atoms\s*#\s*(\w+)", re.MULTILINE)


#: Formats whose MDAnalysis readers write cache files beside the trajectory (frame offsets of
#: the XDR formats: ``.<name>_offsets.npz`` and a ``.lock`` file).
_CACHE_WRITING_SUFFIXES = (".xtc", ".trr")


class _PrivateLinks:
    """Open trajectories through symbolic links in a private temporary folder.

    MDAnalysis's XTC and TRR readers store an index of frame offsets (and a lock file) beside
    the file they open, and have no switch to keep it in memory only (``refresh_offsets``
    rebuilds the index but still saves it). Opening a link in a private folder sends those
    files there; the folder is deleted afterwards, so the user's folder is never written to.
    An offsets file already beside the input is copied in (read, not changed), which spares
    the scan of the file; MDAnalysis checks that it still matches the trajectory.
    """

    def __init__(self, scratch_dir: str | None) -> None:
        self._scratch = scratch_dir
        self._dir: str | None = None
        self._links: dict[Path, Path] = {}

    def __enter__(self) -> _PrivateLinks:
        return self

    def __exit__(self, *exc: object) -> None:
        if self._dir is not None:
            shutil.rmtree(self._dir, ignore_errors=True)
            self._dir = None

    def path(self, p: Path) -> Path:
        """The path to open for `p` (a private link for formats that write caches)."""
        if not p.name.lower().endswith(_CACHE_WRITING_SUFFIXES):
            return p
        if p in self._links:
            return self._links[p]
        if self._dir is None:
            self._dir = tempfile.mkdtemp(prefix="transport-read-", dir=self._scratch)
        sub = Path(self._dir) / str(len(self._links))
        sub.mkdir()
        link = sub / p.name
        target = p.resolve()
        try:
            os.symlink(target, link)
        except OSError:  # no symbolic links here (some Windows setups): read a copy
            shutil.copyfile(target, link)
        cache = target.parent / f".{target.name}_offsets.npz"
        if cache.is_file():
            try:
                shutil.copyfile(cache, sub / f".{p.name}_offsets.npz")
            except OSError:
                pass  # only a speed-up
        self._links[p] = link
        return link


def _check_file(path: str | os.PathLike[str], what: str) -> Path:
    p = Path(path)
    if not p.exists():
        raise InputError(f"{what} file not found", path=str(p),
                         fix="check the path and the spelling")
    if p.is_dir():
        raise InputError(f"{what} is a directory, not a file", path=str(p),
                         fix="give the file inside the directory")
    try:
        with open(p, "rb"):
            pass
    except OSError as exc:
        raise InputError(f"{what} file cannot be read ({exc.strerror})", path=str(p),
                         fix="check the file permissions") from None
    if p.stat().st_size == 0:
        raise InputError(f"{what} file is empty", path=str(p),
                         fix="check that the run wrote its output to this file")
    return p


def _head(p: Path, n: int = 1 << 16) -> bytes:
    from ._open import read_head

    return read_head(p, n)[0]


def _topology_kwargs(p: Path) -> dict[str, Any]:
    """Parser options MDAnalysis cannot guess: the atom style of a LAMMPS data file."""
    name = p.name.lower()
    if not name.endswith((".data", ".lmp", ".data.gz", ".lammps-data")):
        return {}
    head = _head(p, 1 << 20)
    m = _DATA_ATOMS.search(head)
    if m:
        style = m.group(1).decode("ascii", "replace").lower()
        if style in _ATOM_STYLES:
            return {"atom_style": _ATOM_STYLES[style]}
    return {}


@dataclass(frozen=True)
class _DumpInfo:
    convention: str  # MDAnalysis lammps_coordinate_convention
    unwrapped: bool
    images: bool
    velocities: bool


def _dump_info(p: Path) -> _DumpInfo | None:
    """Columns of a LAMMPS dump (None if `p` is not a dump)."""
    head = _head(p)
    if not head.lstrip().startswith(b"ITEM: TIMESTEP"):
        return None
    m = re.search(rb"^ITEM: ATOMS ([^\n]*)", head, re.MULTILINE)
    if m is None:
        raise InputError("LAMMPS dump has no 'ITEM: ATOMS' header in its first frame",
                         path=str(p), expected="a dump custom file with per-atom columns")
    cols = m.group(1).decode("ascii", "replace").split()
    have = set(cols)
    if {"xu", "yu", "zu"} <= have:
        conv, unwrapped = "unwrapped", True
    elif {"xsu", "ysu", "zsu"} <= have:
        conv, unwrapped = "scaled_unwrapped", True
    elif {"x", "y", "z"} <= have:
        conv, unwrapped = "unscaled", False
    elif {"xs", "ys", "zs"} <= have:
        conv, unwrapped = "scaled", False
    else:
        raise InputError(
            f"LAMMPS dump has no coordinate columns (columns: {' '.join(cols)})",
            path=str(p), expected="x y z, xu yu zu, xs ys zs or xsu ysu zsu",
            fix="dump the coordinates with 'dump custom ... id type xu yu zu' or x y z ix iy iz",
        )
    if "id" not in have:
        raise InputError("LAMMPS dump has no 'id' column", path=str(p),
                         expected="an id column (atoms are matched to the topology by id)",
                         fix="add id to the dump custom columns")
    return _DumpInfo(conv, unwrapped, {"ix", "iy", "iz"} <= have,
                     {"vx", "vy", "vz"} <= have)


def _ignore_unraisable(_: Any) -> None:
    return None


def _mda_call(fn: Any) -> tuple[Any, str | None]:
    """``(fn(), None)``, or ``(None, message)`` if MDAnalysis raised.

    MDAnalysis's warnings are silenced; so are the complaints of objects it leaves half
    built when it fails (a reader whose ``__del__`` raises, e.g. the H5MD reader without
    h5py): they are freed here, with the exception, while the hook that would print their
    tracebacks is switched off, so an input error reaches the user as one line.
    """
    hook = sys.unraisablehook
    sys.unraisablehook = _ignore_unraisable
    try:
        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                return fn(), None
        except Exception as exc:
            message = _mda_error(exc)
        gc.collect()  # what the exception kept alive goes now, not later at exit
        return None, message
    finally:
        sys.unraisablehook = hook


def _missing_package(message: str) -> str | None:
    """The package an MDAnalysis error asks to install, if any."""
    m = re.search(r"install (?:the )?([A-Za-z][\w.-]*)", message)
    return m.group(1) if m else None


def _open_topology(topology: Path, reduced: bool, *, first: Path | None = None,
                   links: _PrivateLinks | None = None) -> Any:
    """A Universe of `topology`; with `first`, that trajectory already loaded when possible.

    Opening topology and trajectory together spares MDAnalysis reading the coordinates a
    PDB or GRO topology also holds (0.1 s for 10^4 atoms); when that fails, or for LAMMPS
    files (which need parser and reader options of their own), the topology is opened
    alone so that an error names the right file.
    """
    import MDAnalysis as mda

    kw = _topology_kwargs(topology)
    if first is not None and links is not None and not kw:
        try:
            plain = _dump_info(first) is None
        except InputError:
            plain = False
        if plain:
            both, _ = _mda_call(lambda: mda.Universe(
                str(topology), str(links.path(first)),
                **({"convert_units": False} if reduced else {})))
            if both is not None:
                return both
            # otherwise opened one by one below: the error then names the culprit
    u, message = _mda_call(lambda: mda.Universe(str(topology), **kw))
    if message is not None:
        package = _missing_package(message)
        if package is None and "mock" in message.lower() and "h5py" in message.lower():
            # MDAnalysis stands a mock in for a missing h5py; its error names the mock
            package, message = "h5py", "h5py is not installed"
        raise InputError(
            f"cannot read the topology ({message})",
            path=str(topology),
            expected="a topology MDAnalysis reads (PDB, GRO, PSF, TPR, LAMMPS data, ...)",
            fix=(f"install the package MDAnalysis needs for this format: pip install "
                 f"{package}" if package else
                 "check the file and its suffix (MDAnalysis chooses the parser by suffix)"),
        )
    return u


def _load_trajectory_into(u: Any, traj: Path, reduced: bool, links: _PrivateLinks
                          ) -> _DumpInfo | None:
    dump = _dump_info(traj)
    kw: dict[str, Any] = {}
    if reduced:
        kw["convert_units"] = False
    if dump is not None:
        kw.update(format="LAMMPSDUMP", lammps_coordinate_convention=dump.convention)
        if dump.images:
            kw["additional_columns"] = ["ix", "iy", "iz"]
    opened = links.path(traj)

    def load() -> int:
        u.load_new(str(opened), **kw)
        _ = len(u.trajectory)
        return int(u.trajectory.n_atoms)

    n_atoms, message = _mda_call(load)
    if message is not None:
        msg = message.replace(str(opened), str(traj))
        if "atoms" in msg.lower() and ("match" in msg.lower() or "same number" in msg.lower()):
            raise InputError(
                f"the trajectory does not match the topology ({msg})",
                path=str(traj),
                expected=f"{u.atoms.n_atoms} atoms, as in the topology",
                fix="give the topology this trajectory was written with",
            )
        package = _missing_package(msg)
        raise InputError(
            f"cannot read the trajectory ({msg})",
            path=str(traj),
            expected="a trajectory MDAnalysis reads (DCD, XTC, TRR, NetCDF, LAMMPS dump, ...)",
            fix=(f"install the package MDAnalysis needs for this format: pip install "
                 f"{package}" if package else "check the file and its suffix"),
        )
    if n_atoms != u.atoms.n_atoms:
        raise InputError(
            f"the trajectory has {n_atoms} atoms, the topology {u.atoms.n_atoms}",
            path=str(traj),
            expected="the same atoms in topology and trajectory",
            fix="give the topology this trajectory was written with",
        )
    return dump


# ---------------------------------------------------------------------------------------
# public API
# ---------------------------------------------------------------------------------------


def _memory_default() -> float:
    try:
        avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        avail = 4 * 2**30
    return 0.5 * float(avail)


def load_trajectory(
    topology: str | os.PathLike[str],
    trajectories: str | os.PathLike[str] | Sequence[str | os.PathLike[str]],
    *,
    select: str = "all",
    group_by: GroupBy = "atom",
    unwrap: Unwrap = "auto",
    units: str | UnitSystem | None = None,
    timestep: float | None = None,
    frame_interval: float | None = None,
    skip: float = 0.0,
    temperature: float | None = None,
    continuation: bool = False,
    velocities: bool = True,
    memory_limit: float | None = None,
    scratch_dir: str | os.PathLike[str] | None = None,
    progress: bool = False,
) -> list[PositionSeries]:
    """Read trajectories into continuous particle positions in internal units.

    Parameters
    ----------
    topology : path
        Any topology MDAnalysis reads (PDB, GRO, PSF, TPR, LAMMPS data, ...). The atom style
        of a LAMMPS data file is taken from its ``Atoms # style`` comment.
    trajectories : path or sequence of paths
        Trajectory files (DCD, XTC, TRR, LAMMPS dump, optionally gzip-compressed, ...). Each
        file is an independent replica, unless `continuation` is set.
    select : str
        MDAnalysis selection string of the atoms to analyse.
    group_by : {"atom", "type", "residue", "molecule"}
        Particles and species: the selected atoms as one species (``atom``), atoms by type
        (``type``), centres of mass of residues by residue name (``residue``), or centres of
        mass of bonded molecules (fragments) by residue name or composition (``molecule``).
    unwrap : {"auto", "none", "images", "displacement"}
        How continuous positions are obtained (see the module notes).
    units : str or UnitSystem, optional
        The engine's unit convention. Required for LAMMPS dumps (they do not state their
        units). ``"lj"`` keeps reduced units. For other formats it only sets the unit of
        `timestep` and `frame_interval` (default ps).
    timestep : float, optional
        Integration time step, in the engine's time unit: frame times are step numbers
        (stored in dumps, XTC/TRR and DCD headers) times `timestep`.
    frame_interval : float, optional
        Time between frames, in the engine's time unit (overrides the file's times).
    skip : float
        Initial time to drop, in s (or tau), measured from the first frame.
    temperature : float, optional
        Temperature in K (or reduced). Default: the mean kinetic temperature from the
        velocities, when the trajectory has them.
    continuation : bool
        Treat the files as consecutive parts of one run (a frame repeated at a boundary is
        read once); the unwrapping continues across parts.
    velocities : bool
        Read velocities when the trajectory has them.
    memory_limit : float, optional
        Bytes of float32 positions and velocities kept in memory before they are spilled to
        a scratch file (default: half the available memory).
    scratch_dir : path, optional
        Folder for the scratch file (default: the system's temporary folder).
    progress : bool
        Show a progress bar over the frames.

    Returns
    -------
    list of PositionSeries
        One series per replica (one in all with `continuation`).

    Raises
    ------
    InputError
        Missing or unreadable files, a trajectory that does not match the topology, an empty
        selection, unknown frame times, or frames too far apart to unwrap.

    References
    ----------
    .. [1] von Bülow, Bullerjahn & Hummer, J. Chem. Phys. 153, 021101 (2020).
    """
    if group_by not in GROUP_BY:
        raise ValueError(f"group_by must be one of {GROUP_BY}, got {group_by!r}")
    if unwrap not in UNWRAP_SCHEMES:
        raise ValueError(f"unwrap must be one of {UNWRAP_SCHEMES}, got {unwrap!r}")
    trajs = [trajectories] if isinstance(trajectories, (str, os.PathLike)) else list(
        trajectories)
    if not trajs:
        raise ValueError("no trajectory given")
    top = _check_file(topology, "topology")
    paths = [_check_file(t, "trajectory") for t in trajs]
    unit_sys = None if units is None else get_unit_system(units)
    reduced = bool(unit_sys is not None and unit_sys.reduced)
    for name, val in (("timestep", timestep), ("frame_interval", frame_interval),
                      ("temperature", temperature)):
        if val is not None and not (np.isfinite(val) and val > 0):
            raise InputError(f"{name} is {val!r}", expected=f"a positive {name}",
                             fix=f"pass a positive --{name.replace('_', '-')}")
    if temperature is not None:
        temperature_plausible(float(temperature), reduced=reduced)
    if not (np.isfinite(skip) and skip >= 0):
        raise InputError(f"skip is {skip!r}", expected="a non-negative time",
                         fix="pass a non-negative --skip")
    scratch = None if scratch_dir is None else str(scratch_dir)
    with _PrivateLinks(scratch) as links:
        u = _open_topology(top, reduced, first=paths[0], links=links)
        try:
            return _series_from(
                u, top, paths, links, select=select, group_by=group_by, unwrap=unwrap,
                unit_sys=unit_sys, reduced=reduced, timestep=timestep,
                frame_interval=frame_interval, skip=skip, temperature=temperature,
                continuation=continuation, velocities=velocities,
                memory_limit=_memory_default() if memory_limit is None else float(memory_limit),
                scratch_dir=scratch, progress=progress)
        finally:
            # close the reader before its private links are deleted
            with contextlib.suppress(Exception):
                u.trajectory.close()


def _series_from(u: Any, top: Path, paths: list[Path], links: _PrivateLinks, *,
                 select: str, group_by: str, unwrap: str, unit_sys: UnitSystem | None,
                 reduced: bool, timestep: float | None, frame_interval: float | None,
                 skip: float, temperature: float | None, continuation: bool,
                 velocities: bool, memory_limit: float, scratch_dir: str | None,
                 progress: bool) -> list[PositionSeries]:
    """The selection, particles and species of `u`, then one series per replica."""
    if not select.strip():
        raise InputError("--select is empty (no selection string)", path=None,
                         expected="an MDAnalysis selection string",
                         fix="pass --select all (the default), or e.g. 'type 1' or "
                             "'resname SOL'")
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            sel = u.select_atoms(select)
    except Exception as exc:
        raise InputError(f"selection {select!r} is not valid ({_mda_error(exc)})",
                         path=str(top), expected="an MDAnalysis selection string",
                         fix="see the MDAnalysis selection syntax, e.g. 'type 1' or "
                             "'resname SOL'") from None
    if sel.n_atoms == 0:
        raise InputError(f"selection {select!r} matches no atoms", path=str(top),
                         expected="at least one atom",
                         fix="check the selection against the names/types in the topology")
    notes: list[str] = []
    try:
        masses_raw = np.asarray(u.atoms.masses, dtype=np.float64)
    except Exception:  # MDAnalysis NoDataError: no masses in the topology
        masses_raw = np.zeros(u.atoms.n_atoms)
    if not np.any(masses_raw > 0):
        masses_raw = np.ones(u.atoms.n_atoms)
        notes.append("the topology has no masses: all atoms weigh the same for centres of "
                     "mass and drift removal")
    masses_raw = np.where(masses_raw > 0, masses_raw, 0.0)
    particles = _build_particles(u, sel, group_by, select, masses_raw, str(top))
    if particles.n == 1 and particles.atoms_per_particle[0] > 1:
        raise InputError(
            f"grouping by {group_by} makes one particle of all {sel.n_atoms} selected atoms "
            "(the topology defines no separate residues or molecules), whose centre of mass "
            "cannot diffuse once the drift is removed",
            path=str(top), expected="several residues or molecules in the selection",
            fix="use --group-by atom or --group-by type",
        )
    mass_factor = 1.0 if reduced else _AMU
    groups = [paths] if continuation else [[p] for p in paths]
    out = []
    for part_paths in groups:
        out.append(_read_series(
            u, top, part_paths, links=links, particles=particles, group_by=group_by,
            select=select, unwrap=unwrap, unit_sys=unit_sys, reduced=reduced,
            timestep=timestep, frame_interval=frame_interval, skip=skip,
            temperature=temperature, want_velocities=velocities, memory_limit=memory_limit,
            scratch_dir=scratch_dir, progress=progress, masses_all=masses_raw,
            mass_factor=mass_factor, notes=tuple(notes),
        ))
    return out


def _factors(dump: _DumpInfo | None, unit_sys: UnitSystem | None, reduced: bool,
             path: Path) -> tuple[float, float]:
    """(length factor, velocity factor) from the numbers MDAnalysis gives to internal units."""
    if reduced:
        return 1.0, 1.0
    if dump is not None:
        if unit_sys is None:
            raise InputError(
                "LAMMPS dump files do not state their units",
                path=str(path), expected="the engine's unit convention",
                fix="pass --units (real, metal, lj, si, ...)",
            )
        return unit_sys.length, unit_sys.length / unit_sys.time
    if unit_sys is not None and _is_dcd(path) and _lammps_dcd(path) is not None:
        # LAMMPS writes DCD coordinates in the run's own length unit (Angstrom for real
        # and metal, m for si, nm for nano, ...); MDAnalysis leaves DCD numbers as they are
        return unit_sys.length, unit_sys.length / unit_sys.time
    return _ANGSTROM, _ANGSTROM / _PS


def _is_dcd(path: Path) -> bool:
    return path.suffix.lower() == ".dcd"


@dataclass(frozen=True)
class _Clock:
    """How frame times are found for one file: what is taken from each frame, and the factor.

    ``kind``: ``index`` (frame index x --frame-interval; nothing per frame), ``dcd_step``
    (DCD header: ``istart + frame nsavc`` step numbers x --timestep), ``step`` (step numbers
    stored with each frame x --timestep) or ``time`` (times stored in the file, ps).
    """

    kind: str
    factor: float  # internal time units per unit of the per-frame number
    offset: float  # added to the per-frame number before the factor (DCD istart)
    scale: float  # multiplies the per-frame number (DCD nsavc)
    how: str


def _frame_clock(u: Any, dump: _DumpInfo | None, unit_sys: UnitSystem | None, reduced: bool,
                 timestep: float | None, frame_interval: float | None, path: Path) -> _Clock:
    """The :class:`_Clock` of the file loaded in `u`."""
    tunit = unit_sys.time if unit_sys is not None else _PS
    if frame_interval is not None:
        return _Clock("index", frame_interval * tunit, 0.0, 1.0,
                      "frame index x --frame-interval")
    if timestep is not None:
        how = "step numbers x --timestep"
        if type(u.trajectory).__name__.startswith("DCD"):
            header = getattr(getattr(u.trajectory, "_file", None), "header", None)
            if isinstance(header, dict) and header.get("nsavc"):
                return _Clock("dcd_step", timestep * tunit, float(header.get("istart", 0)),
                              float(header["nsavc"]), how)
        elif u.trajectory.ts.data.get("step") is not None:
            return _Clock("step", timestep * tunit, 0.0, 1.0, how)
        raise InputError(
            "the trajectory stores no step numbers to multiply by the time step",
            path=str(path), expected="step numbers (dump, XTC, TRR, DCD)",
            fix="give the time between frames with --frame-interval instead",
        )
    lammps = (_lammps_dcd(path) if type(u.trajectory).__name__.startswith("DCD")
              else None)
    if lammps is not None:
        # LAMMPS writes its time step in the run's own unit, not in the AKMA unit every DCD
        # reader assumes (frames 48.9x too far apart for `units real`): the header's step
        # is used only in the unit the user names
        if unit_sys is None:
            raise InputError(
                f"DCD written by LAMMPS: its header time step ({lammps.delta:.6g} per step, "
                f"{lammps.nsavc} steps between frames) is in the run's LAMMPS units, which "
                "the file does not state, and would be read as CHARMM time units",
                path=str(path), expected="the run's units style",
                fix="pass --units (the run's LAMMPS units style, e.g. real) or --timestep",
            )
        if not (lammps.delta > 0 and math.isfinite(lammps.delta)):
            raise InputError(
                f"DCD written by LAMMPS with header time step {lammps.delta!r}",
                path=str(path), expected="a positive time step in the header",
                fix="pass --timestep (the integration time step)",
            )
        return _Clock("dcd_step", lammps.delta * tunit, float(lammps.istart),
                      float(lammps.nsavc),
                      f"step numbers x the LAMMPS header time step ({lammps.delta:.6g} "
                      f"{unit_sys.time_label or unit_sys.name})")
    if reduced or dump is not None:
        raise InputError(
            "the time between frames is not known" + (
                " (reduced units)" if reduced else " (LAMMPS dumps store step numbers only)"),
            path=str(path), expected="the integration time step or the frame interval",
            fix="pass --timestep (the integration time step) or --frame-interval",
        )
    return _Clock("time", _PS, 0.0, 1.0, "times stored in the trajectory")


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


def _no_step(frame: int, p: Path) -> InputError:
    return InputError(f"frame {frame} stores no step number", path=str(p),
                      expected="a step number in every frame",
                      fix="give the time between frames with --frame-interval")


def _put(dst: np.ndarray, src: np.ndarray, scale: float) -> None:
    """``dst[...] = src * scale`` in one pass (float64 to the float32 store)."""
    if scale == 1.0:
        dst[...] = src
    else:
        np.multiply(src, scale, out=dst, casting="same_kind")


class _Collector:
    """Keeps the frames after the skipped start: positions, velocities, drift, box, KE."""

    def __init__(self, total: int, n_part: int, skip: float, memory_limit: float,
                 scratch_dir: str | None, path: str | None) -> None:
        self.total = total
        self.n_part = n_part
        self.skip = skip
        self.memory_limit = memory_limit
        self.scratch_dir = scratch_dir
        self.path = path
        self.n_seen = 0
        self.k_skip = 0
        self.t_first = 0.0
        self.dt: float | None = None
        self._pending: list[tuple[np.ndarray, dict]] = []
        self.store_p: _Store | None = None
        self.store_v: _Store | None = None
        self.com: list[np.ndarray] = []
        self.vcom: list[np.ndarray] = []
        self.twoke: list[np.ndarray] = []
        self.boxes: list[np.ndarray] = []
        self.angles: list[np.ndarray] = []  # box angles (degrees) where the reader has them
        self.has_box = True
        self.last_time: float | None = None

    @property
    def frames_given(self) -> int:
        """Frames passed to :meth:`add` so far (including any still pending)."""
        return self.n_seen + sum(p[0].size for p in self._pending)

    def _allocate(self, has_v: bool) -> None:
        n_store = self.total - self.k_skip
        if n_store < 2:
            raise InputError(
                f"skipping {self.skip:.6g} leaves fewer than 2 of {self.total} frames",
                path=self.path, expected="a skip shorter than the run",
                fix="use a shorter --skip")
        arrays = 2 if has_v else 1
        self.store_p = _Store(n_store, self.n_part, self.memory_limit, self.scratch_dir, arrays)
        if has_v:
            self.store_v = _Store(n_store, self.n_part, self.memory_limit, self.scratch_dir,
                                  arrays)

    def _keep(self, first: int, rec: dict) -> None:
        """Store a block whose first frame has global index `first`."""
        b = rec["pos"].shape[0]
        lo = max(0, self.k_skip - first)
        if lo >= b:
            return
        k = first + lo - self.k_skip
        assert self.store_p is not None
        if k + b - lo > self.store_p.n_frames:
            raise InputError("the trajectory has more frames than it announced",
                             path=self.path, fix="check that the file is not being written")
        _put(self.store_p.array[k:k + b - lo], rec["pos"][lo:], rec.get("pos_scale", 1.0))
        if self.store_v is not None:
            _put(self.store_v.array[k:k + b - lo], rec["pv"][lo:], rec.get("vel_scale", 1.0))
            self.vcom.append(rec["vcom"][lo:])
            self.twoke.append(rec["twoke"][lo:])
        self.com.append(rec["com"][lo:])
        if rec["box"] is None:
            self.has_box = False
        else:
            self.boxes.append(rec["box"][lo:])
            if rec.get("angles") is not None:
                self.angles.append(rec["angles"][lo:])

    def add(self, t: np.ndarray, rec: dict) -> None:
        """Add a block of B frames at times `t` (B,) with the processor's outputs `rec`."""
        b = t.size
        if self.dt is None:
            # callers reuse their block buffers: keep copies until dt is known
            self._pending.append((np.array(t), {
                k: np.array(v) if isinstance(v, np.ndarray) else v for k, v in rec.items()}))
            times = np.concatenate([p[0] for p in self._pending])
            if times.size < 2:
                return
            dt = float(times[1] - times[0])
            if not dt > 0:
                raise InputError(
                    f"frame times do not increase ({times[0]:.6g}, {times[1]:.6g})",
                    path=self.path, expected="frames in time order",
                    fix="pass --frame-interval if the stored times are wrong")
            self.dt, self.t_first = dt, float(times[0])
            self.k_skip = int(math.ceil(self.skip / dt - 1e-9)) if self.skip > 0 else 0
            pending, self._pending = self._pending, []
            self._allocate(pending[0][1]["pv"] is not None)
            for tt, rr in pending:
                self.add(tt, rr)
            return
        expect = self.t_first + (self.n_seen + np.arange(b)) * self.dt
        off = np.abs(t - expect) > 1e-3 * self.dt
        if off.any():
            j = int(np.argmax(off))
            raise InputError(
                f"frames are not evenly spaced in time: frame {self.n_seen + j} is at "
                f"{t[j]:.6g}, expected {expect[j]:.6g} (internal time units)",
                path=self.path, expected="a constant time between frames",
                fix="give consecutive parts in order, or pass --frame-interval")
        self._keep(self.n_seen, rec)
        self.n_seen += b
        self.last_time = float(t[-1])

    def _angles(self) -> np.ndarray | None:
        """Box angles per frame, or None for orthorhombic boxes (or unknown angles)."""
        if not self.has_box or not self.angles:
            return None
        ang = np.concatenate(self.angles)
        return ang if np.any(np.abs(ang - 90.0) > 1e-3) else None

    def finish(self) -> dict[str, Any]:
        # three frames at least: a mean-squared displacement needs two lags to fit
        if self.n_seen - self.k_skip < 3 or self.store_p is None or self.dt is None:
            given = max(self.frames_given, self.n_seen)
            kept = f" ({given - self.k_skip} after --skip)" if self.k_skip else ""
            raise InputError(f"the trajectory has {given} frame(s){kept}", path=self.path,
                             expected="at least 3 frames (far more for a diffusion "
                             "coefficient)", fix="give a longer trajectory")
        n = self.n_seen - self.k_skip
        pos = self.store_p.finish(n)
        vel = None if self.store_v is None else self.store_v.finish(n)
        com = np.concatenate(self.com)
        return {
            "positions": pos,
            "velocities": vel,
            "drift": com - com[0],
            "drift_velocity": np.concatenate(self.vcom) if self.vcom else None,
            "twoke": np.concatenate(self.twoke) if self.twoke else None,
            "box": np.concatenate(self.boxes) if self.has_box else None,
            "box_angles": self._angles(),
            "dt": self.dt,
            "t0": self.t_first + self.k_skip * self.dt,
            "spilled": self.store_p.spilled,
        }


def _kinetic_temperature(twoke: np.ndarray | None, n_atoms: int, reduced: bool) -> float | None:
    """Mean kinetic temperature, 2 KE / (k_B (3N - 3)), centre-of-mass motion removed.

    `twoke` is twice the kinetic energy per frame in J (kg m^2/s^2), or reduced units.
    """
    if twoke is None or n_atoms < 2:
        return None
    from ..units import BOLTZMANN

    kb = 1.0 if reduced else BOLTZMANN
    return float(np.mean(twoke) / (kb * (3 * n_atoms - 3)))


class _BlockBuffers:
    """One block of raw frames as read: coordinates, per-frame clock values, boxes, image
    flags and velocities (float64, allocated once and reused)."""

    def __init__(self, size: int, n_atoms: int, images: bool) -> None:
        self.x = np.empty((size, n_atoms, 3), dtype=np.float32)  # as MDAnalysis gives them
        self.t = np.zeros(size)
        self.box = np.full((size, 6), np.nan)
        self.img = np.empty((size, n_atoms, 3)) if images else None
        self.v: np.ndarray | None = None


class _NoBar:
    """Stands in for a progress bar when none is shown (spares importing tqdm)."""

    def __enter__(self) -> _NoBar:
        return self

    def __exit__(self, *exc: object) -> None:
        return None

    def update(self, n: int = 1) -> None:
        return None


def _progress(enabled: bool, total: int, desc: str = "reading frames",
              unit: str = "frame") -> Any:
    if not enabled:
        return _NoBar()
    from .._progress import progress_bar

    return progress_bar(True, total=total, desc=desc, unit=unit)


def _read_series(u: Any, top: Path, paths: list[Path], *, links: _PrivateLinks,
                 particles: _Particles,
                 group_by: str, select: str, unwrap: str, unit_sys: UnitSystem | None,
                 reduced: bool, timestep: float | None, frame_interval: float | None,
                 skip: float, temperature: float | None, want_velocities: bool,
                 memory_limit: float, scratch_dir: str | None, progress: bool,
                 masses_all: np.ndarray, mass_factor: float, notes: tuple[str, ...]
                 ) -> PositionSeries:
    from ._open import FileHash

    hashes = [FileHash(p) for p in paths]
    dumps = []
    lengths = []
    # opening indexes the frames (a compressed dump is decompressed whole: ~10 s for
    # 400 frames of 1372 atoms), so a person at a terminal sees a bar from the start
    opening = _progress(progress, len(paths), desc="opening (indexing frames)", unit="file")
    with opening:
        for p in paths:
            dumps.append(_load_trajectory_into(u, p, reduced, links))
            lengths.append(len(u.trajectory))
            opening.update(1)
    if unwrap == "auto":
        d0 = dumps[0]
        mode = ("unwrapped" if d0 is not None and d0.unwrapped else
                "images" if d0 is not None and d0.images else "displacement")
    else:
        mode = unwrap
    if mode == "images" and not all(d is not None and d.images for d in dumps):
        raise InputError(
            "unwrapping by image flags needs ix iy iz columns, and the trajectory has none",
            path=str(paths[0]), expected="a LAMMPS dump with ix iy iz columns",
            fix="use --unwrap auto or --unwrap displacement",
        )
    proc = _FrameProcessor(mode=mode, explicit=unwrap == "displacement",
                           atom_masses=masses_all, particles=particles,
                           velocities=want_velocities, path=str(paths[0]))
    coll = _Collector(sum(lengths), particles.n, skip, memory_limit, scratch_dir,
                      str(paths[0]))
    n_atoms = u.atoms.n_atoms
    # blocks of about 2^17 coordinates (1 MB in float64): the several passes over a block
    # stay in cache (measured 3.5 ns per coordinate for 10^4 atoms, 6.7 ns with 2^21)
    block_size = max(1, min(64, (1 << 17) // max(1, n_atoms * 3)))
    time_how = ""
    has_v: bool | None = None
    duplicates = 0
    # The frames of a block are copied into reused buffers (one copy per frame, the only
    # per-frame work; a whole block at once from plain DCD files and from the shared memory
    # of a forked XTC/TRR decoder) and processed together. (A helper thread processing one
    # block while the next is read gained nothing: MDAnalysis's frame loop holds the GIL,
    # and the helper waited for it after every numpy call.)
    bb = _BlockBuffers(block_size, n_atoms, mode == "images")
    fill = 0
    cur: dict[str, Any] = {}  # the current file: path, factors, clock, frame index in file

    def flush() -> None:
        """Unwrap, reduce and keep the frames in the block buffers."""
        nonlocal fill
        if not fill:
            return
        b, fill = fill, 0
        p, clock, lf, vf = cur["path"], cur["clock"], cur["lf"], cur["vf"]
        x = bb.x[:b]  # float32 in the file's units: unwrapped as they are, scaled when kept
        if not math.isfinite(float(x.sum())):
            bad = int(np.argmin(np.isfinite(x).reshape(b, -1).all(axis=1)))
            raise InputError(f"frame {cur['frame0'] + bad} has non-finite coordinates",
                             path=str(p), expected="finite coordinates",
                             fix="repair or truncate the trajectory")
        if clock.kind == "index":
            t = (coll.frames_given + np.arange(b)) * clock.factor
        else:
            t = (clock.offset + bb.t[:b] * clock.scale) * clock.factor
        boxes, cells = _block_boxes(bb.box[:b], mode != "none", p, cur["frame0"])
        rec = proc.block(x, boxes, None if bb.img is None else bb.img[:b],
                         None if bb.v is None else bb.v[:b], cells)
        # to internal units: positions and velocities as they are stored, the rest here
        rec.update(pos_scale=lf, vel_scale=vf, com=rec["com"] * lf,
                   box=None if boxes is None else boxes * lf,
                   angles=None if boxes is None else bb.box[:b, 3:].copy())
        if rec["pv"] is not None:
            rec.update(vcom=rec["vcom"] * vf, twoke=rec["twoke"] * vf**2)
        coll.add(t, rec)
        cur["frame0"] += b
        bar.update(b)

    def repeated(ts: Any, clock: _Clock) -> bool:
        """True (and counted) if the first frame of a later part repeats the last one read."""
        nonlocal duplicates
        flush()
        if frame_interval is not None:
            same = np.array_equal(ts.positions, proc.last_raw)
        else:
            kind = clock.kind
            t0 = (clock.offset + (ts.frame if kind == "dcd_step" else
                                  ts.data.get("step", 0) if kind == "step"
                                  else ts.time) * clock.scale) * clock.factor
            same = coll.last_time is not None and math.isclose(
                t0, coll.last_time, rel_tol=1e-9, abs_tol=1e-300)
        if same:
            duplicates += 1
            coll.total -= 1
            cur["frame0"] = 1
            bar.update(1)
        else:
            proc.path = coll.path = str(cur["path"])
        return same

    def take(ts: Any, p: Path, kind: str) -> None:
        """Copy one MDAnalysis frame into the block buffers (processing full blocks)."""
        nonlocal fill, no_positions
        if not ts.has_positions:  # a TRR frame of velocities or forces only
            no_positions += 1
            return
        bb.x[fill] = ts.positions
        if kind == "time":
            bb.t[fill] = ts.time
        elif kind == "dcd_step":
            bb.t[fill] = ts.frame
        elif kind == "step":
            step = ts.data.get("step")
            if step is None:
                raise _no_step(ts.frame, p)
            bb.t[fill] = step
        dims = ts.dimensions
        bb.box[fill] = np.nan if dims is None else dims
        if bb.img is not None:
            bb.img[fill, :, 0] = ts.data["ix"]
            bb.img[fill, :, 1] = ts.data["iy"]
            bb.img[fill, :, 2] = ts.data["iz"]
        if bb.v is not None:
            if not ts.has_velocities:
                raise InputError(
                    f"frame {ts.frame} has no velocities, and earlier frames do",
                    path=str(p), expected="velocities in every frame or in none",
                    fix="read positions only: --vacf no with --temperature (or "
                        "velocities=False)")
            bb.v[fill] = ts.velocities
        fill += 1
        if fill == block_size:
            flush()

    def feed(forked: _ForkedFrames, p: Path, kind: str) -> None:
        """Process the frames a forked decoder left in shared memory, block by block."""
        nonlocal fill
        if kind == "step" and np.isnan(forked.step).any():
            raise _no_step(forked.start + int(np.argmax(np.isnan(forked.step))), p)
        for a in range(0, forked.count, block_size):
            b = min(block_size, forked.count - a)
            bb.x[:b] = forked.x[a:a + b]
            if kind == "time":
                bb.t[:b] = forked.t[a:a + b]
            elif kind == "step":
                bb.t[:b] = forked.step[a:a + b]
            elif kind == "dcd_step":
                bb.t[:b] = forked.start + a + np.arange(b)
            bb.box[:b] = forked.box[a:a + b]
            if bb.v is not None and forked.v is not None:
                bb.v[:b] = forked.v[a:a + b]
            fill = b
            flush()

    file_notes: list[str] = []
    no_positions = 0
    bar = _progress(progress, sum(lengths))
    with bar, _c_stderr_held(not progress):
        for k, (p, dump) in enumerate(zip(paths, dumps, strict=True)):
            if len(paths) > 1:
                _load_trajectory_into(u, p, reduced, links)
            lf, vf = _factors(dump, unit_sys, reduced, p)
            clock = _frame_clock(u, dump, unit_sys, reduced, timestep, frame_interval, p)
            time_how = clock.how
            cur.update(path=p, lf=lf, vf=vf, clock=clock, frame0=0)
            kind = clock.kind
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                bulk = None if bb.v is not None or bb.img is not None else _bulk_dcd(u, p)
                if bulk is not None:
                    with contextlib.closing(bulk):
                        has_v = False if has_v is None else has_v
                        n = bulk.n_frames
                        start = 1 if k > 0 and repeated(u.trajectory[0], clock) else 0
                        for a in range(start, n, block_size):
                            b = min(block_size, n - a)
                            rec, dims = bulk.read(a, b)
                            bulk.positions_into(rec, bb.x[:b])
                            if kind == "time":
                                bb.t[:b] = bulk.time_of(a + np.arange(b))
                            elif kind == "dcd_step":
                                bb.t[:b] = a + np.arange(b)
                            bb.box[:b] = np.nan if dims is None else dims
                            fill = b
                            flush()
                    tail_note = _unread_tail(u, p, n)
                    if tail_note:
                        file_notes.append(tail_note)
                    continue
                if has_v is None:
                    first = u.trajectory[0]
                    has_v = bool(want_velocities and first.has_velocities)
                    if has_v:
                        bb.v = np.empty((block_size, n_atoms, 3), dtype=np.float32)
                n_file = len(u.trajectory)
                split = None if bb.img is not None else _fork_split(
                    u, n_atoms, bool(has_v), memory_limit)
                forked = None
                if split is not None:
                    try:
                        forked = _ForkedFrames(
                            type(u.trajectory), links.path(p),
                            {"convert_units": False} if reduced else {}, split, n_file,
                            n_atoms, bool(has_v))
                    except OSError:  # no fork here after all: read everything below
                        split = None
                seen = 0  # frames of this file taken (or skipped as a repeat)
                try:
                    for i, ts in _frames(u.trajectory, 0, n_file, p):
                        if i == split:
                            break
                        seen = i + 1
                        if k > 0 and i == 0 and repeated(ts, clock):
                            continue
                        take(ts, p, kind)
                except BaseException:
                    if forked is not None:
                        forked.stop()
                    raise
                if forked is not None:
                    flush()
                    if forked.wait(p):
                        feed(forked, p, kind)
                        seen = n_file
                    else:  # the child failed: read its frames here
                        for i, ts in _frames(u.trajectory[split:], split, n_file, p):
                            take(ts, p, kind)
                            seen = i + 1
                if seen < n_file:  # MDAnalysis ends an iteration quietly at a read error
                    raise InputError(
                        f"frame {seen} of {n_file} cannot be read (the file is damaged "
                        "there)", path=str(p), expected="frames MDAnalysis can decode",
                        fix=f"repair the file, or truncate it before frame {seen}")
                tail_note = _unread_tail(u, p, n_file)
                if tail_note:
                    file_notes.append(tail_note)
            flush()
    proc.check(final=True)
    res = coll.finish()
    warn = [*notes, *file_notes]
    if duplicates:
        warn.append(Note(f"{duplicates} frame(s) repeated at the boundary between parts "
                         "were read once"))
    if no_positions:
        warn.append(f"{no_positions} frame(s) without positions (velocities or forces "
                    "only) were skipped")
    if mode == "none" and proc.stats.raw_jumps > 0:
        warn.append(
            f"{proc.stats.raw_jumps} coordinate jump(s) of more than half a box between "
            "frames: the coordinates look wrapped, but --unwrap none was given")
    if res["spilled"]:
        warn.append(Note("positions were kept in a scratch file (larger than the memory "
                         "limit)"))
    temp, temp_src = temperature, "set point given by the user" if temperature else ""
    if temp is None:
        twoke = None if res["twoke"] is None else res["twoke"] * mass_factor  # amu -> kg
        temp = _kinetic_temperature(twoke, n_atoms, reduced)
        if temp is not None:
            temp_src = ("mean kinetic temperature from the velocities (3N - 3 degrees of "
                        "freedom)")
            # the topology formats read here do not say which bonds were constrained
            warn.append(Note(
                f"temperature {temp:.4g} {'(reduced)' if reduced else 'K'} from the "
                f"velocities assumes no constraints (3N - 3 = {3 * n_atoms - 3} degrees of "
                "freedom); with constrained bonds it is too low (rigid 3-site water: by "
                "a third): pass --temperature with the set point"))
    t_unit = "tau" if reduced else "s"
    label = proc.scheme_label()
    sources = tuple(
        Source(
            path=str(p), format=f"trajectory:{type(u.trajectory).__name__}",
            sha256=h.result(),
            description=(
                f"{n} frames; particles: {particles.n} ({group_by}) from selection "
                f"{select!r}; unwrapping: {label}; time: {time_how}; "
                f"frame interval {res['dt']:.6g} {t_unit}"),
            rows=n,
            columns={"topology": str(top)},
        )
        for p, h, n in zip(paths, hashes, lengths, strict=True)
    )
    return PositionSeries(
        positions=res["positions"], dt=res["dt"], box=res["box"],
        box_angles=res["box_angles"],
        species=particles.species, species_names=particles.species_names,
        masses=particles.masses * mass_factor,
        units=unit_sys if unit_sys is not None else get_unit_system("si"),
        velocities=res["velocities"], drift=res["drift"],
        drift_velocity=res["drift_velocity"], temperature=temp,
        temperature_source=temp_src, atoms_per_particle=particles.atoms_per_particle,
        system_atoms=n_atoms, group_by=group_by, selection=select,
        unwrap=label, sources=sources, t0=res["t0"], warnings=tuple(warn),
    )


def positions_from_arrays(
    positions: ArrayLike,
    box: ArrayLike,
    dt: float,
    *,
    unwrap: Unwrap = "auto",
    images: ArrayLike | None = None,
    units: str | UnitSystem = "lj",
    species: ArrayLike | None = None,
    species_names: Sequence[str] | None = None,
    masses: ArrayLike | None = None,
    velocities: ArrayLike | None = None,
    temperature: float | None = None,
    skip: float = 0.0,
    t0: float = 0.0,
    block_frames: int = 256,
) -> PositionSeries:
    """Build a :class:`PositionSeries` from coordinates held in memory.

    The frames go through the same one-pass unwrapping, drift tracking and float32 storage
    as :func:`load_trajectory`, in blocks of frames.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_particles, 3)
        Coordinates in internal length units (m, or sigma), wrapped or not.
    box : array_like, shape (3,) or (n_frames, 3)
        Orthorhombic box lengths (same unit), constant or per frame; the box spans
        ``[0, L)`` in each direction.
    dt : float
        Time between frames (s, or tau).
    unwrap : {"auto", "none", "images", "displacement"}
        ``auto`` uses `images` when given, else the displacement scheme (see the module
        notes).
    images : array_like of int, optional, shape like `positions`
        Image flags n, so that the unwrapped position is ``x + n L`` for a constant box.
    units : str or UnitSystem
        Unit system of the numbers (``lj`` keeps reduced units; ``si`` means m, s, kg).
    species, species_names : optional
        Species code of each particle and the names (default: one species ``all``).
    masses : array_like, optional
        Particle masses (default 1); used for the centre-of-mass drift.
    velocities : array_like, optional
        Velocities (same shape as `positions`).
    temperature : float, optional
        Temperature (K or reduced), recorded for finite-size corrections.
    skip : float
        Initial time to drop (s, or tau).
    t0 : float
        Time of the first frame.
    block_frames : int
        Frames processed together (the result does not depend on it).

    Returns
    -------
    PositionSeries

    Raises
    ------
    InputError
        Frames too far apart for the displacement scheme (see the module notes).
    """
    if unwrap not in UNWRAP_SCHEMES:
        raise ValueError(f"unwrap must be one of {UNWRAP_SCHEMES}, got {unwrap!r}")
    x_all = np.asarray(positions)
    if x_all.ndim != 3 or x_all.shape[2] != 3:
        raise ValueError(f"positions must have shape (n_frames, n_particles, 3), got "
                         f"{x_all.shape}")
    n_frames, n_part, _ = x_all.shape
    box_all = np.broadcast_to(np.asarray(box, dtype=np.float64), (n_frames, 3))
    img = None if images is None else np.broadcast_to(np.asarray(images), x_all.shape)
    mode = unwrap if unwrap != "auto" else ("images" if img is not None else "displacement")
    if mode == "images" and img is None:
        raise ValueError("unwrap='images' needs `images`")
    m = np.ones(n_part) if masses is None else np.broadcast_to(
        np.asarray(masses, dtype=np.float64), (n_part,))
    codes = np.zeros(n_part, dtype=np.intp) if species is None else np.asarray(
        species, dtype=np.intp)
    names = ("all",) if species_names is None else tuple(species_names)
    parts = _Particles(np.arange(n_part), None, codes, names, m, np.ones(n_part, np.intp))
    proc = _FrameProcessor(mode=mode, explicit=unwrap == "displacement", atom_masses=m,
                           particles=parts, velocities=velocities is not None, path=None)
    vel = None if velocities is None else np.asarray(velocities)
    coll = _Collector(n_frames, n_part, skip, math.inf, None, None)
    step = max(1, int(block_frames))
    for a in range(0, n_frames, step):
        b = min(n_frames, a + step)
        rec = proc.block(np.asarray(x_all[a:b], dtype=np.float64), box_all[a:b],
                         None if img is None else np.asarray(img[a:b], dtype=np.float64),
                         None if vel is None else np.asarray(vel[a:b], dtype=np.float64))
        coll.add(t0 + np.arange(a, b) * dt, rec)
    proc.check(final=True)
    res = coll.finish()
    return PositionSeries(
        positions=res["positions"], dt=dt, box=res["box"], species=codes,
        species_names=names, masses=m, units=get_unit_system(units),
        velocities=res["velocities"], drift=res["drift"],
        drift_velocity=res["drift_velocity"], temperature=temperature,
        temperature_source="given" if temperature else "", system_atoms=n_part,
        group_by="atom", selection="all", unwrap=proc.scheme_label(), t0=res["t0"],
    )
