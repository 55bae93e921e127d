"""Checks of a table's columns before a statistic is taken of them.

Used by ``transport average`` (and by any caller that averages a column of a
:class:`~transport.io.Table`): the column's unit label, the file's own name of a column
asked for by a canonical name, a refusal naming the file line of the first non-finite or
overflowing value, and the evenly spaced time axis of the rows.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError

if TYPE_CHECKING:
    from . import Table

__all__ = [
    "check_finite_column",
    "checked_column",
    "column_file_name",
    "column_unit",
    "even_time_axis",
]


#: Energy units of the engine unit styles (LAMMPS `units` documentation; GROMACS energy
#: files: kJ/mol), for the energy columns of thermo output.
_ENERGY_LABEL = {"real": "kcal/mol", "metal": "eV", "si": "J", "cgs": "erg",
                 "electron": "Hartree", "micro": "pg um^2/us^2", "nano": "ag nm^2/ns^2",
                 "gromacs": "kJ/mol", "lj": "reduced (lj)"}
#: Thermo keywords (lower case, as printed by the engine) that are energies.
_ENERGY_COLUMNS = {"pe", "ke", "etotal", "enthalpy", "evdwl", "ecoul", "epair", "ebond",
                   "eangle", "edihed", "eimp", "emol", "elong", "etail", "toteng", "poteng",
                   "kineng", "e_pair", "e_mol", "e_vdwl", "e_coul", "e_bond", "e_angle",
                   "e_dihed", "e_impro", "e_long", "e_tail", "potential", "kinetic-en.",
                   "total-energy"}
#: Mass density of the unit styles (LAMMPS prints g/cm^3 for real and metal).
_DENSITY_LABEL = {"real": "g/cm^3", "metal": "g/cm^3", "si": "kg/m^3", "cgs": "g/cm^3",
                  "lj": "reduced (lj)", "gromacs": "kg/m^3"}


def column_unit(table: Table, column: str) -> str:
    """Unit label of a column where its meaning and the file's units are known, else ''."""
    u = table.units
    if u is None:
        return ""
    canon = {v: k for k, v in table.canonical.items()}.get(column)
    name = (canon or column).lower()
    if name in _ENERGY_COLUMNS:
        return _ENERGY_LABEL.get(u.name, "")
    if name == "density":
        return _DENSITY_LABEL.get(u.name, "")
    if canon is None:
        return ""
    if canon in ("press", "pxx", "pyy", "pzz", "pxy", "pxz", "pyz", "pyx", "pzx", "pzy"):
        return u.pressure_label
    if canon == "temperature":
        return "reduced (lj)" if u.reduced else "K"
    if canon == "time":
        return u.time_label
    if canon == "step":
        return "steps"
    if canon in ("lx", "ly", "lz"):
        return u.length_label
    if canon == "volume":
        return f"{u.length_label}^3"
    return ""


def column_file_name(table: Table, name: str) -> str:
    """The file's name of the column `name` found by ``Table.column``."""
    if name in table.columns:
        return name
    if name.lower() in table.canonical:
        return table.canonical[name.lower()]
    return next((k for k in table.columns if k.lower() == name.lower()), name)


def check_finite_column(table: Table, column: str, x: np.ndarray) -> None:
    """InputError naming the file line of the first non-finite value of a column, or of
    the first value so large that sums of squares overflow double precision."""
    limit = math.sqrt(np.finfo(np.float64).max / max(x.size, 1)) / 10
    bad = np.flatnonzero(~(np.abs(x) < limit))
    if bad.size == 0:
        return
    row = int(bad[0])
    line = None
    for first_row, first_line in getattr(table, "line_map", ()):
        if first_row <= row:
            line = first_line + row - first_row
    if np.isfinite(x[row]):
        what = (f"a value too large to analyse ({x[row]:.3g}; its square overflows double "
                "precision)")
        expected = f"values below {limit:.1e} in magnitude"
    else:
        what, expected = f"a non-finite value ({x[row]})", "a number in every row"
    raise InputError(
        f"column {column!r} has {what} in row {row + 1}",
        path=table.source.path or None, line=line,
        expected=expected, fix="repair or remove the damaged rows",
    )


def even_time_axis(table: Table) -> tuple[float | None, float, str]:
    """(dt, t0, unit) of the rows in the reported time unit, or (None, 0, 'samples')."""
    if table.time is None or table.units is None or table.n < 2:
        return None, 0.0, "samples"
    t = np.asarray(table.time, dtype=np.float64) * table.units.time_scale
    steps = np.diff(t)
    dt = float((t[-1] - t[0]) / (t.size - 1))
    if not dt > 0 or np.max(np.abs(steps - dt)) > 1e-6 * dt:
        typical = float(np.median(steps))
        off = np.flatnonzero(~(np.abs(steps - typical) <= 1e-6 * abs(typical)))
        row = int(off[0]) + 1 if off.size else 1
        u = table.units.time_unit
        if steps[row - 1] == 0:
            what = f"time {t[row]:.10g} {u} is repeated"
        elif not typical > 0:
            what = "time does not increase"
        else:
            what = (f"time jumps from {t[row - 1]:.10g} to {t[row]:.10g} {u} (the interval "
                    f"elsewhere is {typical:.6g} {u})")
        raise InputError(
            f"rows are not evenly spaced in time: {what}",
            path=table.source.path or None, line=table.line_of(row),
            expected="a constant output interval",
            fix="choose one thermo run with --run, or remove the rows out of sequence",
        )
    return dt, float(t[0]), table.units.time_unit


def checked_column(table: Table, name: str, *, path: str) -> tuple[np.ndarray, str]:
    """The column `name` of `table` (file or canonical name), checked for analysis.

    Parameters
    ----------
    table : Table
        The table read from `path`.
    name : str
        Column name as written in the file, or a canonical name (``density``, ``press``...).
    path : str
        The file as the user named it (for the messages).

    Returns
    -------
    values : ndarray
        The column, in the file's units.
    file_name : str
        The file's own name of the column.

    Raises
    ------
    InputError
        No such column (the message lists those found), a column name repeated in the
        header of a block used, or a non-finite or overflowing value (naming its line).
    """
    try:
        x = table.column(name)
    except KeyError:
        raise InputError(
            f"no column {name!r}", path=path,
            expected="one of: " + ", ".join(table.columns),
            fix="pass --column with one of these names",
        ) from None
    col = column_file_name(table, name)
    dup = f"duplicate column name {col!r}"
    for b in table.blocks:
        if b.used and any(nt.startswith(dup) for nt in b.notes):
            raise InputError(
                f"column name {col!r} appears more than once in the header",
                path=path, line=b.header_line, expected="distinct column names",
                fix="rename or remove the repeated column")
    check_finite_column(table, col, x)
    _check_spike(table, col, x, path)
    return x, col


def _check_spike(table: Table, col: str, x: np.ndarray, path: str) -> None:
    """InputError for an isolated value beyond the robust rule of
    :func:`transport.checks.pressure_outlier` (a damaged cell: one 1e12 among pressures
    made a mean of 8e7 without a word)."""
    from ..checks import OUTLIER_MAD, pressure_outlier

    worst = pressure_outlier(np.asarray(x)[None, :])
    if worst is None or not worst[3]:
        return
    _, row, far, _ = worst
    raise InputError(
        f"column {col!r} holds {float(x[row]):.6g} in row {row + 1}, {far:.3g} robust "
        "standard deviations (1.4826 x the median absolute deviation) from its median while "
        "the rows around it are ordinary: a damaged value, not a fluctuation",
        path=path, line=table.line_of(row),
        expected=f"values within {OUTLIER_MAD:g} robust standard deviations",
        fix="repair or remove the damaged row")
