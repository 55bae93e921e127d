"""Text table of run-length verdicts (reads :class:`transport.convergence.Verdict`)."""

from __future__ import annotations

import math
from collections.abc import Sequence

from ..convergence import Verdict
from .text import format_number

__all__ = ["format_verdicts"]


def _more(v: Verdict) -> str:
    if v.additional_time is None:
        return "-"
    if v.additional_time == 0:
        return "none" if v.long_enough else "-"
    t = f"+{format_number(v.additional_time, 3)} {v.time_unit} per run".strip()
    if v.wall_clock_hours is not None:
        t += f" (~{format_number(v.wall_clock_hours, 2)} h)"
    if v.additional_replicas:
        t += f" or +{v.additional_replicas} replica(s)"
    return t


def _pct(x: float) -> str:
    return "-" if not math.isfinite(x) else f"{x:.1%}"


def format_verdicts(verdicts: Sequence[Verdict], *, details: bool = True) -> str:
    """A fixed-width table: quantity, group, achieved relative error, target, verdict, more
    simulation, main reason; then (with `details`) every reason and check of each verdict.
    """
    header = ("quantity", "group", "method", "rel. error", "target", "verdict", "more",
              "main reason")
    rows = [(v.quantity, v.group or "-", v.method, _pct(v.relative_stderr),
             _pct(v.target_relative_stderr), "long enough" if v.long_enough else "too short",
             _more(v), v.main_reason) for v in verdicts]
    if rows and all(r[1] == "-" for r in rows):
        header = header[:1] + header[2:]
        rows = [r[:1] + r[2:] for r in rows]
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(header)]
    widths[-1] = len(header[-1])  # the reason runs on; no padding
    lines = ["run-length verdict"]
    lines.append("  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True)).rstrip())
    for r in rows:
        lines.append("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())
    if details:
        for v in verdicts:
            label = v.quantity + (f" ({v.group})" if v.group else "") + f", {v.method}"
            lines.append("")
            lines.append(f"{label}:")
            lines.extend(f"  - {r}" for r in v.reasons)
            for c in v.checks:
                mark = ("n/a" if c.passed is None else "ok" if c.passed else
                        "FAIL" if c.blocking else "caution")
                lines.append(f"    [{mark}] {c.name}: {c.message}")
    return "\n".join(lines)
