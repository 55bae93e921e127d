"""Opening trajectory files as MDAnalysis universes: formats, checks and private links.

The topology and each trajectory are checked (exists, readable, not empty) and opened with
MDAnalysis [1]_; its errors become one-line :class:`~transport.errors.InputError` messages
naming the file (:func:`_mda_call`). LAMMPS files need options MDAnalysis cannot guess: the
atom style of a data file (from its ``Atoms # style`` comment) and the coordinate columns of
a dump (:func:`_dump_info`). What the numbers mean is decided here too: the factors to
internal units (:func:`_factors`) and where frame times come from (:func:`_frame_clock`).

Units: MDAnalysis reports lengths in Angstrom, times in ps and velocities in Angstrom/ps
(converting from the formats that store other units); these are converted to SI. LAMMPS
dump files have no unit metadata: their numbers are in the engine units named by `units`.
With ``units="lj"`` no conversion at all is applied (MDAnalysis's own conversion is switched
off) and the numbers are taken as reduced units.

Inputs are only read: MDAnalysis's XTC and TRR readers would write an offsets cache and a
lock file beside the trajectory, so those formats are opened through a link in a private
temporary folder (see :class:`_PrivateLinks`), deleted afterwards.

References
----------
.. [1] R. J. Gowers et al., "MDAnalysis: a Python package for the rapid analysis of molecular
   dynamics simulations", Proc. 15th Python in Science Conf., 98 (2016); N. Michaud-Agrawal
   et al., J. Comput. Chem. 32, 2319 (2011).
"""

from __future__ import annotations

import gc
import math
import os
import re
import shutil
import sys
import tempfile
import warnings as _warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..units import UnitSystem
from ._dcd import _lammps_dcd
from ._frames import _mda_error

_ANGSTROM = 1e-10
_PS = 1e-12
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


#: Suffixes of formats that store coordinates only (no atom names, types or residues).
_COORDINATES_ONLY = (".dcd", ".xtc", ".trr", ".nc", ".ncdf", ".netcdf", ".h5md", ".crd",
                     ".mdcrd")


def _open_atoms(top: Path | None, first: Path, reduced: bool, links: _PrivateLinks
                ) -> tuple[Any, Path, str | None]:
    """The atoms: ``(universe, the file that describes them, mass source)``.

    `top` is the topology, or None when the trajectory `first` must describe its atoms
    itself. A LAMMPS dump (as topology, or alone) gives its atoms from its first frame
    (:mod:`transport.io._dump_atoms`; mass source ``"mass column"``, ``"element column"`` or
    ``""``); any other file is opened by MDAnalysis (mass source None: the topology's own).
    """
    import MDAnalysis as mda

    from ._dump_atoms import dump_universe, is_dump

    src = top if top is not None else first
    if is_dump(src):
        u, how = dump_universe(src)
        return u, src, how
    if top is not None:
        return _open_topology(top, reduced, first=first, links=links), top, None
    kw = {"convert_units": False} if reduced else {}
    u, message = _mda_call(lambda: mda.Universe(str(links.path(first)), **kw))
    fix = ("give the topology first (a LAMMPS data, PSF, TPR, PDB or GRO file of the same "
           "atoms), then the trajectory files")
    if message is not None:
        package = _missing_package(message)
        coordinates_only = first.name.lower().removesuffix(".gz").removesuffix(
            ".bz2").endswith(_COORDINATES_ONLY)
        raise InputError(
            "the trajectory cannot describe its atoms on its own" + (
                " (this format stores coordinates only)" if coordinates_only else
                f" ({message[:120]})"),
            path=str(first), expected="a file that lists its atoms (a LAMMPS dump with id "
                                      "and type columns, GRO, PDB, ...) or a topology",
            fix=(f"install the package MDAnalysis needs for this format: pip install "
                 f"{package}" if package else fix))
    if message is None and not _has_atom_kinds(u):
        # MDAnalysis opens a coordinates-only file with a minimal topology: atoms, no kinds
        _close_reader(u)
        raise InputError(
            "the trajectory cannot describe its atoms on its own (this format stores "
            "coordinates only)", path=str(first),
            expected="a file that lists its atoms (a LAMMPS dump with id and type columns, "
                     "GRO, PDB, ...) or a topology", fix=fix)
    if len(u.trajectory) < 2:
        _close_reader(u)
        raise InputError(
            "the file holds one frame: it describes the atoms but not their motion",
            path=str(first), expected="a trajectory of several frames",
            fix="give it first, as the topology, then the trajectory files")
    return u, first, None


def _has_atom_kinds(u: Any) -> bool:
    """True if the atoms have types or names (not MDAnalysis's minimal topology)."""
    for attr in ("types", "names"):
        try:
            getattr(u.atoms, attr)
            return True
        except Exception:  # MDAnalysis NoDataError
            continue
    return False


def _close_reader(u: Any) -> None:
    """Close the reader of `u`, ignoring errors (before its private links go)."""
    try:
        u.trajectory.close()
    except Exception:
        pass
