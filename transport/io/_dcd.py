"""Plain DCD files read a block of frames at a time, straight from the file.

MDAnalysis turns each DCD frame into a Timestep of its own; for the fixed-size frame records
of the plain CHARMM/NAMD/LAMMPS layout one ``readinto`` and a structured dtype give a block
of frames at once. The fast path is taken only after the first and last frames read this
way equal MDAnalysis's reading of the same file (:func:`_bulk_dcd`); every record length is
checked as the frames are read.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError

__all__ = ["_DCDFrames", "_DCDLayout", "_LammpsDCD", "_bulk_dcd", "_dcd_dimensions",
           "_dcd_layout", "_dcd_partial_tail", "_lammps_dcd"]

#: The title remark LAMMPS writes into every DCD header (``dump dcd``).
LAMMPS_REMARK = b"Written by LAMMPS"


@dataclass(frozen=True)
class _LammpsDCD:
    """What the header of a DCD written by LAMMPS says about time.

    LAMMPS stores its own integration time step (``update->dt``) in the header's time-step
    field, in the time unit of the run's ``units`` style (fs for ``real``, ps for ``metal``,
    tau for ``lj``), and the step numbers of the first frame and between frames. Readers of
    the format (MDAnalysis among them) take that field in CHARMM's AKMA time unit
    (48.88821 fs), which puts the frames 48.9x too far apart for ``units real`` and 20x too
    close for ``units metal``. The file does not say which ``units`` style the run used.
    """

    delta: float  # integration time step, in the run's own time unit
    istart: int  # step number of the first frame
    nsavc: int  # steps between frames


def _lammps_dcd(p: Path) -> _LammpsDCD | None:
    """The time fields of a DCD file whose title remarks say LAMMPS wrote it, else None."""
    try:
        with open(p, "rb") as fh:
            head = fh.read(4096)
        for end in "<>":
            if len(head) < 100 or struct.unpack(end + "i", head[:4])[0] != 84 \
                    or head[4:8] != b"CORD":
                continue
            ic = struct.unpack(end + "9if10i", head[8:88])
            title_bytes = struct.unpack(end + "i", head[92:96])[0]
            if LAMMPS_REMARK not in head[96: 96 + max(0, title_bytes)]:
                return None
            return _LammpsDCD(float(ic[9]), int(ic[1]), int(ic[2]) or 1)
    except (OSError, struct.error):
        return None
    return None


@dataclass(frozen=True)
class _DCDLayout:
    """Where the frames of a plain DCD file are: the header's size and one frame's records.

    The layout (Fortran records, each framed by its byte count: a control record of 20
    integers, titles, the atom count, then per frame an optional unit cell of 6 doubles and
    the x, y, z records of float32) is the CHARMM/NAMD/LAMMPS DCD format as documented with
    those programs (from memory). Files with fixed atoms or a fourth dimension are not
    "plain" here.
    """

    endian: str  # "<" or ">"
    header: int  # bytes before the first frame
    n_atoms: int
    cell: bool  # each frame starts with a unit-cell record
    istart: int  # step number of the first frame (control record)
    nsavc: int  # steps between frames (control record)
    size: int  # file size in bytes

    @property
    def frame_dtype(self) -> np.dtype:
        """One frame as a structured record (markers, cell, coordinates)."""
        e, n = self.endian, self.n_atoms
        fields: list[tuple[str, str] | tuple[str, str, int]] = []
        if self.cell:
            fields += [("c0", e + "i4"), ("cell", e + "f8", 6), ("c1", e + "i4")]
        for ax in "xyz":
            fields += [(ax + "0", e + "i4"), (ax, e + "f4", n), (ax + "1", e + "i4")]
        return np.dtype(fields)

    @property
    def frame_bytes(self) -> int:
        return self.frame_dtype.itemsize

    def whole_frames(self) -> tuple[int, int]:
        """(whole frames in the file, bytes left after them)."""
        return divmod(self.size - self.header, self.frame_bytes)


def _dcd_layout(p: Path) -> _DCDLayout | None:
    """The :class:`_DCDLayout` of a DCD file, or None if its header is not the plain one."""
    try:
        size = p.stat().st_size
        with open(p, "rb") as fh:
            head = fh.read(4096)
        for end in "<>":
            if len(head) < 92 or struct.unpack(end + "i", head[:4])[0] != 84 \
                    or head[4:8] != b"CORD":
                continue
            ic = struct.unpack(end + "20i", head[8:88])
            if struct.unpack(end + "i", head[88:92])[0] != 84:
                return None
            pos = 92
            title_bytes = struct.unpack(end + "i", head[pos: pos + 4])[0]
            if struct.unpack(end + "i", head[pos + 4 + title_bytes: pos + 8 + title_bytes]
                             )[0] != title_bytes:
                return None
            pos += 8 + title_bytes
            marker, natoms, after = struct.unpack(end + "3i", head[pos: pos + 12])
            if marker != 4 or after != 4 or natoms < 1:
                return None
            pos += 12
            if ic[8] != 0 or ic[11] != 0:  # fixed atoms (first frame differs) or 4-D
                return None
            return _DCDLayout(end, pos, natoms, bool(ic[10] and ic[19]), ic[1],
                              ic[2] or 1, size)
    except (OSError, struct.error, IndexError):
        return None
    return None


def _dcd_partial_tail(p: Path, n_frames: int, n_atoms: int) -> int | None:
    """Bytes after the last whole frame of a DCD file (0 if it ends cleanly); None when its
    layout is not the plain one (see :class:`_DCDLayout`) or does not match the reader's
    frame and atom counts."""
    lay = _dcd_layout(p)
    if lay is None or lay.n_atoms != n_atoms:
        return None
    whole, tail = lay.whole_frames()
    return tail if whole == n_frames else None


def _dcd_dimensions(cells: np.ndarray) -> np.ndarray | None:
    """MDAnalysis's box dimensions (B, 6) from raw DCD unit cells (B, 6), or None.

    The raw record is ``[A, cos gamma, B, cos beta, cos alpha, C]`` (angles as cosines,
    CHARMM and NAMD > 2.5) or with angles in degrees (NAMD 2.5); the box-matrix form of
    newer CHARMM versions gives None (the caller then reads frame by frame). This follows
    the conversion MDAnalysis applies to each frame it reads; the caller checks the result
    against MDAnalysis's own frames.
    """
    uc = cells[:, [0, 2, 5, 4, 3, 1]].astype(np.float64)
    ang = uc[:, 3:]
    cosines = np.all((ang >= -1.0) & (ang <= 1.0), axis=1)
    degrees = ~cosines & ~np.any((uc < 0.0) | np.c_[np.zeros((uc.shape[0], 3), bool),
                                                     ang > 180.0], axis=1)
    if not np.all(cosines | degrees):
        return None
    ang[cosines] = 90.0 - np.arcsin(ang[cosines]) * 90.0 / (np.pi / 2)
    # MDAnalysis keeps dimensions in float32: rounded the same way, the series does not
    # depend on which reader took the frames
    return uc.astype(np.float32).astype(np.float64)


class _DCDFrames:
    """Reads blocks of frames of a plain DCD file straight into the reader's buffers.

    MDAnalysis turns a DCD frame into its Timestep one at a time (~40 us per frame of
    1,000 atoms, more than the file read); here a block of frames is one read and one
    vectorised copy. Used only after :meth:`matches` has compared the first and last
    frames (positions, box, time) with MDAnalysis's reader of the same file.
    """

    def __init__(self, path: Path, lay: _DCDLayout, n_frames: int,
                 time_of: Any) -> None:
        self.path = path
        self.lay = lay
        self.n_frames = n_frames
        self.time_of = time_of  # frame index (array) -> time in the file's unit (ps)
        self._dtype = lay.frame_dtype
        self._fh = open(path, "rb")  # closed by close()
        self._buf = bytearray()
        self._cell: tuple[np.ndarray, np.ndarray | None] | None = None  # last raw cell

    def close(self) -> None:
        self._fh.close()

    def read(self, first: int, count: int) -> tuple[np.ndarray, np.ndarray | None]:
        """Frames ``first .. first+count-1``: structured records and their box dimensions
        (None without unit cells)."""
        nbytes = count * self._dtype.itemsize
        if len(self._buf) < nbytes:
            self._buf = bytearray(nbytes)
        self._fh.seek(self.lay.header + first * self._dtype.itemsize)
        view = memoryview(self._buf)[:nbytes]
        got = self._fh.readinto(view)
        if got != nbytes:
            raise InputError(
                f"the DCD file ended while frame {first + got // self._dtype.itemsize} was "
                "read (it changed while being read?)",
                path=str(self.path), fix="read the file once the run has finished")
        rec = np.frombuffer(self._buf, dtype=self._dtype, count=count)
        n4 = 4 * self.lay.n_atoms
        checks = [(ax + m, n4) for ax in "xyz" for m in "01"]
        if self.lay.cell:
            checks += [("c0", 48), ("c1", 48)]
        for field, want in checks:
            bad = rec[field] != want
            if bad.any():
                k = first + int(np.argmax(bad))
                raise InputError(
                    f"DCD frame {k} is damaged: a record length reads "
                    f"{int(rec[field][k - first])}, expected {want} (byte "
                    f"{self.lay.header + k * self._dtype.itemsize})",
                    path=str(self.path), expected="the fixed frame layout of the header",
                    fix="truncate the file before the damaged frame")
        dims = None
        if self.lay.cell:
            cells = rec["cell"]
            if np.all(cells == cells[0]):  # a constant box: convert one cell, once
                if self._cell is None or not np.array_equal(cells[0], self._cell[0]):
                    self._cell = (cells[0].copy(), _dcd_dimensions(cells[:1]))
                one = self._cell[1]
                dims = None if one is None else np.broadcast_to(one, (count, 6))
            else:
                dims = _dcd_dimensions(cells)
            if dims is None:
                raise InputError("DCD unit cells change form within the file",
                                 path=str(self.path), fix="report this file")
        return rec, dims

    def positions_into(self, rec: np.ndarray, out: np.ndarray) -> None:
        """Interleave the x, y, z records into `out` (B, n_atoms, 3) float32."""
        for i, ax in enumerate("xyz"):
            out[:, :, i] = rec[ax]

    def matches(self, u: Any) -> bool:
        """True if the first and last frames read here equal MDAnalysis's (positions
        exactly, box to 1e-6 relative, times to 1e-9 relative)."""
        if self.n_frames < 1:
            return False
        for i in sorted({0, self.n_frames - 1}):
            ts = u.trajectory[i]
            rec, dims = self.read(i, 1)
            x = np.empty((1, self.lay.n_atoms, 3), dtype=np.float32)
            self.positions_into(rec, x)
            if not np.array_equal(x[0], ts.positions):
                return False
            theirs = ts.dimensions
            if (theirs is None) != (dims is None):
                return False
            if dims is not None and not np.allclose(dims[0], theirs, rtol=1e-6, atol=1e-6):
                return False
            if not math.isclose(self.time_of(i), ts.time, rel_tol=1e-9, abs_tol=1e-12):
                return False
        return True


def _bulk_dcd(u: Any, p: Path) -> _DCDFrames | None:
    """A :class:`_DCDFrames` for the DCD file loaded in `u`, or None (read frame by frame)
    when the file is not a plain DCD or its first and last frames differ from MDAnalysis's.
    """
    if type(u.trajectory).__name__ != "DCDReader" or p.suffix.lower() != ".dcd":
        return None
    lay = _dcd_layout(p)
    n = len(u.trajectory)
    if lay is None or lay.n_atoms != u.atoms.n_atoms or lay.whole_frames()[0] != n:
        return None
    dt = float(u.trajectory.dt)
    frames = _DCDFrames(p, lay, n, lambda i: (i + lay.istart / lay.nsavc) * dt)
    try:
        ok = frames.matches(u)
    except InputError:
        ok = False  # let MDAnalysis's reader meet (and report) the problem
    if not ok:
        frames.close()
        return None
    return frames
