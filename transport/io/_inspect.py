"""What a reader found in a file, in words (the ``inspect`` command's report)."""

from __future__ import annotations

import textwrap
from typing import Any

from ..errors import InputError

__all__ = ["describe_table", "stress_summary"]

_WIDTH = 100


def _fmt(x: float | None) -> str:
    if x is None:
        return "-"
    return f"{int(x)}" if float(x).is_integer() else f"{x:.6g}"


def stress_summary(table: Any) -> dict[str, Any]:
    """Whether `table` can become a stress series, and its sampling if so.

    Returns a JSON-ready record: ``usable`` (bool) and either ``dt``, ``samples``,
    ``duration`` (reported time unit), ``time_unit``, ``volume`` (engine length unit cubed),
    ``volume_unit``, ``volume_varies``; or ``problem`` and ``fix``.
    """
    from ._stress import stress_from_table

    try:
        s = stress_from_table(table)
    except InputError as exc:
        return {"usable": False, "problem": exc.message, "fix": exc.fix,
                "line": exc.line}
    u = s.units
    return {
        "usable": True,
        "dt": s.dt * u.time_scale,
        "samples": s.n,
        "duration": s.duration * u.time_scale,
        "time_unit": u.time_unit,
        "volume": s.mean_volume / u.volume,
        "volume_unit": f"{u.length_label}^3",
        "volume_varies": bool(getattr(s.volume, "ndim", 0)),
    }


def _wrap(label: str, text: str) -> list[str]:
    pad = " " * 11
    return textwrap.wrap(text, _WIDTH, initial_indent=f"{label:<11}", subsequent_indent=pad,
                         break_on_hyphens=False) or [label]


def describe_table(table: Any, summary: dict[str, Any]) -> str:
    """The text report of ``transport inspect`` for a :class:`~transport.io.Table`."""
    src = table.source
    out: list[str] = []
    fmt = src.format + (f" ({table.compression}-compressed)" if table.compression else "")
    out += _wrap("file", src.path)
    out += _wrap("format", fmt)
    if table.units is not None:
        out += _wrap("units", f"{table.units.name} ({table.units_source})")
    else:
        out += _wrap("units", "not given by the file (pass --units)")
    if table.timestep is not None:
        label = table.units.time_label if table.units is not None else ""
        out += _wrap("time step", f"{table.timestep:g} {label} ({table.timestep_source})")
    elif "time" in table.canonical:
        out += _wrap("time step", "not needed: the file has a time column")
    else:
        out += _wrap("time step", "not given by the file (pass --timestep)")
    word = "thermo runs" if src.format == "lammps-log" else "blocks"
    out.append(f"{word} ({len(table.blocks)} found):")
    out.append(f"  {'#':>3}  {'kind':<8}{'header':>7}  {'rows':>9}  {'used':>9}  range")
    for b in table.blocks:
        header = _fmt(b.header_line) if b.header_line is not None else "-"
        used = f"{b.rows_used}" if b.used else "no"
        rng = "-"
        if b.axis is not None and b.axis_first is not None:
            rng = f"{b.axis} {_fmt(b.axis_first)}-{_fmt(b.axis_last)}"
            if b.stride:
                rng += f" every {_fmt(b.stride)}"
        if b.first_line is not None:
            rng += f" (lines {b.first_line}-{b.last_line})"
        out.append(f"  {b.index:>3}  {b.kind:<8}{header:>7}  {b.rows:>9}  {used:>9}  {rng}")
        sep = ", " if any(" " in c for c in b.columns) else " "
        out += textwrap.wrap(sep.join(b.columns), _WIDTH, initial_indent="       columns: ",
                             subsequent_indent=" " * 16, break_on_hyphens=False)
        extra = []
        if not b.has_tensor:
            extra.append("no pressure tensor")
        if b.skipped_lines:
            extra.append(f"{b.skipped_lines} line(s) of text skipped")
        extra.append(f"ended by {b.ended_by}")
        extra.extend(b.notes)
        for e in extra:
            out += textwrap.wrap(e, _WIDTH, initial_indent="       - ",
                                 subsequent_indent=" " * 9)
    out += _wrap("read", src.description)
    canon = ", ".join(f"{k}={v}" for k, v in table.canonical.items())
    out += _wrap("columns", canon or "none recognised")
    if summary.get("usable"):
        vol = f"{summary['volume']:.6g} {summary['volume_unit']}"
        if summary["volume_varies"]:
            vol = "mean " + vol
        out += _wrap("stress", (
            f"pressure tensor found: {summary['samples']} samples every "
            f"{summary['dt']:.6g} {summary['time_unit']} ({summary['duration']:.6g} "
            f"{summary['time_unit']}), volume {vol}"))
    else:
        where = f" (line {summary['line']})" if summary.get("line") else ""
        text = f"not usable as a stress series: {summary['problem']}{where}"
        if summary.get("fix"):
            text += f"; fix: {summary['fix']}"
        out += _wrap("stress", text)
    if table.warnings:
        out.append("warnings:")
        for w in table.warnings:
            out += textwrap.wrap(w, _WIDTH, initial_indent="  - ", subsequent_indent="    ")
    else:
        out.append("warnings:  none")
    return "\n".join(out)
