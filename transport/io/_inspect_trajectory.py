"""What a trajectory holds, in words (``transport inspect`` on trajectory files).

:func:`inspect_trajectory` opens one file as the diffusion reader would (a LAMMPS dump with
its atoms from the first frame, any other format through MDAnalysis [1]_, alone) and reports
a JSON-ready record: format, atoms, frames, the time between frames and where it comes
from, the box (shape, first and last, whether it changes: the first, middle and last frames
are compared), wrapped or unwrapped coordinates or image flags, velocities, species (atom
types with counts, molecules), masses, and what ``transport diffusion`` would use.
:func:`describe_trajectory` turns the record into text. Nothing here analyses the motion.

References
----------
.. [1] R. J. Gowers et al., Proc. 15th Python in Science Conf., 98 (2016).
"""

from __future__ import annotations

import contextlib
import os
import textwrap
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..units import get_unit_system

__all__ = ["TRAJECTORY_SUFFIXES", "describe_trajectory", "inspect_trajectory",
           "looks_like_trajectory"]

#: Suffixes read as trajectories by ``inspect`` (besides files that start like a dump).
TRAJECTORY_SUFFIXES = (".dcd", ".xtc", ".trr", ".nc", ".ncdf", ".netcdf", ".gro", ".pdb",
                       ".lammpstrj", ".dump", ".h5md", ".xyz", ".mdcrd", ".crd")
_WIDTH = 100


def looks_like_trajectory(path: str | os.PathLike[str]) -> bool:
    """True for a LAMMPS dump (by content) or a known trajectory suffix."""
    from ._dump_atoms import is_dump

    p = Path(path)
    name = p.name.lower()
    for c in (".gz", ".bz2", ".xz"):
        name = name.removesuffix(c)
    return name.endswith(TRAJECTORY_SUFFIXES) or (p.is_file() and is_dump(p))


def inspect_trajectory(path: str | os.PathLike[str], *, units: str | None = None,
                       timestep: float | None = None, frame_interval: float | None = None,
                       log: str | os.PathLike[str] | None = None) -> dict[str, Any]:
    """A JSON-ready description of the trajectory `path` (see the module notes).

    Parameters
    ----------
    path : path
        The trajectory file.
    units, timestep, frame_interval, log
        As for :func:`transport.io.trajectory.load_trajectory`; without them a LAMMPS dump's
        settings come from a ``log.lammps`` beside it, when there is one.

    Raises
    ------
    InputError
        A file that is missing, empty, or not a trajectory MDAnalysis reads.
    """
    import MDAnalysis as mda

    from ._dump_atoms import dump_universe, is_dump
    from ._universe import (
        _check_file,
        _dump_info,
        _factors,
        _frame_clock,
        _has_atom_kinds,
        _load_trajectory_into,
        _mda_call,
        _PrivateLinks,
    )
    from .trajectory import _from_log, trajectory_log

    p = _check_file(path, "trajectory")
    dumped = is_dump(p)
    rec: dict[str, Any] = {"file": str(p), "notes": []}
    notes: list[str] = rec["notes"]
    found = None if log is not None else trajectory_log(
        p, units=units, timestep=timestep, frame_interval=frame_interval)
    log_path = Path(log) if log is not None else (None if found is None else Path(found))
    log_masses: dict[str, float] = {}
    timestep_given = timestep is not None
    if log_path is not None:
        units, timestep, log_masses, _ = _from_log(_check_file(log_path, "log"), p, units,
                                                   timestep, frame_interval, notes)
        rec["log"] = str(log_path)
    unit_sys = None if units is None else get_unit_system(units)
    reduced = bool(unit_sys is not None and unit_sys.reduced)
    with _PrivateLinks(None) as links:
        mass_source: str | None = None
        if dumped:
            u, mass_source = dump_universe(p)
            dump = _load_trajectory_into(u, p, reduced, links)
            rec["format"] = "LAMMPS dump"
            rec["atoms_from"] = "listed in the first frame of the dump (id, type" + "".join(
                f", {c}" for c in ("mol", "mass", "element", "q")
                if _has(u, {"mol": "molnums", "mass": "masses", "element": "elements",
                            "q": "charges"}[c])) + ")"
        else:
            dump = _dump_info(p)
            kw = {"convert_units": False} if reduced else {}
            u, message = _mda_call(lambda: mda.Universe(str(links.path(p)), **kw))
            if message is not None:
                raise InputError(f"not a trajectory MDAnalysis reads ({message[:160]})",
                                 path=str(p), expected="a trajectory (DCD, XTC, TRR, NetCDF, "
                                                       "GRO, PDB, LAMMPS dump, ...)",
                                 fix="check the file and its suffix")
            rec["format"] = type(u.trajectory).__name__.removesuffix("Reader")
            rec["atoms_from"] = ("listed in the file itself" if _has_atom_kinds(u) else
                                 "not listed in this file: diffusion needs a topology "
                                 "before it")
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                _describe(u, p, dump, unit_sys, reduced, timestep, frame_interval, rec,
                          mass_source, log_masses, _factors, _frame_clock)
            if not timestep_given and timestep is not None:
                rec["time_from"] = rec["time_from"].replace("--timestep",
                                                            "the log's timestep")
                rec["diffusion"] = _would_use(rec)
        finally:
            with contextlib.suppress(Exception):
                u.trajectory.close()
    from ._open import compression_of

    rec["compression"] = compression_of(p)
    return rec


def _has(u: Any, attr: str) -> bool:
    try:
        getattr(u.atoms, attr)
        return True
    except Exception:  # MDAnalysis NoDataError
        return False


def _describe(u: Any, p: Path, dump: Any, unit_sys: Any, reduced: bool,
              timestep: float | None, frame_interval: float | None, rec: dict[str, Any],
              mass_source: str | None, log_masses: dict[str, float], factors: Any,
              frame_clock: Any) -> None:
    n = len(u.trajectory)
    rec["atoms"] = int(u.atoms.n_atoms)
    rec["frames"] = int(n)
    rec["units"] = None if unit_sys is None else unit_sys.name
    tlabel = "tau" if reduced else "ps"
    tscale = 1.0 if reduced else 1e12
    # time between frames
    try:
        clock = frame_clock(u, dump, unit_sys, reduced, timestep, frame_interval, p)
        if n >= 2:
            v = [_clock_value(u, clock, i) for i in (0, 1)]
            rec["frame_interval"] = (v[1] - v[0]) * clock.factor * tscale
        else:
            rec["frame_interval"] = None
        rec["time_unit"] = tlabel
        rec["time_from"] = clock.how
    except InputError as exc:
        rec["frame_interval"] = None
        rec["time_from"] = f"unknown: {exc.message}; fix: {exc.fix}"
    # box at the first, middle and last frames
    try:
        lf, _ = factors(dump, unit_sys, reduced, p)
        lscale = 1.0 if reduced else lf / 1e-9  # MDAnalysis numbers -> nm
        rec["length_unit"] = "sigma" if reduced else "nm"
    except InputError:
        lscale, rec["length_unit"] = 1.0, "the file's own length unit (units not known)"
    dims = []
    for i in sorted({0, n // 2, n - 1}):
        d = u.trajectory[i].dimensions
        dims.append(None if d is None else np.asarray(d, dtype=np.float64))
    if dims[0] is None:
        rec["box"] = None
        rec["box_shape"] = "no box in the file"
    else:
        angles = dims[0][3:]
        rec["box_shape"] = ("orthorhombic" if np.allclose(angles, 90.0, atol=1e-4)
                            else "triclinic")
        rec["box"] = [float(x) * lscale for x in dims[0][:3]]
        rec["box_angles"] = [float(a) for a in angles]
        rec["box_last"] = [float(x) * lscale for x in dims[-1][:3]]
        rec["box_changes"] = bool(any(d is not None and not np.allclose(d, dims[0],
                                                                        rtol=1e-6)
                                      for d in dims[1:]))
    # coordinates and velocities
    u.trajectory[0]
    if dump is not None:
        rec["coordinates"] = ("unwrapped" if dump.unwrapped else
                              "wrapped, with image flags" if dump.images else "wrapped")
        rec["velocities"] = bool(dump.velocities)
    else:
        rec["coordinates"] = "as stored (the format does not say whether wrapped)"
        rec["velocities"] = bool(getattr(u.trajectory.ts, "has_velocities", False))
    rec["continuous_from"] = (
        "the unwrapped coordinates" if dump is not None and dump.unwrapped else
        "the image flags" if dump is not None and dump.images else
        "minimum-image steps between frames (von Bülow, Bullerjahn & Hummer 2020)")
    # species
    try:
        types = np.asarray(u.atoms.types).astype(str)
        kinds, counts = np.unique(types, return_counts=True)
        rec["types"] = {str(k): int(c) for k, c in zip(kinds, counts, strict=True)}
    except Exception:  # MDAnalysis NoDataError
        rec["types"] = None
    molecules = None
    with contextlib.suppress(Exception):
        molecules = int(len(u.atoms.fragments))
    if molecules is None and _has(u, "molnums"):
        molecules = int(np.unique(u.atoms.molnums).size)
    rec["molecules"] = molecules
    try:
        m = np.asarray(u.atoms.masses, dtype=np.float64)
    except Exception:  # MDAnalysis NoDataError
        m = np.zeros(u.atoms.n_atoms)
    if np.all(m > 0):
        rec["masses"] = "known for every atom" + (f" ({mass_source})" if mass_source else "")
    elif rec["types"] and set(rec["types"]) <= set(log_masses):
        rec["masses"] = "from the log's mass commands: " + ", ".join(
            f"type {t} {log_masses[t]:g}" for t in rec["types"])
    else:
        rec["masses"] = ("partly known" if np.any(m > 0) else "not known") + (
            " (give --masses TYPE=MASS,... for centres of mass)")
    rec["diffusion"] = _would_use(rec)


def _clock_value(u: Any, clock: Any, i: int) -> float:
    if clock.kind == "index":
        return float(i)
    if clock.kind == "dcd_step":
        return (clock.offset + i * clock.scale)
    ts = u.trajectory[i]
    return float(ts.data["step"]) if clock.kind == "step" else float(ts.time)


def _would_use(rec: dict[str, Any]) -> str:
    parts = []
    if rec["atoms_from"].startswith("not listed"):
        return "needs a topology first: transport diffusion TOPOLOGY " + Path(
            rec["file"]).name
    parts.append(f"{rec['atoms']} atoms as particles (--group-by atom)")
    if rec.get("molecules"):
        parts.append(f"or {rec['molecules']} molecule centres with --group-by molecule")
    parts.append(f"continuous positions from {rec['continuous_from']}")
    if rec.get("frame_interval"):
        parts.append(f"{rec['frames']} frames {rec['frame_interval']:.6g} "
                     f"{rec['time_unit']} apart ({rec['time_from']})")
    else:
        parts.append("frame times missing: " + rec["time_from"].removeprefix("unknown: "))
    if rec["velocities"]:
        parts.append("velocities for the VACF cross-check and the temperature")
    return "; ".join(parts)


def _wrap(label: str, text: str) -> list[str]:
    return textwrap.wrap(text, _WIDTH, initial_indent=f"{label:<12}",
                         subsequent_indent=" " * 12, break_on_hyphens=False) or [label]


def describe_trajectory(rec: dict[str, Any]) -> str:
    """The text of ``transport inspect`` for one :func:`inspect_trajectory` record."""
    out = _wrap("file", rec["file"])
    fmt = rec["format"] + (f" ({rec['compression']}-compressed)" if rec.get("compression")
                           else "")
    out += _wrap("format", fmt)
    out += _wrap("atoms", f"{rec['atoms']}, {rec['atoms_from']}")
    out += _wrap("frames", str(rec["frames"]))
    if rec.get("frame_interval"):
        out += _wrap("time", f"{rec['frame_interval']:.6g} {rec['time_unit']} between frames "
                             f"({rec['time_from']})")
    else:
        out += _wrap("time", rec["time_from"])
    out += _wrap("units", rec["units"] or "not known")
    if rec.get("box") is None:
        out += _wrap("box", rec["box_shape"])
    else:
        lens = " x ".join(f"{x:.6g}" for x in rec["box"])
        change = (f"changes (last frame {' x '.join(f'{x:.6g}' for x in rec['box_last'])})"
                  if rec["box_changes"] else "constant (first, middle and last frames)")
        out += _wrap("box", f"{rec['box_shape']} {lens} {rec['length_unit']}, {change}")
    out += _wrap("coordinates", rec["coordinates"])
    out += _wrap("velocities", "yes" if rec["velocities"] else "no")
    if rec.get("types"):
        out += _wrap("species", ", ".join(f"type {k}: {v}" for k, v in rec["types"].items())
                     + (f"; {rec['molecules']} molecules" if rec.get("molecules") else ""))
    out += _wrap("masses", rec["masses"])
    out += _wrap("diffusion", rec["diffusion"])
    for note in rec["notes"]:
        out += _wrap("note", note)
    return "\n".join(out)
