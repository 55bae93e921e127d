"""Saving figures atomically (nothing is left behind if a step fails)."""

from __future__ import annotations

import io
import os
from pathlib import Path

__all__ = ["new_figure", "save_figure"]

_FORMATS = {".png": "png", ".pdf": "pdf", ".svg": "svg"}


def new_figure(nrows: int, ncols: int = 1, *, width: float = 7.0, height: float = 2.6):
    """A matplotlib figure with the non-interactive Agg backend (no display needed)."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height * nrows), layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False)
    return fig, axes


def plot_format(path: str | os.PathLike[str]) -> str:
    """The figure format from the suffix; ValueError naming the supported ones."""
    suffix = Path(path).suffix.lower()
    if suffix not in _FORMATS:
        raise ValueError(
            f"plot path {str(path)!r} must end in one of {', '.join(sorted(_FORMATS))}"
        )
    return _FORMATS[suffix]


def save_figure(fig, path: str | os.PathLike[str]) -> None:
    """Write `fig` to `path`: rendered in memory first, then written via a temporary file
    in the same folder and a rename (:func:`transport.report.jsonout.atomic_write_bytes`),
    so that no partial file is ever beside the outputs."""
    from .jsonout import atomic_write_bytes

    p = Path(path)
    fmt = plot_format(p)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=120)
    atomic_write_bytes(p, buf.getvalue())
