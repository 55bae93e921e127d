"""The one result type every estimator returns and every report reads."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import PurePath
from types import MappingProxyType
from typing import Any

import numpy as np

__all__ = ["Estimate"]


def _frozen_mapping(m: Mapping[str, Any] | None) -> Mapping[str, Any]:
    return MappingProxyType(dict(m or {}))


def _jsonable(v: Any) -> Any:
    """`v` with numpy scalars and arrays, tuples and paths made JSON-ready; NaN/inf -> None."""
    if isinstance(v, Mapping):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, np.ndarray):
        return _jsonable(v.tolist())
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, (float, np.floating)):
        f = float(v)
        return f if np.isfinite(f) else None
    if isinstance(v, PurePath):
        return str(v)
    return v


@dataclass(frozen=True)
class Estimate:
    """An estimate with an error bar that accounts for correlation.

    Attributes
    ----------
    quantity : str
        What was estimated, snake_case (``shear_viscosity``, ``self_diffusion``, or a
        column name for plain averages).
    method : str
        How, snake_case (``green_kubo``, ``einstein``, ``block_average``, ...).
    value : float
        The estimate, in `unit`.
    stderr : float
        Its standard error, in `unit`, accounting for correlation between samples.
    interval : tuple of float
        The 95% confidence interval ``(low, high)``, in `unit`.
    unit : str
        Unit of `value`, `stderr` and `interval`, as printed (``mPa s``, ``reduced``, ...).
    window : tuple of float or None
        The part of the data the estimate used: the Green–Kubo cutoff ``(0, t_c)``, the fit
        window ``(t0, t1)``, or the analysed time span ``(t_start, t_end)``.
    window_unit : str
        Unit of `window` (``ps``, ``tau``, ...).
    group : str or None
        Species or selection label, or None for the whole system.
    corrected : str or None
        Name of the finite-size correction applied, or None.
    n_independent : float or None
        Number of replicas, segments, or effective independent samples behind `stderr`.
    diagnostics : Mapping
        Scalars and short records that explain the estimate (read-only).
    curves : Mapping
        Named 1-D arrays for plots (read-only mapping; arrays are not copied).
    warnings : tuple of str
        Cautions the user must see beside the value (doubts about the result).
    notes : tuple of str
        What was done or assumed (information, not a caution). Messages of type
        :class:`~transport.errors.Note` given among `warnings` are moved here.
    """

    quantity: str
    method: str
    value: float
    stderr: float
    interval: tuple[float, float]
    unit: str
    window: tuple[float, float] | None = None
    window_unit: str = ""
    group: str | None = None
    corrected: str | None = None
    n_independent: float | None = None
    diagnostics: Mapping[str, Any] = field(default_factory=dict)
    curves: Mapping[str, np.ndarray] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "value", float(self.value))
        object.__setattr__(self, "stderr", float(self.stderr))
        lo, hi = self.interval
        object.__setattr__(self, "interval", (float(lo), float(hi)))
        if self.window is not None:
            a, b = self.window
            object.__setattr__(self, "window", (float(a), float(b)))
        object.__setattr__(self, "diagnostics", _frozen_mapping(self.diagnostics))
        object.__setattr__(self, "curves", _frozen_mapping(self.curves))
        from .errors import Note

        moved = tuple(w for w in self.warnings if isinstance(w, Note))
        object.__setattr__(self, "warnings",
                           tuple(w for w in self.warnings if not isinstance(w, Note)))
        object.__setattr__(self, "notes", tuple(dict.fromkeys((*self.notes, *moved))))

    def scaled(self, factor: float, unit: str) -> Estimate:
        """Return a copy with value, stderr and interval multiplied by `factor` (> 0)."""
        if not factor > 0:
            raise ValueError(f"factor must be positive, got {factor!r}")
        lo, hi = self.interval
        return replace(
            self,
            value=self.value * factor,
            stderr=self.stderr * factor,
            interval=(lo * factor, hi * factor),
            unit=unit,
        )

    def with_warnings(self, *extra: str) -> Estimate:
        """Return a copy with `extra` warnings appended."""
        return replace(self, warnings=self.warnings + tuple(extra))

    def with_notes(self, *extra: str) -> Estimate:
        """Return a copy with `extra` notes appended."""
        return replace(self, notes=self.notes + tuple(extra))

    def to_record(self) -> dict[str, Any]:
        """The JSON record of this estimate (the common ``results`` entry; no curves)."""

        return {
            "quantity": self.quantity,
            "method": self.method,
            "value": _jsonable(self.value),
            "stderr": _jsonable(self.stderr),
            "interval95": [_jsonable(self.interval[0]), _jsonable(self.interval[1])],
            "unit": self.unit,
            "group": self.group,
            "corrected": self.corrected,
            "window": None if self.window is None else [_jsonable(w) for w in self.window],
            "window_unit": self.window_unit,
            "n_independent": _jsonable(self.n_independent),
            "diagnostics": _jsonable(dict(self.diagnostics)),
            "warnings": list(self.warnings),
            "notes": list(self.notes),
        }
