"""Plain-text tables of estimates for the terminal."""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

from ..estimate import Estimate

__all__ = ["format_estimates", "format_number"]


def format_number(x: float | None, sig: int = 4) -> str:
    """A number with `sig` significant digits; ``-`` for None or NaN."""
    if x is None or not math.isfinite(x):
        return "-"
    if x == 0:
        return "0"
    mag = abs(x)
    if 1e-3 <= mag < 1e6:
        decimals = max(0, sig - 1 - int(math.floor(math.log10(mag))))
        return f"{x:.{decimals}f}"
    return f"{x:.{sig - 1}e}"


def _count(n: float | None) -> str:
    if n is None or not math.isfinite(n):
        return "-"
    return str(int(n)) if float(n).is_integer() else format_number(n, 3)


def _window(e: Estimate) -> str:
    if e.window is None:
        return "-"
    a, b = e.window
    return f"{format_number(a, 3)}-{format_number(b, 3)} {e.window_unit}".strip()


def format_estimates(
    estimates: Sequence[Estimate],
    *,
    title: str | None = None,
    notes: Iterable[str] = (),
) -> str:
    """A fixed-width table: quantity, method, value, stderr, 95% interval, unit, window, n.

    Warnings of all estimates and the `notes` follow the table, each once.
    """
    header = ("quantity", "group", "method", "value", "stderr", "95% interval", "unit",
              "window", "n")
    rows = []
    for e in estimates:
        lo, hi = e.interval
        rows.append((
            e.quantity + (f" ({e.corrected})" if e.corrected else ""),
            e.group or "-",
            e.method,
            format_number(e.value),
            format_number(e.stderr, 2),
            f"[{format_number(lo)}, {format_number(hi)}]",
            e.unit,
            _window(e),
            _count(e.n_independent),
        ))
    if all(r[1] == "-" for r in rows):
        header = header[:1] + header[2:]
        rows = [r[:1] + r[2:] for r in rows]
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(header)]
    lines = []
    if title:
        lines.append(title)
    lines.append("  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True)).rstrip())
    for r in rows:
        lines.append("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())
    extra = list(dict.fromkeys([*notes, *(w for e in estimates for w in e.warnings),
                                *(n for e in estimates for n in e.notes)]))
    if extra:
        lines.append("")
        lines.extend(f"note: {w}" for w in extra)
    return "\n".join(lines)
