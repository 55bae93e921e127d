"""Trajectories through MDAnalysis: continuous particle positions for self-diffusion.

One pass over the frames turns what a trajectory file stores (wrapped or unwrapped
coordinates, image flags, velocities, the box) into a :class:`~transport.series.PositionSeries`
of continuous positions in internal units (m and s, or reduced Lennard-Jones units), grouped
into particles (atoms, or centres of mass of residues or molecules) and species.

This module holds the entry points, :func:`load_trajectory` (files) and
:func:`positions_from_arrays` (arrays in memory). The parts they are built from:

* :mod:`transport.io._universe`: opening files (checks, formats, MDAnalysis universes, the
  private links that keep MDAnalysis's caches out of the user's folder, units and frame
  times of each format);
* :mod:`transport.io.unwrapping`: continuous coordinates (engine-unwrapped columns, image
  flags, minimum-image steps under fixed or fluctuating, orthorhombic or triclinic boxes)
  and the spacing check [1]_;
* :mod:`transport.io.grouping`: atoms, types, residues or molecules as particles and
  species, centres of mass;
* :mod:`transport.io._collect`: the frame loop, block buffers, float32 storage (in memory or
  a scratch file), time checks and the resulting series.

Units: MDAnalysis reports lengths in Angstrom, times in ps and velocities in Angstrom/ps
(converting from the formats that store other units); these are converted to SI. LAMMPS
dump files have no unit metadata: their numbers are in the engine units named by `units`.
With ``units="lj"`` no conversion at all is applied and the numbers are taken as reduced
units.

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
import math
import os
import warnings as _warnings
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from ..checks import temperature_plausible
from ..errors import InputError, Note
from ..series import PositionSeries
from ..units import UnitSystem, get_unit_system
from ._collect import _Collector, _read_series
from ._dump_atoms import _type_key, parse_masses
from ._frames import _mda_error
from ._universe import _check_file, _open_atoms, _PrivateLinks
from .grouping import GROUP_BY, GroupBy, _build_particles, _Particles
from .unwrapping import UNWRAP_SCHEMES, Unwrap, _FrameProcessor

__all__ = [
    "GROUP_BY",
    "UNWRAP_SCHEMES",
    "load_trajectory",
    "positions_from_arrays",
    "split_inputs",
    "trajectory_log",
]

_AMU = 1.66053906660e-27  # kg, CODATA 2018 atomic mass constant (= scipy.constants.atomic_mass)


def split_inputs(files: Sequence[str | os.PathLike[str]]
                 ) -> tuple[str | os.PathLike[str] | None, list[str | os.PathLike[str]]]:
    """``(topology or None, trajectories)`` from the files of one command line.

    One file is a trajectory that describes its atoms itself (a LAMMPS dump with ``id`` and
    ``type`` columns, or a multi-frame GRO, PDB, ...). Of several files the first is the
    topology, unless every one is a LAMMPS dump (then they are all trajectories, and the
    first frame of the first lists the atoms).
    """
    from ._dump_atoms import is_dump

    fs = list(files)
    if not fs:
        raise ValueError("no file given")
    if len(fs) == 1 or all(Path(f).is_file() and is_dump(Path(f)) for f in fs):
        return None, fs
    return fs[0], fs[1:]


def trajectory_log(trajectory: str | os.PathLike[str], *, units: object = None,
                   timestep: float | None = None, frame_interval: float | None = None
                   ) -> str | None:
    """The ``log.lammps`` beside a LAMMPS dump, when the dump's units or time step are not
    given, or beside a DCD written by LAMMPS, when its units are not given (None otherwise,
    or when there is none)."""
    from ._dcd import _lammps_dcd
    from ._dump_atoms import is_dump
    from ._run_log import find_run_log

    p = Path(trajectory)
    if not p.is_file():
        return None
    if is_dump(p):
        if units is not None and (timestep is not None or frame_interval is not None):
            return None
    elif not (p.suffix.lower() == ".dcd" and units is None and timestep is None
              and frame_interval is None and _lammps_dcd(p) is not None):
        return None
    found = find_run_log(p)
    return None if found is None else str(found)


def _memory_default() -> float:
    try:
        avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        avail = 4 * 2**30
    return 0.5 * float(avail)


def load_trajectory(
    topology: str | os.PathLike[str] | None,
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
    masses: str | Mapping[str, float] | None = None,
    log: str | os.PathLike[str] | None = None,
    memory_limit: float | None = None,
    scratch_dir: str | os.PathLike[str] | None = None,
    progress: bool = False,
) -> list[PositionSeries]:
    """Read trajectories into continuous particle positions in internal units.

    Parameters
    ----------
    topology : path or None
        Any topology MDAnalysis reads (PDB, GRO, PSF, TPR, LAMMPS data, ...; the atom style
        of a LAMMPS data file is taken from its ``Atoms # style`` comment), or a LAMMPS dump
        whose first frame lists the atoms. None: the first trajectory describes its atoms
        itself: a LAMMPS dump with ``id`` and ``type`` columns (and ``mol``, ``mass``,
        ``element``, ``q`` when present; see :mod:`transport.io._dump_atoms`), or a
        multi-frame GRO, PDB or other file MDAnalysis reads on its own.
    trajectories : path or sequence of paths
        Trajectory files (DCD, XTC, TRR, LAMMPS dump, optionally gzip-compressed, ...). Each
        file is an independent replica, unless `continuation` is set.
    select : str
        MDAnalysis selection string of the atoms to analyse.
    group_by : {"atom", "type", "residue", "molecule"}
        Particles and species: the selected atoms as one species (``atom``), atoms by type
        (``type``), or centres of mass of residues (``residue``) or of bonded molecules
        (fragments, ``molecule``). Residues and molecules are named by residue name, else by
        composition: formula from elements (``C6H14``) or types with counts
        (``t1x2-t2x4``); see :mod:`transport.io.grouping`.
    unwrap : {"auto", "none", "images", "displacement"}
        How continuous positions are obtained (see :mod:`transport.io.unwrapping`).
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
    masses : str or mapping, optional
        Mass per atom type in the engine's mass unit (g/mol for ``real`` and ``metal``):
        ``"1=12.011,2=1.008"`` or ``{"1": 12.011, "2": 1.008}``; they replace the
        topology's masses of those types. Centres of mass (``group_by`` ``residue`` or
        ``molecule``) need a mass for every selected atom.
    log : path, optional
        The run's LAMMPS log: its ``units``, ``timestep`` and ``dump`` commands supply the
        unit style and time step not given as `units` and `timestep` (see
        :func:`transport.io.log_settings`); a note says what was taken from it.
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
    top = None if topology is None else _check_file(topology, "topology")
    paths = [_check_file(t, "trajectory") for t in trajs]
    mass_map = parse_masses(masses)
    settings_notes: list[str] = []
    log_masses: dict[str, float] = {}
    log_every: tuple[int, int | None, str] | None = None
    if log is not None:
        units, timestep, log_masses, log_every = _from_log(
            _check_file(log, "log"), paths[0], units, timestep, frame_interval,
            settings_notes)
    _ask_missing(paths, units, timestep, frame_interval)
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
        u, atoms_file, mass_source = _open_atoms(top, paths[0], reduced, links)
        try:
            out = _series_from(
                u, atoms_file, paths, links, mass_map=mass_map, mass_source=mass_source,
                settings_notes=settings_notes, log_masses=log_masses,
                select=select, group_by=group_by, unwrap=unwrap,
                unit_sys=unit_sys, reduced=reduced, timestep=timestep,
                frame_interval=frame_interval, skip=skip, temperature=temperature,
                continuation=continuation, velocities=velocities,
                memory_limit=_memory_default() if memory_limit is None else float(memory_limit),
                scratch_dir=scratch, progress=progress)
            return _check_dump_interval(out, log_every, timestep, frame_interval)
        finally:
            # close the reader before its private links are deleted
            with contextlib.suppress(Exception):
                u.trajectory.close()


def _from_log(log: Path, first: Path, units: str | UnitSystem | None,
              timestep: float | None, frame_interval: float | None, notes: list[str]
              ) -> tuple[str | UnitSystem | None, float | None, dict[str, float],
                         tuple[int, int | None, str] | None]:
    """`units` and `timestep`, completed from the run's log, the log's ``mass`` commands
    and its dump interval (steps, line, file name); what was taken goes to `notes`."""
    from ._run_log import log_settings

    rs = log_settings(log, first)
    taken = []
    if units is None and rs.units is not None:
        try:
            get_unit_system(rs.units)
        except ValueError:
            raise InputError(f"the log sets units {rs.units!r}, which is not known here",
                             path=str(log), line=rs.units_line,
                             expected="units real, metal, lj, si, ...",
                             fix="pass --units with the convention the numbers are in"
                             ) from None
        units = rs.units
        taken.append(f"units {rs.units} (line {rs.units_line})")
    elif units is not None and rs.units is not None:
        given = units if isinstance(units, str) else units.name
        if given.lower() != rs.units:
            notes.append(f"--units {given} differs from the log's units {rs.units} "
                         f"({log.name} line {rs.units_line}); --units is used")
    if timestep is None and frame_interval is None and rs.timestep is not None:
        timestep = rs.timestep
        taken.append(f"timestep {rs.timestep:g}" + (
            f" (line {rs.timestep_line})" if rs.timestep_line else
            f" (the default of units {rs.units})"))
    if rs.dump_every is not None:
        taken.append(f"dump every {rs.dump_every} steps (line {rs.dump_line})")
    notes.append(Note(f"run settings from {log}: " + (", ".join(taken) if taken else
                                                       "none needed")))
    every = None if rs.dump_every is None else (rs.dump_every, rs.dump_line, log.name)
    return units, timestep, rs.masses, every


def _check_dump_interval(out: list[PositionSeries],
                         log_every: tuple[int, int | None, str] | None,
                         timestep: float | None, frame_interval: float | None
                         ) -> list[PositionSeries]:
    """A warning on each series whose frames are not the log's dump interval apart (the
    log may be of another run)."""
    import dataclasses

    if log_every is None or timestep is None or frame_interval is not None:
        return out
    every, line, name = log_every
    checked = []
    for s in out:
        steps = s.dt / (timestep * (1.0 if s.units.reduced else s.units.time))
        if abs(steps - every) > 1e-6 * every:
            s = dataclasses.replace(s, warnings=(*s.warnings, (
                f"frames are {steps:.6g} steps apart, but the log's dump command says every "
                f"{every} ({name} line {line}): is the log of this run?")))
        checked.append(s)
    return checked


def _ask_missing(paths: list[Path], units: str | UnitSystem | None,
                 timestep: float | None, frame_interval: float | None) -> None:
    """One error listing every setting a LAMMPS dump needs and nobody gave."""
    from ._dump_atoms import is_dump

    if not is_dump(paths[0]):
        return
    missing = []
    if units is None:
        missing.append("--units STYLE (the run's units style: real, metal, lj, ...)")
    if timestep is None and frame_interval is None:
        missing.append("--timestep DT (the integration time step, in the style's time unit)"
                       " or --frame-interval")
    if missing:
        raise InputError(
            "LAMMPS dumps state neither their units nor the time between steps, and no "
            "log gave them" if len(missing) == 2 else
            "LAMMPS dumps do not state " + ("their units" if units is None else
                                            "the time between steps") +
            ", and no log gave it", path=str(paths[0]),
            expected="the run's " + " and ".join(m.split(" (")[0].split()[0].lstrip("-")
                                                 for m in missing),
            fix="pass " + " and ".join(missing) + ", or --log FILE (the run's LAMMPS log)")


def _series_from(u: Any, top: Path, paths: list[Path], links: _PrivateLinks, *,
                 mass_map: dict[str, float], mass_source: str | None,
                 settings_notes: list[str], log_masses: dict[str, float], select: str,
                 group_by: str, unwrap: str, unit_sys: UnitSystem | None,
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
    notes: list[str] = list(settings_notes)
    masses_raw, masses_known = _atom_masses(u, top, sel, group_by, mass_map, log_masses,
                                            mass_source, notes)
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
            kinetic_temperature=masses_known or reduced,
        ))
    return out


def _atom_masses(u: Any, top: Path, sel: Any, group_by: str, mass_map: dict[str, float],
                 log_masses: dict[str, float], mass_source: str | None, notes: list[str]
                 ) -> tuple[np.ndarray, bool]:
    """Mass of every atom (engine mass unit) and whether all are known: the topology's,
    with `mass_map` per type, and the log's ``mass`` commands for types still without one.

    Unknown masses are refused when centres of mass need them (``residue``, ``molecule``);
    for single atoms they serve only the drift removal, where equal weights are used, with
    a note.
    """
    try:
        m = np.asarray(u.atoms.masses, dtype=np.float64).copy()
    except Exception:  # MDAnalysis NoDataError: no masses in the topology
        m = np.zeros(u.atoms.n_atoms)
    types = np.asarray(u.atoms.types).astype(str)
    if mass_map:
        absent = sorted(set(mass_map) - set(types.tolist()), key=_type_key)
        if absent:
            raise InputError(
                f"--masses names type(s) {', '.join(absent)}, which the atoms do not have "
                f"(types: {', '.join(sorted(set(types.tolist()), key=_type_key)[:12])})",
                path=str(top), expected="the atom types of the topology",
                fix="give masses for the types listed")
        for t, mass in mass_map.items():
            m[types == t] = mass
        notes.append(Note(f"masses of type(s) {', '.join(sorted(mass_map, key=_type_key))} "
                          "from --masses"))
    m = np.where(np.isfinite(m) & (m > 0), m, 0.0)
    from_log = sorted({t for t in types[m <= 0].tolist() if t in log_masses}, key=_type_key)
    for t in from_log:
        m[types == t] = log_masses[t]
    if from_log:
        notes.append(Note(f"masses of type(s) {', '.join(from_log)} from the log's mass "
                          "commands"))
    sel_idx = np.asarray(sel.indices, dtype=np.intp)
    unknown = m[sel_idx] <= 0
    if np.any(unknown) and group_by in ("residue", "molecule"):
        kinds = sorted(set(types[sel_idx][unknown].tolist()), key=_type_key)
        where = ("the dump has no mass or element column" if mass_source == "" else
                 "the topology gives none")
        raise InputError(
            f"centres of mass (--group-by {group_by}) need the masses of the atoms, and "
            f"type(s) {', '.join(kinds[:12])} have none ({where})", path=str(top),
            expected="a mass for every selected atom",
            fix="pass --masses " + ",".join(f"{t}=MASS" for t in kinds[:6]) +
                " (engine mass unit, g/mol for real and metal), or dump the mass column")
    known = bool(np.all(m > 0))
    if not np.any(m > 0):
        m = np.ones(u.atoms.n_atoms)
        notes.append("the atoms have no masses: all weigh the same for the drift removal, "
                     "and the temperature is not taken from the velocities of a run in "
                     "physical units (give --masses or --temperature)")
    elif mass_source and not mass_map:
        notes.append(Note(f"masses from the dump's {mass_source}"))
    return m, known


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
        Frames too far apart for the displacement scheme (see
        :mod:`transport.io.unwrapping`).
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
