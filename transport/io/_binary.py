"""Readers of binary formats: NumPy ``.npy`` / ``.npz`` files and energy files (``.edr``)."""

from __future__ import annotations

import io
import os
import shutil
import tempfile
import warnings
import zipfile
import zlib
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError
from ..series import Source
from ._open import DECOMPRESSION_ERRORS, open_bytes

if TYPE_CHECKING:
    from . import BlockInfo

__all__ = ["columns_source", "read_edr", "read_numpy", "single_block_info"]


def _decompressed(path: Path, compression: str | None) -> io.BytesIO | Path:
    if compression is None:
        return path
    with open_bytes(path) as op:
        try:
            return io.BytesIO(op.stream.read())
        except DECOMPRESSION_ERRORS as exc:
            raise InputError(f"cannot be decompressed ({exc})", path=str(path),
                             fix="check that the file was copied completely") from None


def read_numpy(path: Path, fmt: str, compression: str | None) -> tuple[
        dict[str, np.ndarray], dict[str, object], list[str]]:
    """Named 1-D columns of a structured ``.npy`` or of the arrays of an ``.npz``.

    Returns the columns, metadata (``units``: str, ``timestep``: float, from 0-d entries of
    an ``.npz`` of those names) and notes about entries that were ignored.
    """
    spath = str(path)
    src = _decompressed(path, compression)
    meta: dict[str, object] = {}
    notes: list[str] = []
    columns: dict[str, np.ndarray] = {}
    try:
        if fmt == "npy":
            arr = np.load(src, allow_pickle=False)
            if arr.dtype.names is None:
                raise InputError(
                    f"holds an unnamed array of shape {arr.shape}", path=spath,
                    expected="a structured array with named fields (step, pxx, ..., pyz)",
                    fix="save np.rec.fromarrays([...], names='step,pxx,pyy,pzz,pxy,pxz,pyz') "
                    "or use an .npz with named arrays",
                )
            for name in arr.dtype.names:
                col = np.asarray(arr[name])
                if col.ndim != 1 or not np.issubdtype(col.dtype, np.number):
                    notes.append(f"field {name!r} ignored (not a 1-D number column)")
                    continue
                columns[name] = np.ascontiguousarray(col, dtype=np.float64)
        else:
            with np.load(src, allow_pickle=False) as z:
                for name in z.files:
                    a = z[name]
                    if a.ndim == 0:
                        if name.lower() == "units" and a.dtype.kind in "US":
                            meta["units"] = str(a)
                        elif name.lower() in ("timestep", "time_step") and \
                                np.issubdtype(a.dtype, np.number):
                            meta["timestep"] = float(a)
                        else:
                            notes.append(f"entry {name!r} ignored (a single value)")
                        continue
                    if a.ndim != 1 or not np.issubdtype(a.dtype, np.number):
                        notes.append(f"entry {name!r} ignored (shape {a.shape}, not a 1-D "
                                     "number column)")
                        continue
                    columns[name] = np.ascontiguousarray(a, dtype=np.float64)
    except InputError:
        raise
    except (ValueError, OSError, EOFError, zipfile.BadZipFile, zlib.error) as exc:
        raise InputError(f"cannot be read as a NumPy {fmt} file ({exc})", path=spath,
                         fix="check that the file was written completely") from None
    if not columns:
        raise InputError(
            "has no 1-D number columns", path=spath,
            expected="named 1-D arrays (step or time, pxx ... pyz, ...)",
            fix="save the columns with np.savez(path, step=..., pxy=..., ...)",
        )
    lengths = {len(c) for c in columns.values()}
    if len(lengths) != 1:
        sizes = ", ".join(f"{k}: {len(v)}" for k, v in columns.items())
        raise InputError(
            f"columns have different lengths ({sizes})", path=spath,
            expected="one value per sample in every column",
            fix="save columns of equal length",
        )
    return columns, meta, notes


def read_edr(path: Path, compression: str | None) -> dict[str, np.ndarray]:
    """All terms of an energy file, via pyedr, as float64 columns."""
    import pyedr

    spath = str(path)
    tmpdir = None
    target = path
    if compression is not None:
        tmpdir = tempfile.mkdtemp(prefix="transport-edr-")
        target = Path(tmpdir) / "energy.edr"
        with open_bytes(path) as op, open(target, "wb") as out:
            try:
                shutil.copyfileobj(op.stream, out, 1 << 22)
            except DECOMPRESSION_ERRORS as exc:
                shutil.rmtree(tmpdir, ignore_errors=True)
                raise InputError(f"cannot be decompressed ({exc})", path=spath,
                                 fix="check that the file was copied completely") from None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # pyedr notes old file versions
            data = pyedr.edr_to_dict(os.fspath(target))
    except Exception as exc:  # pyedr raises assorted errors on damaged files
        raise InputError(
            f"cannot be read as an energy file ({type(exc).__name__}: {exc})", path=spath,
            expected="an .edr energy file", fix="check that the file was written completely",
        ) from None
    finally:
        if tmpdir is not None:
            shutil.rmtree(tmpdir, ignore_errors=True)
    return {k: np.ascontiguousarray(v, dtype=np.float64) for k, v in data.items()}


def single_block_info(names: list[str], canonical: dict[str, str], n: int, kind: str,
                      axis: tuple[str | None, np.ndarray | None], units: str | None,
                      timestep: float | None, notes: list[str]) -> BlockInfo:
    """A BlockInfo for formats that hold one table."""
    from . import BlockInfo

    canon, ax = axis
    stride = None
    if ax is not None and n >= 2:
        stride = float((ax[-1] - ax[0]) / (n - 1))
    return BlockInfo(
        index=1, kind=kind, header_line=None, first_line=None, last_line=None,
        columns=tuple(names), canonical=dict(canonical), rows=n, rows_used=n, axis=canon,
        axis_first=float(ax[0]) if ax is not None and n else None,
        axis_last=float(ax[-1]) if ax is not None and n else None, stride=stride,
        units=units, timestep=timestep, used=True, ended_by="end of file", skipped_lines=0,
        has_tensor=all(c in canonical for c in ("pxx", "pyy", "pzz", "pxy", "pxz", "pyz")),
        notes=tuple(notes),
    )


def columns_source(path: Path, fmt: str, sha: str | None, desc: str, n: int,
                   canonical: dict[str, str]) -> Source:
    return Source(path=str(path), format=fmt, sha256=sha, description=desc, rows=n,
                  columns=dict(canonical))

