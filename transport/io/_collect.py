"""Frame collection: one pass over the frames of a run into float32 particle positions.

Memory and speed: the frames are copied, one copy per frame, into a block of about 2^17
coordinates (float32, as MDAnalysis gives them), and each block is unwrapped
(:mod:`transport.io.unwrapping`), reduced to particles (:mod:`transport.io.grouping`) and
scaled to internal units on its way into the store. Plain DCD files (the CHARMM, NAMD and
LAMMPS layout of fixed-size frame records) are read a whole block of frames at a time
straight from the file (:mod:`transport.io._dcd`), several times faster than MDAnalysis's
frame-by-frame Timesteps; this is used only after the first and last frames read that way
have been compared with MDAnalysis's reader of the same file (positions exactly, box, time),
and every record length is checked. MDAnalysis's XTC/TRR decoder holds the GIL, so for big
XTC/TRR files on Linux a forked child process decodes the later 60% of the frames into
shared memory while this process decodes and processes the rest (:mod:`transport.io._frames`;
the environment variable ``TRANSPORT_NO_FORK`` turns this off; a child that fails is replaced
by reading its frames here). Positions (and velocities) are stored as float32, in memory or,
when they would exceed `memory_limit`, in a scratch :class:`numpy.memmap` file that is
deleted when no longer referenced (:class:`_Store`). :class:`_Collector` drops the skipped
start, checks that frames are evenly spaced in time and gathers drift, box and kinetic
energy.
"""

from __future__ import annotations

import contextlib
import math
import os
import tempfile
import warnings as _warnings
from pathlib import Path
from typing import Any

import numpy as np

from .._memory import bulk_empty
from ..errors import InputError, Note
from ..series import PositionSeries, Source
from ..units import UnitSystem, get_unit_system
from ._dcd import _bulk_dcd
from ._frames import (
    _c_stderr_held,
    _fork_split,
    _ForkedFrames,
    _frames,
    _unread_tail,
)
from ._universe import (
    _Clock,
    _factors,
    _frame_clock,
    _load_trajectory_into,
    _PrivateLinks,
)
from .grouping import _Particles
from .unwrapping import _block_boxes, _FrameProcessor


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
                 masses_all: np.ndarray, mass_factor: float, notes: tuple[str, ...],
                 kinetic_temperature: bool = True) -> PositionSeries:
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
    if temp is None and kinetic_temperature:  # not with unknown masses
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
