"""From scanned blocks to one :class:`~transport.io.Table`: run selection, joining, settings."""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError
from ..series import Source
from ..units import UnitSystem
from ._columns import TENSOR_ORDER
from ._scan import DEFAULT_TIMESTEP, ScanBlock, ScanResult, Setting

if TYPE_CHECKING:
    from . import Table

__all__ = ["RunSpec", "assemble", "parse_run", "resolve_units"]

#: What a ``run`` argument may be after parsing: None (automatic), "all", "last", a 1-based
#: index, or an inclusive 1-based range (first, last).
RunSpec = None | str | int | tuple[int, int]


def parse_run(value: object) -> RunSpec:
    """Parse a run choice: None, ``"all"``, ``"last"``, ``N`` or ``"A-B"`` (1-based).

    Raises
    ------
    ValueError
        With a message naming the accepted forms.
    """
    if value is None:
        return None
    if isinstance(value, bool):
        raise ValueError(f"expected a run number, 'A-B', 'last' or 'all', got {value!r}")
    if isinstance(value, (int, np.integer)):
        k = int(value)
        if k < 1:
            raise ValueError(f"run numbers start at 1, got {k}")
        return k
    if isinstance(value, tuple) and len(value) == 2:
        a, b = (int(v) for v in value)
        if not 1 <= a <= b:
            raise ValueError(f"expected a range A-B with 1 <= A <= B, got {value!r}")
        return (a, b)
    text = str(value).strip().lower()
    if text in ("all", "last"):
        return text
    if text in ("auto", ""):
        return None
    for sep in ("-", ":", ".."):
        if sep in text:
            left, _, right = text.partition(sep)
            try:
                return parse_run((int(left), int(right)))
            except ValueError:
                break
    try:
        return parse_run(int(text))
    except ValueError:
        raise ValueError(
            f"expected a run number (1-based), a range A-B, 'last' or 'all', got {value!r}"
        ) from None


def resolve_units(name: str | UnitSystem | None, *, path: str, what: str) -> UnitSystem | None:
    """A UnitSystem from a name, turning an unknown name into an InputError."""
    from ..units import UNIT_SYSTEMS, get_unit_system

    if name is None:
        return None
    try:
        return get_unit_system(name)
    except ValueError:
        raise InputError(
            f"unknown unit system {name!r} ({what})", path=path,
            expected="one of " + ", ".join(sorted(UNIT_SYSTEMS)),
            fix="pass --units with one of these names",
        ) from None


def user_number(value: float | str, *, what: str, option: str, path: str | None) -> float:
    """A number the user gave (``--timestep``, ``--volume``, ...) as a float; InputError
    naming the option if it is not a number."""
    try:
        return float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} {value!r} is not a number", path=path,
                         fix=f"pass {option} as a number") from None


@dataclass
class _Part:
    """The part of a block that goes into the table: rows [lo, hi)."""

    block: ScanBlock
    lo: int
    hi: int
    axis_name: str | None
    stride: float | None
    dropped_notes: list[str]
    axis_first: float | None = None
    axis_last: float | None = None
    off_grid: tuple[float, ...] = ()


def _axis(blk: ScanBlock) -> tuple[str | None, np.ndarray | None]:
    for canon in ("step", "time"):
        name = blk.canonical.get(canon)
        if name is not None and blk.names.index(name) in blk.keep:
            return canon, blk.columns()[name]
    return None, None


def _fmt(x: float | None) -> str:
    if x is None:
        return "?"
    return f"{int(x)}" if float(x).is_integer() else f"{x:.6g}"


def _trim_part(blk: ScanBlock) -> _Part:
    """Rows of a block to use: thermo runs print their first and last step even when it is
    off the output interval; such end rows are dropped so the rows are evenly spaced."""
    canon, ax = _axis(blk)
    lo, hi = 0, blk.n
    notes: list[str] = []
    stride = None
    if ax is not None and blk.n >= 2:
        if blk.n >= 4:
            stride = float(ax[2] - ax[1])
        else:
            d = np.diff(ax)
            stride = float(np.min(d)) if d.size else None
        if blk.kind in ("run", "rerun") and canon == "step" and blk.n >= 4 and stride:
            if ax[1] - ax[0] != stride:
                lo = 1
                notes.append(f"first row (step {_fmt(ax[0])}) is off the output interval "
                             f"of {_fmt(stride)} steps; dropped")
            if ax[-1] - ax[-2] != stride:
                hi = blk.n - 1
                notes.append(f"last row (step {_fmt(ax[-1])}) is off the output interval "
                             f"of {_fmt(stride)} steps; dropped")
    first = float(ax[0]) if ax is not None and blk.n else None
    last = float(ax[blk.n - 1]) if ax is not None and blk.n else None
    off = tuple(float(ax[i]) for i in ([0] if lo else []) + ([blk.n - 1] if hi < blk.n else []))
    return _Part(blk, lo, hi, canon, stride, notes, first, last, off)


def _settings(blk: ScanBlock) -> tuple[Setting | None, Setting | None]:
    ctx = blk.context
    if ctx is None:
        return None, None
    return ctx.units, ctx.timestep


def _same_settings(a: ScanBlock, b: ScanBlock) -> bool:
    ua, ta = _settings(a)
    ub, tb = _settings(b)
    uav = ua.value if ua else None
    ubv = ub.value if ub else None
    tav = ta.value if ta else None
    tbv = tb.value if tb else None
    return uav == ubv and tav == tbv


def _continues(a: _Part, b: _Part) -> tuple[str, str]:
    """How earlier part `a` relates to part `b`, the earliest part of a chain.

    Returns ``("join", "")`` when `b` continues `a` (same columns, kind and settings, and
    `b` starts within one output interval after `a`'s end, or inside `a`: a restart);
    ``("superseded", "")`` when `a` starts at or after `b` (a run that a restart from an
    earlier point replaced); else ``("stop", reason)``.
    """
    if a.block.names != b.block.names:
        return "stop", "different columns"
    if a.block.kind != b.block.kind:
        return "stop", f"{a.block.kind} and {b.block.kind}"
    if not _same_settings(a.block, b.block):
        return "stop", "different units or time step"
    ca, cb = a.block.context, b.block.context
    if ca is not None and cb is not None and ca.epoch != cb.epoch:
        return "stop", "the step counter was reset between them"
    if a.axis_name is None or a.axis_name != b.axis_name or a.hi <= a.lo or b.hi <= b.lo:
        return "stop", "no step or time column"
    ax_a = a.block.columns()[a.block.canonical[a.axis_name]]
    ax_b = b.block.columns()[b.block.canonical[b.axis_name]]
    first_a, last_a, first_b = ax_a[a.lo], ax_a[a.hi - 1], ax_b[b.lo]
    stride = a.stride or b.stride
    if stride is None or stride <= 0:
        return "stop", "no output interval"
    if a.stride and b.stride and not np.isclose(a.stride, b.stride, rtol=1e-9, atol=0):
        return "stop", "different output intervals"
    tol = 1e-6 * stride
    if first_a >= first_b - tol:
        if last_a < first_b - tol:  # pragma: no cover - impossible for increasing steps
            return "stop", "not ordered"
        return "superseded", ""
    if first_b > last_a + stride + tol:
        return "stop", f"gap between {a.axis_name} {_fmt(last_a)} and {_fmt(first_b)}"
    return "join", ""


def assemble(
    scan: ScanResult,
    *,
    path: Path,
    fmt: str,
    run: RunSpec,
    units: str | UnitSystem | None,
    timestep: float | None,
    sha256: str | None,
    compression: str | None,
    with_time: bool = True,
) -> Table:
    """Select and join blocks into a Table (see :func:`transport.io.read_table`)."""
    from . import BlockInfo, Table

    spath = str(path)
    is_log = fmt == "lammps-log"
    word = "thermo run" if is_log else "block"
    blocks = scan.blocks
    nonempty = [b for b in blocks if b.n > 0]

    def orphan_error() -> InputError | None:
        """The error for a header that took no rows (rows that do not match it, or none)."""
        if scan.orphan_header is None:
            return None
        ln, text = scan.orphan_header
        if scan.orphan_detail:
            return InputError(
                f"header {text[:60]!r} does not match its rows: {scan.orphan_detail}",
                path=spath, line=ln, expected="one name in the header for each value in a row",
                fix="repair the header (a column name missing or extra?) or the rows",
            )
        if is_log:
            return InputError(
                f"header {text[:60]!r} has no rows of numbers after it", path=spath, line=ln,
                expected="rows of numbers under the header",
                fix="check that the run produced output (a crashed or empty run?)",
            )
        return None

    if not nonempty:
        if blocks:
            b = blocks[0]
            raise InputError(
                "header has no rows of numbers after it", path=spath, line=b.header_line,
                expected=f"rows of {b.ncols} numbers under the header",
                fix="check that the run produced output (a crashed or empty run?)",
            )
        err = orphan_error()
        if err is not None:
            raise err
        if is_log:
            raise InputError(
                "no thermo output found", path=spath,
                expected="a header line of thermo keywords (e.g. 'Step Temp Press Pxx ...') "
                "followed by rows of numbers (thermo_style custom or one; the multi and "
                "yaml styles are not read)",
                fix="give the log of a run that printed thermo output",
            )
        hint = _number_style(path)
        if hint is not None:
            raise hint
        raise InputError(
            "no table found", path=spath,
            expected="a header line naming the columns (e.g. '# step pxy pxz pyz' or "
            "'step,pxy,pxz,pyz') followed by rows of numbers",
            fix="add a header line above the numbers",
        )
    parts = {b.index: _trim_part(b) for b in nonempty}
    warnings: list[str] = list(scan.warnings)
    notes: list[str] = list(scan.notes)

    def has_tensor(b: ScanBlock) -> bool:
        return all(c in b.canonical for c in TENSOR_ORDER)

    # ---- choose blocks -----------------------------------------------------------------
    chosen: list[ScanBlock]
    how: str
    # A header after the last rows that took no rows of its own: the run that matters most
    # (the last) is damaged or empty. Refused when no earlier run has the pressure tensor
    # to fall back on, else used with a warning.
    late_orphan = orphan_error() if scan.orphan_header is not None and \
        scan.orphan_header[0] > max(b.last_line or 0 for b in nonempty) else None
    if late_orphan is not None and not scan.orphan_detail:
        warnings.append(f"{spath}: the header at line {late_orphan.line} has no rows of "
                        "numbers after it (the last run stopped before its first output?)")
    if run is None:
        with_tensor = [b for b in nonempty if has_tensor(b) and b.kind != "minimize"]
        if late_orphan is not None and not with_tensor:
            raise late_orphan
        pool = with_tensor or [b for b in nonempty if b.kind != "minimize"] or nonempty
        chosen = [pool[-1]]
        superseded: list[ScanBlock] = []
        for prev in reversed([b for b in nonempty if b.index < chosen[0].index]):
            verdict, _ = _continues(parts[prev.index], parts[chosen[0].index])
            if verdict == "stop":
                break
            if verdict == "superseded":
                superseded.append(prev)
                continue
            chosen.insert(0, prev)
        how = "automatic: the last with the pressure tensor" if with_tensor else \
            "automatic: the last"
        if len(chosen) > 1:
            how += f", joined with the {len(chosen) - 1} earlier it continues"
        for b in superseded:
            p = parts[b.index]
            warnings.append(
                f"{spath}: {word} {b.index} ({p.axis_name} {_fmt(p.axis_first)}-"
                f"{_fmt(p.axis_last)}) is replaced by the later {word} that starts again at "
                f"{p.axis_name} {_fmt(parts[chosen[-1].index].axis_first)} (a restart?); "
                "kept the later data"
            )
        # later runs that print only part of the tensor: left out, which may be half the
        # production (issue 11), so the user is told what they hold
        for b in nonempty:
            have = [c for c in TENSOR_ORDER if c in b.canonical]
            if b.index > chosen[-1].index and have and not has_tensor(b) \
                    and b.kind != "minimize":
                p = parts[b.index]
                warnings.append(
                    f"{spath}: the later {word} {b.index} prints only {len(have)} of the 6 "
                    f"pressure-tensor components ({' '.join(b.canonical[c] for c in have)}); "
                    f"its {b.n} rows ({p.axis_name} {_fmt(p.axis_first)}-"
                    f"{_fmt(p.axis_last)}) were left out and {word} {_span(chosen)} used; "
                    "pass --run to choose, or print the full tensor in every run")
        unused = [b for b in with_tensor if b not in chosen and b not in superseded]
        if unused:
            idx = ", ".join(str(b.index) for b in unused)
            warnings.append(
                f"{spath}: {len(with_tensor)} {word}s carry the pressure tensor; used "
                f"{word} {_span(chosen)} and not {idx}; pass --run to choose, or --run all "
                "to join them"
            )
    else:
        count = len(blocks)

        def pick(k: int) -> ScanBlock:
            if not 1 <= k <= count:
                raise InputError(
                    f"{word} {k} requested but the file has {count} {word}(s)",
                    path=spath, expected=f"a {word} number from 1 to {count}",
                    fix=f"pass --run between 1 and {count} (see 'transport inspect')",
                )
            b = blocks[k - 1]
            if b.n == 0:
                raise InputError(
                    f"{word} {k} has no rows", path=spath, line=b.header_line,
                    expected="rows of numbers under the header",
                    fix="choose another run with --run",
                )
            return b

        if run == "all":
            chosen = list(nonempty)
            how = "all, as requested"
        elif run == "last":
            chosen = [nonempty[-1]]
            how = "the last, as requested"
        elif isinstance(run, tuple):
            chosen = [pick(k) for k in range(run[0], run[1] + 1)]
            how = "as requested"
        else:
            chosen = [pick(int(run))]
            how = "as requested"
        for a, b in itertools.pairwise(chosen):
            if a.names != b.names:
                raise InputError(
                    f"{word}s {a.index} and {b.index} have different columns and cannot be "
                    "joined", path=spath, line=b.header_line,
                    expected="the same columns in every joined run",
                    fix="choose one run with --run N",
                )
            if not _same_settings(a, b):
                raise InputError(
                    f"{word}s {a.index} and {b.index} use different units or time steps",
                    path=spath, line=b.header_line,
                    expected="the same settings in every joined run",
                    fix="choose one run with --run N",
                )

    # ---- join ---------------------------------------------------------------------------
    used: list[_Part] = [parts[b.index] for b in chosen]
    join_notes: list[str] = []
    for a, b in itertools.pairwise(used):
        if a.axis_name is None or a.axis_name != b.axis_name or b.hi <= b.lo:
            continue
        ca, cb = a.block.context, b.block.context
        if ca is not None and cb is not None and ca.epoch != cb.epoch:
            continue  # steps were reset between them: not an overlap, just appended
        ax_a = a.block.columns()[a.block.canonical[a.axis_name]]
        ax_b = b.block.columns()[b.block.canonical[b.axis_name]]
        first_b = ax_b[b.lo]
        tol = 1e-6 * (a.stride or 1.0)
        seg = ax_a[a.lo: a.hi]
        later = np.flatnonzero(seg >= first_b - tol)
        if later.size == 0:
            continue
        cut = a.lo + int(later[0])
        dropped = a.hi - cut
        if dropped == 1 and abs(ax_a[cut] - first_b) <= tol:
            join_notes.append(f"{a.axis_name} {_fmt(first_b)} repeated at the start of "
                              f"{word} {b.block.index}; kept once")
        else:
            warnings.append(
                f"{spath}: {word}s {a.block.index} and {b.block.index} overlap in "
                f"{a.axis_name} {_fmt(first_b)}-{_fmt(ax_a[a.hi - 1])} ({dropped} rows, a "
                f"restart?); kept the later data from {word} {b.block.index}"
            )
        a.hi = cut

    # ---- settings -------------------------------------------------------------------------
    u_set, t_set = _settings(chosen[-1])
    user_units = resolve_units(units, path=spath, what="given by the user")
    file_units = None
    if u_set is not None:
        file_units = resolve_units(u_set.value, path=spath, what=f"{u_set.how}")
    units_source = ""
    if file_units is not None and user_units is not None and file_units != user_units:
        raise InputError(
            f"--units {user_units.name} disagrees with the file, which sets units "
            f"{file_units.name} ({u_set.how} at line {u_set.line})",  # type: ignore[union-attr]
            path=spath, line=u_set.line,  # type: ignore[union-attr]
            fix="drop --units: the file says which units it uses",
        )
    if file_units is not None:
        unit_sys = file_units
        units_source = f"{u_set.how} at line {u_set.line}"  # type: ignore[union-attr]
    elif user_units is not None:
        unit_sys = user_units
        units_source = "given by the user"
    else:
        unit_sys = None

    ts_value: float | None = None
    ts_source = ""
    if timestep is not None:
        timestep = user_number(timestep, what="time step", option="--timestep", path=spath)
        if not (np.isfinite(timestep) and timestep > 0):
            raise InputError(f"time step {timestep!r} is not positive", path=spath,
                             fix="pass a positive --timestep (in the engine's time unit)")
    if t_set is not None:
        if timestep is not None and not np.isclose(timestep, t_set.value, rtol=1e-9, atol=0):
            raise InputError(
                f"--timestep {timestep:g} disagrees with the file, which sets "
                f"{t_set.value:g} ({t_set.how} at line {t_set.line})",
                path=spath, line=t_set.line,
                fix="drop --timestep: the file says which time step it uses",
            )
        ts_value, ts_source = float(t_set.value), f"{t_set.how} at line {t_set.line}"
    elif timestep is not None:
        ts_value, ts_source = timestep, "given by the user"
    elif is_log and file_units is not None and file_units.name in DEFAULT_TIMESTEP:
        ts_value = DEFAULT_TIMESTEP[file_units.name]
        ts_source = f"default of units {file_units.name} (no timestep command in the log)"
        warnings.append(
            f"{spath}: the log sets no time step before the run; assumed the engine's "
            f"default for units {file_units.name}: {ts_value:g} {file_units.time_label}; "
            "pass --timestep if the input set another"
        )

    # ---- columns ----------------------------------------------------------------------------
    first_blk = chosen[0]
    kept_names = [first_blk.names[j] for j in first_blk.keep]
    total = sum(max(p.hi - p.lo, 0) for p in used)
    columns: dict[str, np.ndarray] = {}
    if len(used) == 1:
        p = used[0]
        for nm, arr in p.block.columns().items():
            columns[nm] = arr[p.lo: p.hi]
    else:
        for nm in kept_names:
            out = np.empty(total, dtype=np.float64)
            pos = 0
            for p in used:
                j = p.block.keep.index(p.block.names.index(nm))
                m = p.hi - p.lo
                out[pos: pos + m] = p.block.arrays[j][p.lo: p.hi]
                p.block.arrays[j] = p.block.arrays[j][:0]  # free it before the next column
                pos += m
            columns[nm] = out
    canonical = {c: nm for c, nm in first_blk.canonical.items() if nm in columns}
    # Bounds of the kept columns over the whole blocks used (the rows kept lie within).
    bounds: dict[str, tuple[float, float]] = {}
    part_bounds = [p.block.bounds() for p in used]
    if all(nm in b for b in part_bounds for nm in columns):
        for nm in columns:
            los, his = zip(*(b[nm] for b in part_bounds), strict=True)
            bounds[nm] = (float(np.min(los)), float(np.max(his)))

    # Row -> file line map over the joined rows.
    line_map: list[tuple[int, int]] = []
    offset = 0
    for p in used:
        blk = p.block
        for i, (r0, l0) in enumerate(zip(blk.map_rows, blk.map_lines, strict=True)):
            r1 = blk.map_rows[i + 1] if i + 1 < len(blk.map_rows) else blk.n
            a, b = max(r0, p.lo), min(r1, p.hi)
            if a < b:
                line_map.append((offset + a - p.lo, l0 + a - r0))
        offset += max(p.hi - p.lo, 0)

    # Time axis in internal units, when derivable.
    time = None
    if unit_sys is not None and with_time:
        if "time" in canonical:
            time = columns[canonical["time"]] * unit_sys.time
        elif "step" in canonical and ts_value is not None:
            time = columns[canonical["step"]] * (ts_value * unit_sys.time)

    # ---- what was read -------------------------------------------------------------------
    for p in used:
        blk = p.block
        for w in blk.warnings:
            warnings.append(f"{spath}: {w}")
        if blk.skipped:
            ln, text = blk.skipped_examples[0]
            warnings.append(
                f"{spath}: skipped {blk.skipped} line(s) of text inside {word} {blk.index} "
                f"(first at line {ln}: {text[:70]!r})"
            )
        for nt in blk.notes:
            if "partial pressure" in nt:
                warnings.append(f"{spath}: {nt}")
    rows_read = sum(p.block.n for p in used)
    dropped = rows_read - total
    first_ln = next((p.block.line_of(p.lo) for p in used if p.hi > p.lo), None)
    where = f"lines {first_ln}-{_last_line(used)}"
    if len(blocks) == 1 and not is_log:
        desc = f"table ({where})"
    else:
        desc = f"{word} {_span(chosen)} of {len(blocks)} ({how}): {where}"
    axis = used[0].axis_name
    if axis is not None and total and axis in canonical:
        ax_col = columns[canonical[axis]]
        stride = used[-1].stride
        desc += f", {axis} {_fmt(ax_col[0])}-{_fmt(ax_col[-1])}"
        if stride:
            desc += f" every {_fmt(stride)}"
    desc += f"; {total} rows kept"
    if dropped:
        desc += f", {dropped} dropped"
    off = [x for p in used for x in p.off_grid]
    details = list(join_notes)
    if off:
        details.insert(0, f"{len(off)} row(s) at run ends off the output interval: "
                          f"{used[0].axis_name} {', '.join(_fmt(x) for x in off)}")
    if details:
        desc += " (" + "; ".join(details) + ")"
    skipped_total = sum(p.block.skipped for p in used)
    if skipped_total:
        desc += f"; {skipped_total} line(s) of text skipped"
    if unit_sys is not None:
        desc += f"; units {unit_sys.name} ({units_source})"
    if ts_value is not None:
        tlabel = f" {unit_sys.time_label}" if unit_sys is not None else ""
        desc += f"; time step {ts_value:g}{tlabel} ({ts_source})"

    # engine speed from the runs' wall-clock times, when every run read reports one
    speed = None
    loops = [(p.block.loop_seconds, p.block.loop_steps) for p in used]
    if (loops and unit_sys is not None and ts_value is not None
            and all(sec is not None and st for sec, st in loops)):
        sim = sum(st for _, st in loops) * ts_value * unit_sys.time  # type: ignore[misc]
        wall = sum(sec for sec, _ in loops)  # type: ignore[misc]
        speed = wall / sim if sim > 0 and wall > 0 else None
    source = Source(path=spath, format=fmt, sha256=sha256, description=desc, rows=total,
                    columns=dict(canonical), wall_seconds_per_time=speed)
    chosen_ids = {b.index for b in chosen}
    infos = []
    for b in blocks:
        p = parts.get(b.index)
        uset, tset = _settings(b)
        infos.append(BlockInfo(
            index=b.index, kind=b.kind, header_line=b.header_line, first_line=b.first_line,
            last_line=b.last_line, columns=tuple(b.names), canonical=dict(b.canonical),
            rows=b.n,
            rows_used=(max(p.hi - p.lo, 0) if (p is not None and b.index in chosen_ids) else 0),
            axis=p.axis_name if p is not None else None,
            axis_first=p.axis_first if p is not None else None,
            axis_last=p.axis_last if p is not None else None,
            stride=p.stride if p is not None else None,
            units=uset.value if uset else None,
            timestep=tset.value if tset else None,
            used=b.index in chosen_ids, ended_by=b.ended_by, skipped_lines=b.skipped,
            has_tensor=has_tensor(b),
            notes=tuple(b.notes + (p.dropped_notes if p is not None else [])),
        ))
    return Table(
        columns=columns, canonical=canonical, units=unit_sys, timestep=ts_value, time=time,
        source=source, warnings=tuple(dict.fromkeys(warnings)), blocks=tuple(infos),
        line_map=tuple(line_map), units_source=units_source, timestep_source=ts_source,
        compression=compression, notes=tuple(notes), bounds=bounds,
    )


_COMMA_NUMBER = re.compile(r"^[+-]?\d+(?:,\d+)?(?:[eE][+-]?\d+)?$")
_FORTRAN_EXP = re.compile(r"(?<![\w.])[+-]?(?:\d+\.?\d*|\.\d+)[dD][+-]?\d+(?![\w.])")


def _number_style(path: Path) -> InputError | None:
    """An error naming the number style when a table's rows use decimal commas or Fortran
    'D' exponents (pandas reads neither as numbers, so no table is found)."""
    from ._open import read_head

    try:
        head, _ = read_head(path)
    except InputError:
        return None
    for k, raw in enumerate(head.decode("utf-8", "replace").splitlines()[:200], start=1):
        toks = [t.strip() for t in re.split(r"[;\t]", raw) if t.strip()]
        if len(toks) > 1 and all(_COMMA_NUMBER.match(t) for t in toks) and \
                any("," in t for t in toks):
            return InputError(
                f"numbers are written with decimal commas ({raw.strip()[:40]!r})",
                path=str(path), line=k,
                expected="numbers with a decimal point (1.5, 2.3e-4), separated by commas, "
                "blanks or tabs", fix="convert the decimal commas to points (and the ';' "
                "separators to ',') before reading")
        m = _FORTRAN_EXP.search(raw)
        if m and not re.search(r"[A-Za-z_]", _FORTRAN_EXP.sub("", raw)):
            return InputError(
                f"numbers use Fortran 'D' exponents ({m.group(0)!r})", path=str(path),
                line=k, expected="exponents written with E (1.0E+03)",
                fix="replace the D exponents with E before reading")
    return None


def _span(chosen: list[ScanBlock]) -> str:
    idx = [b.index for b in chosen]
    if len(idx) == 1:
        return str(idx[0])
    if idx == list(range(idx[0], idx[-1] + 1)):
        return f"{idx[0]}-{idx[-1]}"
    return "+".join(str(i) for i in idx)


def _last_line(used: list[_Part]) -> str:
    p = used[-1]
    ln = p.block.line_of(p.hi - 1) if p.hi > p.lo else None
    return str(ln) if ln is not None else "?"
