"""Validated containers for what the readers produce.

A :class:`StressSeries` holds the pressure tensor on a uniform time axis in internal units
(SI, or reduced for Lennard-Jones input), with the volume, the temperature when known, the
unit system and where the data came from. Readers build it; estimators only read it.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .units import UnitSystem, get_unit_system

__all__ = ["COMPONENTS", "Source", "StressSeries"]

#: Order of the six pressure-tensor components along axis 0 of ``StressSeries.pressure``.
COMPONENTS: tuple[str, ...] = ("xx", "yy", "zz", "xy", "xz", "yz")


@dataclass(frozen=True)
class Source:
    """Where a series came from.

    Attributes
    ----------
    path : str
        The file read ("" for arrays passed in memory).
    format : str
        The format the reader recognised (``lammps-log``, ``table``, ``npz``, ``edr``, ...).
    sha256 : str or None
        Hex digest of the file's bytes (of the compressed file if compressed).
    description : str
        What was read, in words: run(s), columns, rows kept and dropped.
    rows : int
        Number of samples kept.
    columns : dict
        Canonical name -> name in the file, for the columns used.
    """

    path: str = ""
    format: str = ""
    sha256: str | None = None
    description: str = ""
    rows: int = 0
    columns: dict[str, str] = field(default_factory=dict)

    def to_record(self) -> dict:
        """JSON record for the ``inputs`` list."""
        return {
            "path": self.path,
            "format": self.format,
            "sha256": self.sha256,
            "read": self.description,
            "rows": int(self.rows),
            "columns": dict(self.columns),
        }


def _check_finite(name: str, a: np.ndarray, source: Source) -> None:
    from .errors import InputError

    bad = ~np.isfinite(a)
    if bad.any():
        idx = np.argwhere(bad)[0]
        raise InputError(
            f"{name} has a non-finite value (sample {int(idx[-1])})",
            path=source.path or None,
            expected="finite numbers in every row",
            fix="remove or repair the damaged rows",
        )


@dataclass(frozen=True)
class StressSeries:
    """The pressure tensor sampled on a uniform time axis.

    Attributes
    ----------
    pressure : ndarray, shape (6, n)
        P_xx, P_yy, P_zz, P_xy, P_xz, P_yz (order of :data:`COMPONENTS`), in Pa (or reduced
        eps/sigma^3). C-contiguous, float64, read-only.
    dt : float
        Time between samples, in s (or reduced tau).
    volume : float or ndarray of shape (n,)
        Box volume in m^3 (or sigma^3): a constant or one value per sample.
    temperature : float or None
        Temperature in K (or reduced), or None if unknown.
    temperature_source : str
        How `temperature` was obtained (``set point given by the user``,
        ``mean of column 'Temp'``, ...).
    units : UnitSystem
        The engine convention the data came in; internal units follow from it.
    source : Source
        Provenance.
    t0 : float
        Time of the first sample, in s (or tau).
    warnings : tuple of str
        What the reader noticed and the user must know.
    """

    pressure: np.ndarray
    dt: float
    volume: float | np.ndarray
    temperature: float | None
    units: UnitSystem
    source: Source = field(default_factory=Source)
    temperature_source: str = ""
    t0: float = 0.0
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        from .errors import InputError

        units = get_unit_system(self.units)
        object.__setattr__(self, "units", units)
        p = np.ascontiguousarray(self.pressure, dtype=np.float64)
        src = self.source
        if p.ndim != 2 or p.shape[0] != 6:
            raise InputError(
                f"pressure tensor has shape {p.shape}",
                path=src.path or None,
                expected="six components (xx, yy, zz, xy, xz, yz) by samples",
            )
        if p.shape[1] < 4:
            raise InputError(
                f"only {p.shape[1]} samples of the pressure tensor",
                path=src.path or None,
                expected="a time series of many samples",
                fix="check that the thermo output interval is short compared with the run",
            )
        _check_finite("pressure tensor", p, src)
        if not (np.isfinite(self.dt) and self.dt > 0):
            raise InputError(
                f"time between samples is {self.dt!r}",
                path=src.path or None,
                expected="a positive sampling interval",
                fix="pass --timestep (the integration time step) if the file does not set it",
            )
        vol = self.volume
        if np.ndim(vol) == 0:
            vol = float(vol)
            ok = np.isfinite(vol) and vol > 0
        else:
            vol = np.ascontiguousarray(vol, dtype=np.float64)
            ok = vol.shape == (p.shape[1],) and bool(np.all(vol > 0)) and bool(
                np.all(np.isfinite(vol))
            )
        if not ok:
            raise InputError(
                "volume is missing, not positive, or does not match the samples",
                path=src.path or None,
                expected="a positive volume (constant, or one per sample)",
                fix="pass --volume, or include a volume or box-length column",
            )
        t = self.temperature
        if t is not None and not (np.isfinite(t) and t > 0):
            raise InputError(
                f"temperature is {t!r}",
                path=src.path or None,
                expected="a positive temperature",
                fix="pass --temperature (the thermostat set point)",
            )
        p.flags.writeable = False
        if isinstance(vol, np.ndarray):
            vol.flags.writeable = False
        object.__setattr__(self, "pressure", p)
        object.__setattr__(self, "volume", vol)
        object.__setattr__(self, "dt", float(self.dt))
        object.__setattr__(self, "t0", float(self.t0))
        object.__setattr__(self, "temperature", None if t is None else float(t))
        object.__setattr__(self, "warnings", tuple(self.warnings))

    # ---- derived views ---------------------------------------------------------------
    @property
    def n(self) -> int:
        """Number of samples."""
        return int(self.pressure.shape[1])

    @property
    def duration(self) -> float:
        """Length of the series, ``n * dt``, in s (or tau)."""
        return self.n * self.dt

    @property
    def time(self) -> np.ndarray:
        """Sample times in s (or tau), built on demand."""
        return self.t0 + self.dt * np.arange(self.n)

    @property
    def mean_volume(self) -> float:
        """Mean volume in m^3 (or sigma^3)."""
        return float(np.mean(self.volume))

    def component(self, name: str) -> np.ndarray:
        """One component, e.g. ``series.component("xy")`` (read-only view)."""
        return self.pressure[COMPONENTS.index(name)]

    def with_temperature(self, temperature: float, source: str) -> StressSeries:
        """Copy with the temperature set (K or reduced) and how it was obtained."""
        return replace(self, temperature=temperature, temperature_source=source)

    def sliced(self, start: int = 0, stop: int | None = None) -> StressSeries:
        """Copy holding samples ``start:stop`` (views, no copy of the data)."""
        stop = self.n if stop is None else stop
        vol = self.volume if np.ndim(self.volume) == 0 else self.volume[start:stop]
        return replace(self, pressure=self.pressure[:, start:stop], volume=vol,
                       t0=self.t0 + start * self.dt)
