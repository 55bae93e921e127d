"""The machine-readable output shared by every command.

Layout (stable keys; later commands add their own top-level keys)::

    {
      "version": "0.1.0",
      "command": "viscosity",
      "inputs":   [{"path", "format", "sha256", "read", "rows", "columns"}, ...],
      "settings": {...},
      "warnings": ["...", ...],
      "notes":    ["...", ...],
      "results":  [{"quantity", "method", "value", "stderr", "interval95", "unit",
                    "group", "corrected", "window", "window_unit", "n_independent",
                    "diagnostics", "warnings", "notes"}, ...],
      "curves":   [{"time": [...], ...} or null, ...]   (one per result, thinned)
    }

``warnings`` hold only cautions about the results (a pipeline can gate on an empty list);
``notes`` say what was done or assumed (:class:`transport.errors.Note`).

``curves`` holds each estimate's plot curves thinned to at most ``MAX_CURVE_POINTS``
points (the union of an even and a logarithmic grid of indices, so that both early lags and
the tail keep their shape); arrays of one length share their indices. ``transport report``
redraws the diagnostic figures from them without the raw files.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import Note
from ..estimate import Estimate, _jsonable
from ..series import Source

__all__ = ["MAX_CURVE_POINTS", "atomic_write_bytes", "build_document", "curves_record",
           "dumps", "folder_not_writable", "write_json"]

#: Largest number of points kept per curve in the JSON document.
MAX_CURVE_POINTS = 600


def _thin_indices(n: int, max_points: int) -> np.ndarray:
    if n <= max_points:
        return np.arange(n)
    half = max_points // 2
    lin = np.linspace(0, n - 1, half).round().astype(np.int64)
    log = np.geomspace(1, n - 1, max_points - half).round().astype(np.int64)
    return np.unique(np.concatenate([[0], lin, log, [n - 1]]))


def curves_record(curves: Mapping[str, Any], *,
                  max_points: int = MAX_CURVE_POINTS) -> dict[str, list] | None:
    """The 1-D curves of an estimate thinned to at most about `max_points` points each.

    Arrays of the same length are thinned with the same indices (they are plotted against
    each other); non-finite values become null. None when there are no curves.
    """
    out: dict[str, list] = {}
    for name, arr in curves.items():
        a = np.asarray(arr)
        if a.ndim != 1 or not np.issubdtype(a.dtype, np.number):
            continue
        out[name] = _jsonable(a[_thin_indices(a.size, max_points)])
    return out or None


def build_document(
    command: str,
    *,
    inputs: Iterable[Source],
    settings: Mapping[str, Any],
    results: Sequence[Estimate],
    warnings: Iterable[str] = (),
    notes: Iterable[str] = (),
    extra: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Assemble the common JSON document.

    Parameters
    ----------
    command : str
        The command that produced the results.
    inputs : iterable of Source
        What was read.
    settings : mapping
        The options in force (after defaults were resolved).
    results : sequence of Estimate
        The estimates, in print order.
    warnings : iterable of str
        Run-level warnings (each estimate also carries its own); items of type
        :class:`~transport.errors.Note` go to ``notes``.
    notes : iterable of str
        Run-level notes (what was done or assumed).
    extra : mapping, optional
        Additional top-level keys for this command.
    """
    from .. import __version__

    given = list(warnings)
    all_warnings = list(dict.fromkeys([*(w for w in given if not isinstance(w, Note)),
                                       *(w for r in results for w in r.warnings)]))
    all_notes = list(dict.fromkeys(
        [*notes, *(w for w in given if isinstance(w, Note)),
         *(n for r in results for n in r.notes)]))
    # a message is either a warning or a note, never both
    all_notes = [n for n in all_notes if n not in set(all_warnings)]
    doc: dict[str, Any] = {
        "version": __version__,
        "command": command,
        "inputs": [s.to_record() for s in inputs],
        "settings": _jsonable(dict(settings)),
        "warnings": [str(w) for w in all_warnings],
        "notes": [str(n) for n in all_notes],
        "results": [r.to_record() for r in results],
        "curves": [curves_record(r.curves) for r in results],
    }
    if extra:
        for k, v in extra.items():
            if k in doc:
                raise ValueError(f"extra key {k!r} would overwrite a common key")
            doc[k] = _jsonable(v)
    return doc


def dumps(doc: Mapping[str, Any]) -> str:
    """Serialise with NaN/inf as null (strict JSON)."""
    return json.dumps(_jsonable(doc), indent=2, allow_nan=False) + "\n"


def write_json(doc: Mapping[str, Any], path: str | os.PathLike[str]) -> None:
    """Write `doc` to `path` atomically, or to standard output if `path` is ``-``."""
    text = dumps(doc)
    if str(path) == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
        return
    _atomic_write_text(Path(path), text)


def _umask() -> int:
    """The process's umask (read without changing it where the system says it)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)  # elsewhere: set and restore at once
    os.umask(mask)
    return mask


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write `data` to `path` via a temporary file in the same folder and a rename.

    The temporary file is created only once the content is ready (one write, then the
    rename), is removed on every exit Python sees (errors, Ctrl-C), and the result gets the
    ordinary mode of a new file under the umask (0644 with umask 022), not the 0600 of a
    temporary file.
    """
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    except OSError as exc:  # name the folder, not a temporary file
        raise OSError(exc.errno, exc.strerror, str(path.parent)) from None
    try:
        try:
            os.fchmod(fd, 0o666 & ~_umask())
            view = memoryview(data)
            while view:
                view = view[os.write(fd, view):]
        finally:
            os.close(fd)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def folder_not_writable(path: str | os.PathLike[str]) -> str | None:
    """Why an output could not be written at `path`, found before any computation.

    Tries what writing will do: the nearest existing folder must be a folder, and a
    temporary file must be creatable in it (this also catches read-only file systems and
    folders a privileged user may not write, where permission bits say nothing). Returns
    None when it can be written, else the reason naming the folder. Nothing is left
    behind.
    """
    target = Path(path).resolve()
    folder = target.parent
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    if not folder.is_dir():
        return f"{str(folder)!r} is a file, not a folder"
    try:
        with tempfile.TemporaryFile(dir=folder):
            pass
    except OSError as exc:
        return f"cannot write in the folder {str(folder)!r} ({exc.strerror or exc})"
    return None


def _atomic_write_text(path: Path, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))
