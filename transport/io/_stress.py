"""Conversion of a read table into a :class:`~transport.series.StressSeries`."""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

from ..checks import (
    OUTLIER_MAD,
    PRESSURE_MISMATCH,
    pressure_column_mismatch,
    pressure_outlier,
    temperature_against_column,
    temperature_plausible,
)
from ..errors import InputError
from ..series import StressSeries
from ._assemble import user_number
from ._columns import TENSOR_ORDER

if TYPE_CHECKING:
    from . import Table

__all__ = ["stress_from_table"]

_CHUNK = 1 << 20  # rows per step when checking spacing (bounded temporary memory)


def _fix_for_missing(fmt: str) -> str:
    if fmt == "lammps-log":
        return ("add pxx pyy pzz pxy pxz pyz to 'thermo_style custom' (or define 'compute P "
                "all pressure thermo_temp' and print c_P[1] ... c_P[6])")
    if fmt == "edr":
        return "write the pressure tensor to the energy file (terms Pres-XX ... Pres-ZZ)"
    return "name the columns pxx pyy pzz pxy pxz pyz (P_xy, Pres-XY ... are recognised)"


def _uniform(axis: np.ndarray, *, exact: bool) -> tuple[float, int | None]:
    """Spacing of `axis` and the first row where it breaks (None if evenly spaced).

    The interval is the median of the first thousand spacings (robust to one gap). Steps
    are integers and compared exactly. Times are printed with finite precision (7 or 8
    significant digits in engine logs; energy files may store single precision), so a
    spacing is accepted within 1e-6 of the interval plus 5e-7 of the largest time, and the
    interval reported is the mean over the whole series.
    """
    n = axis.shape[0]
    head = np.diff(axis[: min(n, 1001)])
    stride = float(np.median(head))
    big = float(np.max(np.abs(axis[[0, -1]])))
    tol = 0.0 if exact else 1e-6 * abs(stride) + 5e-7 * big
    for lo in range(0, n - 1, _CHUNK):
        hi = min(lo + _CHUNK, n - 1)
        d = axis[lo + 1: hi + 1] - axis[lo:hi]
        bad = np.flatnonzero(np.abs(d - stride) > tol)
        if bad.size:
            return stride, lo + int(bad[0]) + 1
    if not exact:
        stride = float(axis[-1] - axis[0]) / (n - 1)
    return stride, None


def _rows_of_one_array(rows: list[np.ndarray]) -> np.ndarray | None:
    """The (k, n) view whose rows are `rows`, when they lie in one writeable float64 buffer
    at a constant pitch (rows of the reader's store); None otherwise."""
    base = rows[0].base
    if not (isinstance(base, np.ndarray) and base.dtype == np.float64
            and base.flags.c_contiguous and base.flags.writeable):
        return None
    n = rows[0].shape[0]
    if any(r.base is not base or r.shape != (n,) or r.strides != (8,) for r in rows):
        return None
    starts = [r.__array_interface__["data"][0] for r in rows]
    pitch = starts[1] - starts[0] if len(rows) > 1 else 8 * n
    if pitch < 8 * n or any(a != starts[0] + i * pitch for i, a in enumerate(starts)):
        return None
    lo = base.__array_interface__["data"][0]
    if starts[0] < lo or starts[-1] + 8 * n > lo + base.nbytes:
        return None
    return np.lib.stride_tricks.as_strided(rows[0], shape=(len(rows), n),
                                           strides=(pitch, 8), writeable=True)


def _check_values(values: np.ndarray, table: Table, names: list[str], spath: str | None,
                  *, positive: bool = False, scale: float = 1.0) -> None:
    """InputError at the line of the first non-finite value of the (k, n) array `values`
    (columns `names`), of one so large that sums of squares (autocorrelations) overflow
    double precision, or, with `positive`, of one that is not positive.

    When the reader found the bounds of the columns while parsing (``table.bounds``, in
    file units; `scale` converts them like `values`) and they pass, nothing is scanned.
    """
    values = values.reshape(-1, values.shape[-1])
    n = values.shape[1]
    limit = float(np.sqrt(np.finfo(np.float64).max / max(n, 1))) / 10
    if all(nm in table.bounds for nm in names):
        b = np.array([table.bounds[nm] for nm in names]) * scale  # nan stays nan
        if np.all(np.abs(b) < limit) and (not positive or np.all(b > 0)):  # False for nan
            return
    for lo in range(0, n, _CHUNK):
        block = values[:, lo: lo + _CHUNK]
        ok = np.abs(block) < limit  # False for nan and inf too
        if positive:
            ok &= block > 0
        if ok.all():
            continue
        where = np.argwhere(~ok)
        comp, col = where[np.argmin(where[:, 1])]
        row = lo + int(col)
        value = float(block[comp, col])
        if not np.isfinite(value):
            what = f"a non-finite value ({value})"
        elif abs(value) >= limit:
            what = f"a value too large to analyse ({value / scale:.3g}; its square " \
                   "overflows double precision)"
        else:
            what = f"a value that is not positive ({value / scale:.6g})"
        raise InputError(
            f"column '{names[int(comp)]}' has {what} in row {row + 1}", path=spath,
            line=table.line_of(row),
            expected="finite values of plausible size in every row (a blown-up or "
            "corrupted run?)",
            fix="repair or remove the damaged rows, or choose another run with --run",
        )


def _check_tensor(pressure: np.ndarray, table: Table, cols: dict, f: float,
                  spath: str | None) -> list[str]:
    """Absurd values (robust distance from the median, :mod:`transport.checks`) and a
    diagonal that disagrees with the file's pressure column: an isolated damaged value is
    an InputError naming its line, the rest are warnings."""
    canon = table.canonical
    out: list[str] = []
    worst = pressure_outlier(pressure)
    if worst is not None:
        c, row, far, isolated = worst
        name = canon[TENSOR_ORDER[c]]
        value = float(pressure[c, row]) / f
        what = (f"column '{name}' holds {value:.6g} in row {row + 1}, {far:.3g} robust "
                "standard deviations (1.4826 x the median absolute deviation) from its median")
        if isolated:
            raise InputError(
                what + " while the rows around it are ordinary: a damaged value, not a "
                "fluctuation", path=spath, line=table.line_of(row),
                expected=f"values within {OUTLIER_MAD:g} robust standard deviations",
                fix="repair or remove the damaged row, or choose another run with --run")
        out.append(f"{spath}: {what}, over several rows (an initial transient? it is "
                   "removed by --skip auto or a --skip time; otherwise the run changed state)")
    if "press" in canon and canon["press"] in cols:
        rel, row = pressure_column_mismatch(pressure, cols[canon["press"]], scale=f)
        if rel > PRESSURE_MISMATCH:
            diag = ", ".join(canon[c] for c in TENSOR_ORDER[:3])
            out.append(
                f"{spath}: the diagonal components ({diag}) "
                f"disagree with the pressure column '{canon['press']}': (Pxx + Pyy + Pzz)/3 - P "
                f"is {rel:.2g} of the diagonal's size (median; largest at line "
                f"{table.line_of(row)}); a component scaled or from another compute? The "
                "viscosity uses the components")
    return out


def stress_from_table(
    table: Table,
    *,
    temperature: float | None = None,
    volume: float | None = None,
    _consume: bool = False,
) -> StressSeries:
    """See :func:`transport.io.stress_from_table`.

    With `_consume` the table's columns are released as they are converted, so that the
    peak memory stays near one copy of the data (used by :func:`load_stress`, which owns
    the table).
    """
    src = table.source
    spath = src.path or None
    fmt = src.format
    canon = table.canonical
    cols = table.columns
    warnings: list[str] = list(table.warnings)
    used_block = next((b for b in table.blocks if b.used), None)
    header_line = used_block.header_line if used_block is not None else None

    missing = [c for c in TENSOR_ORDER if c not in canon]
    if missing:
        found = list(used_block.columns) if used_block is not None else list(cols)
        raise InputError(
            f"no pressure-tensor column for {', '.join(missing)}; columns found: "
            f"{' '.join(found)}", path=spath, line=header_line,
            expected="the six components pxx pyy pzz pxy pxz pyz",
            fix=_fix_for_missing(fmt),
        )
    units = table.units
    if units is None:
        raise InputError(
            "the file does not say its units", path=spath,
            expected="a unit convention (real, metal, lj, si, gromacs, ...)",
            fix="pass --units",
        )
    n = table.n
    if n < 4:
        raise InputError(
            f"only {n} rows of the pressure tensor", path=spath, line=header_line,
            expected="a time series of many samples",
            fix="check that the thermo output interval is short compared with the run",
        )

    # ---- time axis --------------------------------------------------------------------
    if "time" in canon:
        tcol = cols[canon["time"]]
        spacing, bad = _uniform(tcol, exact=False)
        dt = spacing * units.time
        t0 = float(tcol[0]) * units.time
        axis_name, axis = canon["time"], tcol
        dt_how = f"from column '{canon['time']}'"
    elif "step" in canon:
        scol = cols[canon["step"]]
        if table.timestep is None:
            raise InputError(
                "the file does not give the time step", path=spath,
                expected=f"the integration time step (in {units.time_label or 'engine'} "
                "units)",
                fix="pass --timestep",
            )
        spacing, bad = _uniform(scol, exact=True)
        dt = spacing * table.timestep * units.time
        t0 = float(scol[0]) * table.timestep * units.time
        axis_name, axis = canon["step"], scol
        dt_how = (f"{spacing:g} steps x {table.timestep:g} {units.time_label} "
                  f"({table.timestep_source})")
    else:
        raise InputError(
            "no step or time column", path=spath, line=header_line,
            expected="a column of step numbers or times",
            fix="add step (or time) to the output",
        )
    if not spacing > 0:
        raise InputError(
            f"column '{axis_name}' does not increase", path=spath,
            line=table.line_of(1), expected="increasing steps or times",
            fix="choose one run with --run, or sort the rows",
        )
    if bad is not None:
        prev, here = axis[bad - 1], axis[bad]
        what = (f"{axis_name} {here:.10g} is repeated (not a restart: the rows are in one "
                "block)" if here == prev else f"{axis_name} {here:.10g} follows {prev:.10g}")
        raise InputError(
            f"samples are not evenly spaced: {what} (the interval elsewhere is "
            f"{spacing:.10g})", path=spath,
            line=table.line_of(bad),
            expected="a constant interval between rows",
            fix=("choose one run with --run, or remove the rows out of sequence"
                 if fmt in ("lammps-log", "table") else
                 "write the samples at a fixed interval (or resample them)"),
        )

    # ---- volume -----------------------------------------------------------------------------
    vol_file = None
    if "volume" in canon:
        lo, hi = table.bounds.get(canon["volume"], (np.nan, np.nan))
        # a constant column (the reader's bounds say so) needs no array and no scan
        vol_file = np.full(1, lo * units.volume) if lo == hi else \
            cols[canon["volume"]] * units.volume
        vol_how = f"column '{canon['volume']}'"
    elif all(c in canon for c in ("lx", "ly", "lz")):
        vol_file = (cols[canon["lx"]] * cols[canon["ly"]]) * cols[canon["lz"]]
        vol_file *= units.volume
        vol_how = f"columns '{canon['lx']}' x '{canon['ly']}' x '{canon['lz']}'"
    if vol_file is not None:
        vol_name = canon.get("volume") or "*".join(canon[c] for c in ("lx", "ly", "lz"))
        _check_values(vol_file, table, [vol_name], spath, positive=True, scale=units.volume)
        if np.all(vol_file == vol_file[0]):
            vol: float | np.ndarray = float(vol_file[0])
        else:
            vol = vol_file
        if volume is not None:
            given = user_number(volume, what="volume", option="--volume", path=spath) \
                * units.volume
            if not (np.isfinite(given) and given > 0):
                raise InputError(f"--volume {volume!r} is not a positive number",
                                 path=spath,
                                 expected=f"the box volume in {units.length_label}^3",
                                 fix="pass a positive --volume, or leave it out to use the "
                                     f"file's {vol_how}")
            mean = float(np.mean(vol_file))
            if not np.isclose(given, mean, rtol=1e-3, atol=0):
                warnings.append(
                    f"{src.path}: --volume {given / units.volume:g} {units.length_label}^3 differs "
                    f"from the file's {vol_how} (mean {mean / units.volume:g}); used the file"
                )
    elif volume is not None:
        vol = user_number(volume, what="volume", option="--volume", path=spath) * units.volume
        if not (np.isfinite(vol) and vol > 0):
            raise InputError(f"--volume {volume!r} is not a positive number", path=spath,
                             expected=f"the box volume in {units.length_label}^3",
                             fix="pass a positive --volume")
        vol_how = f"given by the user ({float(volume):g} {units.length_label}^3)"
    else:
        raise InputError(
            "no volume: the file has no volume column and no box lengths", path=spath,
            line=header_line, expected="vol (or lx, ly, lz) among the columns",
            fix=f"pass --volume (in {units.length_label}^3), or add vol to the output",
        )

    # ---- temperature ------------------------------------------------------------------------
    temp_how = ""
    temp: float | None = None
    if temperature is not None:
        temp = user_number(temperature, what="temperature", option="--temperature",
                           path=spath)
        if not (np.isfinite(temp) and temp > 0):
            raise InputError(f"--temperature {temperature!r} is not a positive number",
                             path=spath, expected="the thermostat set point (K, or reduced)",
                             fix="pass a positive --temperature")
        temperature_plausible(temp, reduced=units.reduced, path=spath)
        if "temperature" in canon:
            name = canon["temperature"]
            _check_values(cols[name], table, [name], spath)
            temperature_against_column(temp, cols[name], name=name, reduced=units.reduced,
                                       path=spath, line=header_line)
        temp_how = "set point given by the user"
    elif "temperature" in canon:
        name = canon["temperature"]
        _check_values(cols[name], table, [name], spath)
        temp = float(np.mean(cols[name]))
        temp_how = f"mean of column '{name}'"
        unit = "" if units.reduced else " K"
        warnings.append(
            f"{src.path}: temperature taken as the mean of column '{name}' "
            f"({temp:.6g}{unit}); the thermostat set point is preferred: pass --temperature"
        )

    # ---- pressure tensor ----------------------------------------------------------------------
    f = units.pressure
    symmetrised: list[str] = []
    in_place = None
    if _consume and not any(c in canon for c in ("pyx", "pzx", "pzy")):
        in_place = _rows_of_one_array([cols[canon[c]] for c in TENSOR_ORDER])
    if in_place is not None:
        # The reader's own storage (rows of one array), converted where it is: no copy.
        pressure = in_place
        if f != 1.0:
            pressure *= f
        for c in TENSOR_ORDER:
            cols.pop(canon[c], None)
    else:
        pressure = np.empty((6, n), dtype=np.float64)
        for i, c in enumerate(TENSOR_ORDER):
            a = cols[canon[c]]
            transposed = "p" + c[2] + c[1]
            if c[1] != c[2] and transposed in canon:
                np.add(a, cols[canon[transposed]], out=pressure[i])
                pressure[i] *= 0.5 * f
                symmetrised.append(f"{c}=({canon[c]}+{canon[transposed]})/2")
            else:
                np.multiply(a, f, out=pressure[i])
            if _consume:
                keep_for = {canon.get("volume"), canon.get("temperature"), axis_name,
                            canon.get("press")}
                if canon[c] not in keep_for:
                    cols.pop(canon[c], None)

    _check_values(pressure, table, [canon[c] for c in TENSOR_ORDER], spath, scale=f)
    warnings += _check_tensor(pressure, table, cols, f, spath)

    used = {c: canon[c] for c in TENSOR_ORDER}
    for c in ("pyx", "pzx", "pzy"):
        if c in canon:
            used[c] = canon[c]
    used[("time" if "time" in canon else "step")] = axis_name
    if "volume" in canon and vol_file is not None:
        used["volume"] = canon["volume"]
    elif vol_file is not None:
        used.update({c: canon[c] for c in ("lx", "ly", "lz")})
    if temp_how.startswith("mean"):
        used["temperature"] = canon["temperature"]

    desc = src.description
    desc += (f"; pressure x {f:.10g} Pa per {units.pressure_label}" if not units.reduced
             else "; reduced units (no conversion)")
    if symmetrised:
        desc += "; off-diagonal pairs averaged: " + ", ".join(symmetrised)
    desc += f"; dt {dt_how}; volume: {vol_how}"
    if temp_how:
        desc += f"; temperature: {temp_how}"
    source = replace(src, description=desc, rows=n, columns=used)
    return StressSeries(
        pressure=pressure, dt=dt, volume=vol, temperature=temp, units=units, source=source,
        temperature_source=temp_how, t0=t0, warnings=tuple(dict.fromkeys(warnings)),
    )
