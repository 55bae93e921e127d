"""Readers: parse files, convert units at the boundary, validate.

Public entry points
-------------------
read_table(path, *, run=None, units=None, timestep=None, progress=False) -> Table
    Any supported table-like file (engine thermo logs, plain text/CSV tables, .npy/.npz,
    energy files) as named columns in the file's own units.
load_stress(path, *, units=None, timestep=None, temperature=None, volume=None, run=None,
            progress=False) -> StressSeries
    The pressure tensor of one file, converted to internal units (SI or reduced).
load_stress_many(paths, **same options) -> list of StressSeries
    One series per file (replicas, box sizes), each read as by :func:`load_stress`.
stress_from_table(table, *, temperature=None, volume=None) -> StressSeries
    The conversion step alone, for a Table already read.
sniff_format(path) -> (format, compression)
    What :func:`read_table` would take the file for.
parse_run(value) -> None | int | (first, last) | "all" | "last"
    The accepted forms of a ``run`` choice (for command lines).
checked_column(table, name, *, path) -> (values, file_name)
    A column checked before a statistic is taken of it (present, named once, finite);
    with ``column_unit``, ``column_file_name``, ``check_finite_column`` and
    ``even_time_axis`` (the rows' evenly spaced time axis in the reported unit).

Formats (chosen by content, then suffix; ``.gz``, ``.bz2`` and ``.xz`` are read
transparently):

* ``lammps-log``: thermo logs of the LAMMPS engine. Every thermo block (a header line of
  thermo keywords followed by rows of numbers, ended by ``Loop time of``) is found; the
  ``units`` and ``timestep`` commands echoed in the log (the last before each run) are
  used, as are ``compute ID all pressure ...`` and ``variable name equal ...`` definitions,
  so that columns such as ``c_P[4]`` or ``v_sxy`` are recognised as P_xy.
* ``table``: text tables with a header naming the columns: CSV, whitespace or tab
  separated, with the header possibly a ``#`` comment (as in the output of time averaging
  or print commands).
* ``npy`` (structured array with named fields) and ``npz`` (named 1-D arrays; optional
  0-d entries ``units`` and ``timestep``).
* ``edr``: GROMACS energy files, through pyedr (nm, ps, bar: the ``gromacs`` unit system).
"""

from __future__ import annotations

import os
from collections.abc import Collection, Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..series import Source, StressSeries
from ..units import UnitSystem
from ._assemble import RunSpec, parse_run
from ._columns import PRESSURE_COMPONENTS, TENSOR_ORDER, canonical_name, map_columns
from ._table_checks import (
    check_finite_column,
    checked_column,
    column_file_name,
    column_unit,
    even_time_axis,
)

__all__ = [
    "PRESSURE_COMPONENTS",
    "TENSOR_ORDER",
    "BlockInfo",
    "Table",
    "canonical_name",
    "check_finite_column",
    "checked_column",
    "column_file_name",
    "column_unit",
    "even_time_axis",
    "load_stress",
    "load_stress_many",
    "map_columns",
    "parse_run",
    "read_table",
    "sniff_format",
    "stress_from_table",
]


@dataclass(frozen=True)
class BlockInfo:
    """One block of rows found in a file (a thermo run of a log, or a table).

    Attributes
    ----------
    index : int
        1-based position among the blocks of the file (the number ``--run`` takes).
    kind : str
        ``run``, ``minimize`` or ``rerun`` for thermo logs; ``table``, ``arrays`` or
        ``energy`` for other formats.
    header_line, first_line, last_line : int or None
        1-based lines (in the decompressed file) of the header and of the first and last
        rows; None where the format has no lines.
    columns : tuple of str
        Column names in file order.
    canonical : dict
        Canonical name -> column name, for the columns recognised.
    rows : int
        Rows read.
    rows_used : int
        Rows that went into the table (0 if the block was not used).
    axis : str or None
        ``step`` or ``time``: the column that orders the rows.
    axis_first, axis_last : float or None
        First and last value of `axis`.
    stride : float or None
        Interval of `axis` between rows (steps, or time in the file's unit).
    units : str or None
        Unit style in force for this block (thermo logs).
    timestep : float or None
        Time step set in the log for this block, in the engine's time unit (None when the
        log does not set it).
    used : bool
        Whether the block went into the table.
    ended_by : str
        What ended the block (``'Loop time' at line N``, ``end of file``, ...).
    skipped_lines : int
        Lines of text skipped inside the block (warnings and the like).
    has_tensor : bool
        Whether all six pressure-tensor components are among the columns.
    notes : tuple of str
        Rows dropped at the ends, partial-pressure computes, duplicate names.
    """

    index: int
    kind: str
    header_line: int | None
    first_line: int | None
    last_line: int | None
    columns: tuple[str, ...]
    canonical: dict[str, str]
    rows: int
    rows_used: int
    axis: str | None
    axis_first: float | None
    axis_last: float | None
    stride: float | None
    units: str | None
    timestep: float | None
    used: bool
    ended_by: str
    skipped_lines: int
    has_tensor: bool
    notes: tuple[str, ...] = ()

    def to_record(self) -> dict[str, Any]:
        """JSON record (the ``tables`` entries of ``inspect``)."""
        return {
            "index": self.index,
            "kind": self.kind,
            "header_line": self.header_line,
            "first_line": self.first_line,
            "last_line": self.last_line,
            "columns": list(self.columns),
            "canonical": dict(self.canonical),
            "rows": self.rows,
            "rows_used": self.rows_used,
            "axis": self.axis,
            "axis_first": self.axis_first,
            "axis_last": self.axis_last,
            "stride": self.stride,
            "units": self.units,
            "timestep": self.timestep,
            "used": self.used,
            "ended_by": self.ended_by,
            "skipped_lines": self.skipped_lines,
            "has_pressure_tensor": self.has_tensor,
            "notes": list(self.notes),
        }


@dataclass(frozen=True)
class Table:
    """Named columns read from one file, in the file's own units.

    Attributes
    ----------
    columns : dict of str -> ndarray
        Column name as written in the file -> 1-D float64 array (file units).
    canonical : dict of str -> str
        Canonical name (``step``, ``time``, ``pxx`` ... ``pyz``, ``volume``, ``temperature``,
        ``lx``, ``ly``, ``lz``, ``density``, ...) -> column name in `columns`.
    units : UnitSystem or None
        The unit convention the file declares or the user gave; None if unknown.
    timestep : float or None
        Integration time step in engine time units, if the file says it or the user gave it.
    time : ndarray or None
        Sample times in internal units (s, or tau for reduced units), when derivable.
    source : Source
        Provenance (path, format, sha256, what was read).
    warnings : tuple of str
        What the reader noticed (runs skipped, overlaps removed, truncated last line...).
    blocks : tuple of BlockInfo
        Every block found in the file, used or not.
    line_map : tuple of (int, int)
        Row -> file line map as breakpoints ``(row, line)``: row ``r`` is on line
        ``line + r - row`` of the last breakpoint at or before it. Empty when the format
        has no lines.
    units_source, timestep_source : str
        Where `units` and `timestep` came from (``units command at line 4``,
        ``given by the user``, ...).
    compression : str or None
        ``gzip``, ``bzip2`` or ``xz`` if the file was compressed.
    notes : tuple of str
        Minor remarks (entries ignored, ...).
    bounds : dict
        Column name -> (smallest, largest) value, where the reader found them while parsing
        (nan when a value is nan). The values of the column lie within; they may be the
        bounds of a larger set of rows (a whole run of which part was kept).
    """

    columns: dict[str, np.ndarray]
    canonical: dict[str, str] = field(default_factory=dict)
    units: UnitSystem | None = None
    timestep: float | None = None
    time: np.ndarray | None = None
    source: Source = field(default_factory=Source)
    warnings: tuple[str, ...] = ()
    blocks: tuple[BlockInfo, ...] = ()
    line_map: tuple[tuple[int, int], ...] = ()
    units_source: str = ""
    timestep_source: str = ""
    compression: str | None = None
    notes: tuple[str, ...] = ()
    bounds: dict[str, tuple[float, float]] = field(default_factory=dict)

    @property
    def n(self) -> int:
        """Number of rows."""
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def column(self, name: str) -> np.ndarray:
        """A column by its file name or canonical name (case-insensitive)."""
        if name in self.columns:
            return self.columns[name]
        key = name.lower()
        if key in self.canonical:
            return self.columns[self.canonical[key]]
        for k, v in self.columns.items():
            if k.lower() == key:
                return v
        raise KeyError(name)

    def line_of(self, row: int) -> int | None:
        """1-based line of the (decompressed) file that holds row `row`, if known."""
        if not self.line_map or row < 0:
            return None
        rows = [r for r, _ in self.line_map]
        i = int(np.searchsorted(rows, row, side="right")) - 1
        if i < 0:
            return None
        r0, l0 = self.line_map[i]
        return l0 + (row - r0)


# ---- reading ----------------------------------------------------------------------------

def sniff_format(path: str | os.PathLike[str]) -> tuple[str, str | None]:
    """The format :func:`read_table` takes `path` for, and its compression.

    Returns
    -------
    format : str
        ``lammps-log``, ``table``, ``npy``, ``npz`` or ``edr``.
    compression : str or None
        ``gzip``, ``bzip2``, ``xz``, or None.

    Raises
    ------
    InputError
        If the file does not exist, is empty, or is binary data of no known format.
    """
    from ._open import check_path, sniff

    return sniff(check_path(path))


# The tensor first, in its order: the reader stores kept columns as rows of one array in
# this order, so that the six components can become the (6, n) pressure array in place.
_STRESS_WANT = (*TENSOR_ORDER, *(c for c in PRESSURE_COMPONENTS if c not in TENSOR_ORDER),
                "step", "time", "volume", "lx", "ly", "lz", "temperature", "press")


def _read(
    path: str | os.PathLike[str],
    *,
    run: Any = None,
    units: str | UnitSystem | None = None,
    timestep: float | None = None,
    progress: bool = False,
    want: Collection[str] | None = None,
    spill: bool | None = False,
    scratch: Path | None = None,
) -> Table:
    from . import _binary
    from ._assemble import assemble, resolve_units
    from ._open import FileHash, check_path, open_bytes, sniff
    from ._scan import scan

    p = check_path(path)
    spath = str(p)
    try:
        run_spec: RunSpec = parse_run(run)
    except ValueError as exc:
        raise InputError(str(exc), path=spath, fix="pass --run N, A-B, last or all") from None
    fmt, comp = sniff(p)
    if fmt in ("lammps-log", "table"):
        want_fn = None if want is None else (lambda canon: want)
        with open_bytes(p, digest=True) as op:  # hashed as it is read: no second pass
            result = scan(op, mode="log" if fmt == "lammps-log" else "table", want=want_fn,
                          progress=progress, spill=spill, scratch=scratch)
            sha256 = op.sha256()
        if fmt == "lammps-log" and not any(b.n for b in result.blocks) and \
                result.orphan_header is None:
            # named like a log but holding no thermo block: try it as a plain table
            with open_bytes(p) as op:
                retry = scan(op, mode="table", want=want_fn, progress=progress)
            if any(b.n for b in retry.blocks):
                fmt, result = "table", retry
        suffix = p.suffix.lower()
        if comp is None and suffix in (".gz", ".bz2", ".xz"):
            result.warnings.append(
                f"{spath}: named {suffix} but not compressed; read as plain text")
        return assemble(result, path=p, fmt=fmt, run=run_spec, units=units,
                        timestep=timestep, sha256=sha256, compression=comp,
                        with_time=want is None)

    # Formats holding one table.
    digest = FileHash(p, background=p.stat().st_size > (8 << 20))
    if run_spec not in (None, 1, "all", "last", (1, 1)):
        raise InputError(f"a {fmt} file holds one table; run {run!r} does not exist",
                         path=spath, fix="drop --run for this file")
    notes: list[str] = []
    meta: dict[str, object] = {}
    if fmt == "edr":
        columns = _binary.read_edr(p, comp)
        kind = "energy"
        file_units = resolve_units("gromacs", path=spath, what="energy file")
        units_how = "energy file (nm, ps, bar)"
    else:
        columns, meta, notes = _binary.read_numpy(p, fmt, comp)
        kind = "arrays"
        file_units = (resolve_units(str(meta["units"]), path=spath, what="'units' entry")
                      if "units" in meta else None)
        units_how = "'units' entry of the file"
    canonical, dup_notes = map_columns(list(columns))
    notes.extend(dup_notes)
    user_units = resolve_units(units, path=spath, what="given by the user")
    if file_units is not None and user_units is not None and user_units != file_units:
        raise InputError(
            f"--units {user_units.name} disagrees with the file, which is in units "
            f"{file_units.name} ({units_how})", path=spath,
            fix="drop --units: the file says which units it uses",
        )
    unit_sys = file_units or user_units
    units_source = units_how if file_units is not None else (
        "given by the user" if user_units is not None else "")
    ts_value: float | None = None
    ts_source = ""
    file_ts = meta.get("timestep")
    if timestep is not None:
        timestep = float(timestep)
        if not (np.isfinite(timestep) and timestep > 0):
            raise InputError(f"time step {timestep!r} is not positive", path=spath,
                             fix="pass a positive --timestep (in the engine's time unit)")
    if file_ts is not None:
        if timestep is not None and not np.isclose(timestep, float(file_ts), rtol=1e-9):
            raise InputError(
                f"--timestep {timestep:g} disagrees with the file's 'timestep' entry "
                f"{float(file_ts):g}", path=spath,
                fix="drop --timestep: the file says which time step it uses")
        ts_value, ts_source = float(file_ts), "'timestep' entry of the file"
    elif timestep is not None:
        ts_value, ts_source = timestep, "given by the user"
    if want is not None:
        keep = {canonical[c] for c in want if c in canonical}
        all_names = list(columns)
        columns = {k: v for k, v in columns.items() if k in keep}
    else:
        all_names = list(columns)
    canonical_kept = {c: nm for c, nm in canonical.items() if nm in columns}
    n = len(next(iter(columns.values()))) if columns else 0
    axis_name = "step" if "step" in canonical_kept else ("time" if "time" in canonical_kept
                                                         else None)
    axis = (axis_name, columns[canonical_kept[axis_name]] if axis_name else None)
    time = None
    if unit_sys is not None:
        if "time" in canonical_kept:
            time = columns[canonical_kept["time"]] * unit_sys.time
        elif "step" in canonical_kept and ts_value is not None:
            time = columns[canonical_kept["step"]] * (ts_value * unit_sys.time)
    word = {"edr": "energy file", "npz": "arrays", "npy": "structured array"}[fmt]
    desc = f"{word}: {n} rows, {len(all_names)} columns"
    if unit_sys is not None:
        desc += f"; units {unit_sys.name} ({units_source})"
    if ts_value is not None:
        desc += f"; time step {ts_value:g} ({ts_source})"
    info = _binary.single_block_info(all_names, canonical, n, kind, axis,
                                     unit_sys.name if unit_sys else None, ts_value, notes)
    source = _binary.columns_source(p, fmt, digest.result(), desc, n, canonical_kept)
    return Table(columns=columns, canonical=canonical_kept, units=unit_sys, timestep=ts_value,
                 time=time, source=source, warnings=(), blocks=(info,), line_map=(),
                 units_source=units_source, timestep_source=ts_source, compression=comp,
                 notes=tuple(notes))


def read_table(
    path: str | os.PathLike[str],
    *,
    run: Any = None,
    units: str | UnitSystem | None = None,
    timestep: float | None = None,
    progress: bool = False,
) -> Table:
    """Read any supported file as named columns in the file's own units.

    Parameters
    ----------
    path : str or path-like
        The file. ``.gz``, ``.bz2`` and ``.xz`` compression is detected from the content.
    run : int, str or None
        Which block (thermo run) to take, 1-based: ``N``, ``"A-B"`` (joined), ``"last"``,
        ``"all"`` (every block joined), or None for the automatic choice: the last block that
        carries the pressure tensor, joined with the blocks before it whose steps continue it
        with the same columns and settings (a run split into several ``run`` commands, or a
        restart). Blocks that overlap in steps keep the later data (with a warning).
    units : str or UnitSystem, optional
        Unit convention, used only where the file does not say (a log's ``units``
        command, an energy file's fixed units). If both say and disagree, InputError.
    timestep : float, optional
        Integration time step in the engine's time unit (fs for ``real``, ps for ``metal``,
        tau for ``lj``), used only where the file does not say; if both say and disagree,
        InputError. A log that sets its units but no time step gets the engine's default
        for those units, with a warning.
    progress : bool
        Show a progress bar on stderr while reading large files.

    Returns
    -------
    Table
        The columns, what they mean (``canonical``), units and time step with where they
        came from, every block found (``blocks``), and what was read (``source``).

    Raises
    ------
    InputError
        For anything wrong with the file, naming the file, the line, what was expected and
        the fix.
    """
    return _read(path, run=run, units=units, timestep=timestep, progress=progress)


def load_stress(
    path: str | os.PathLike[str],
    *,
    units: str | UnitSystem | None = None,
    timestep: float | None = None,
    temperature: float | None = None,
    volume: float | None = None,
    run: Any = None,
    progress: bool = False,
    cache: Any = None,
    stream: bool | None = None,
    scratch: str | os.PathLike[str] | None = None,
) -> StressSeries:
    """Read the pressure tensor of one file, in internal units (SI, or reduced LJ units).

    Parameters
    ----------
    path : str or path-like
        A thermo log, text/CSV table, ``.npy``/``.npz`` or ``.edr`` file (optionally
        compressed) with the six components P_xx, P_yy, P_zz, P_xy, P_xz, P_yz (or all nine,
        whose off-diagonal pairs are averaged: P_xy = (P_xy + P_yx) / 2).
    units : str or UnitSystem, optional
        Engine unit convention (``real``, ``metal``, ``lj``, ``si``, ``gromacs``, ...), used
        where the file does not say; a disagreement with the file is an InputError.
    timestep : float, optional
        Integration time step in the engine's time unit, used where the file does not say.
        Needed only when rows are numbered by step and the file gives no time step.
    temperature : float, optional
        Temperature in K (reduced units for ``lj``): the thermostat set point, preferred.
        Without it the mean of the file's temperature column is used, with a warning; with
        neither, the series has no temperature.
    volume : float, optional
        Box volume **in the engine's length unit cubed** (Angstrom^3 for ``real`` and
        ``metal``, nm^3 for ``gromacs``, sigma^3 for ``lj``, m^3 for ``si``). Used only when
        the file has neither a volume column nor box lengths (lx, ly, lz); if it has them
        and `volume` differs from their mean by more than 0.1 %, the file wins and a warning
        says so.
    run : int, str or None
        Which thermo run(s) to read; see :func:`read_table`.
    progress : bool
        Show a progress bar on stderr while reading large files.
    cache : ParseCache, optional
        Keep the parsed columns of text files in this cache and take them from it when the
        same file (same bytes) is read again with the same settings (see
        ``transport.io._cache``). None (default): always parse.
    stream : bool or None
        Keep the parsed rows of a text file in a scratch file (memory-mapped, its pages
        released as they are passed over) instead of memory: True always, None (default)
        when they would take more than a third of the available memory, False never. The
        series' pressure is then file-backed and the viscosity estimators work through it
        chunk by chunk (``analyse_viscosity(stream=...)``). A streamed table is not kept in
        the parse cache.
    scratch : str or path-like, optional
        Folder of the scratch file (default: ``scratch`` in the cache folder,
        :func:`transport.io._cache.cache_folder`); never beside the input. The file is
        removed as soon as it is mapped, so nothing is left behind, also after a kill.

    Returns
    -------
    StressSeries
        Pressure in Pa (or eps/sigma^3), sampling interval ``dt`` in s (or tau), volume in
        m^3 (or sigma^3; one value per sample when it varies), temperature in K (or
        reduced), with provenance in ``source`` and cautions in ``warnings``.

    Raises
    ------
    InputError
        Missing pressure-tensor columns (the message lists the columns found and what to
        add), unknown units (pass ``--units``), no time step (pass ``--timestep``), uneven
        spacing of the samples (the line where it breaks), no volume, and every problem
        :func:`read_table` reports.
    """
    from ._cache import cache_folder
    from ._stress import stress_from_table

    # The temperature column is read also when a temperature is given: the two are
    # compared (a set point in other units is refused, see transport.checks)
    table = None
    sfold = Path(scratch) if scratch is not None else cache_folder() / "scratch"
    if cache is not None and stream is not True:
        from ._open import check_path

        given = check_path(path)
        p = given.resolve()
        # the path as given is part of the key: messages and provenance name it
        settings = {"given": str(given), "run": run, "units": getattr(units, "name", units),
                    "timestep": timestep, "want": list(_STRESS_WANT)}
        st = p.stat()
        table = cache.load(p, settings)
        if table is None:
            table = _read(path, run=run, units=units, timestep=timestep, progress=progress,
                          want=_STRESS_WANT, spill=stream, scratch=sfold)
            if table.source.format in ("lammps-log", "table") and not _spilled(table):
                notes = cache.store(p, settings, table, st)
                if notes:
                    table = replace(table, warnings=(*table.warnings, *notes))
    else:
        table = _read(path, run=run, units=units, timestep=timestep, progress=progress,
                      want=_STRESS_WANT, spill=stream, scratch=sfold)
    return stress_from_table(table, temperature=temperature, volume=volume, _consume=True)


def _spilled(table: Table) -> bool:
    """True if the table's columns live in a scratch file (see ``load_stress(stream=)``)."""
    from .._memory import file_backed

    return any(file_backed(c) is not None for c in table.columns.values())


def load_stress_many(
    paths: Iterable[str | os.PathLike[str]],
    *,
    units: str | UnitSystem | None = None,
    timestep: float | None = None,
    temperature: float | None = None,
    volume: float | None = None,
    run: Any = None,
    progress: bool = False,
    cache: Any = None,
) -> list[StressSeries]:
    """Read several files with :func:`load_stress` (same options for each), in order.

    Raises
    ------
    InputError
        On the first file that cannot be read, naming it; or if `paths` is empty.
    """
    paths = [Path(p) for p in paths]
    if not paths:
        raise InputError("no input files given", expected="at least one file",
                         fix="pass one or more files")
    return [
        load_stress(p, units=units, timestep=timestep, temperature=temperature,
                    volume=volume, run=run, progress=progress, cache=cache)
        for p in paths
    ]


def stress_from_table(
    table: Table, *, temperature: float | None = None, volume: float | None = None
) -> StressSeries:
    """Convert a :class:`Table` to a :class:`~transport.series.StressSeries`.

    Parameters and conversions are those of :func:`load_stress` (`volume` in the engine's
    length unit cubed; `temperature` in K or reduced units).
    """
    from ._stress import stress_from_table as _convert

    return _convert(table, temperature=temperature, volume=volume)
