"""Validated containers for what the readers produce.

A :class:`StressSeries` holds the pressure tensor on a uniform time axis in internal units
(SI, or reduced for Lennard-Jones input), with the volume, the temperature when known, the
unit system and where the data came from. Readers build it; estimators only read it.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .units import UnitSystem, get_unit_system

__all__ = ["COMPONENTS", "PositionSeries", "Source", "StressSeries"]

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
    wall_seconds_per_time : float or None
        Wall-clock seconds the engine took per unit of simulated time (per s, or per tau),
        from the run times a log reports (``Loop time of ...``) for the runs read; None when
        the file does not say.
    """

    path: str = ""
    format: str = ""
    sha256: str | None = None
    description: str = ""
    rows: int = 0
    columns: dict[str, str] = field(default_factory=dict)
    wall_seconds_per_time: float | None = None

    def to_record(self) -> dict:
        """JSON record for the ``inputs`` list."""
        return {
            "path": self.path,
            "format": self.format,
            "sha256": self.sha256,
            "read": self.description,
            "rows": int(self.rows),
            "columns": dict(self.columns),
            "wall_seconds_per_time": self.wall_seconds_per_time,
        }


def _check_temperature(t: float | None, path: str | None) -> None:
    """InputError unless the temperature is unknown (None) or finite and positive."""
    from .errors import InputError

    if t is not None and not (np.isfinite(t) and t > 0):
        raise InputError(f"temperature is {t!r}", path=path,
                         expected="a positive temperature",
                         fix="pass --temperature (the thermostat set point)")


def _set_common(obj: StressSeries | PositionSeries) -> None:
    """Normalise the fields both series share: floats for ``dt``, ``t0`` and the
    temperature, a tuple of warnings."""
    t = obj.temperature
    object.__setattr__(obj, "dt", float(obj.dt))
    object.__setattr__(obj, "t0", float(obj.t0))
    object.__setattr__(obj, "temperature", None if t is None else float(t))
    object.__setattr__(obj, "warnings", tuple(obj.warnings))


def _check_finite(name: str, a: np.ndarray, source: Source) -> None:
    from .errors import InputError

    with np.errstate(over="ignore", invalid="ignore"):
        if np.isfinite(np.sum(a)):  # one pass, no temporary: nan and inf would propagate
            return
    bad = ~np.isfinite(a)  # (or the sum overflowed: look value by value)
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
        eps/sigma^3). Float64, read-only; each row is contiguous (the rows may be further
        apart than n values: the reader hands over its own storage without copying).
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
        p = np.asarray(self.pressure, dtype=np.float64)
        if p.ndim != 2 or p.strides[1] != p.itemsize:
            p = np.ascontiguousarray(p)
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
        _check_temperature(self.temperature, src.path or None)
        p = p.view()  # read-only view: the caller's own array stays writeable
        p.flags.writeable = False
        if isinstance(vol, np.ndarray):
            vol = vol.view()
            vol.flags.writeable = False
        object.__setattr__(self, "pressure", p)
        object.__setattr__(self, "volume", vol)
        _set_common(self)

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


@dataclass(frozen=True)
class PositionSeries:
    """Unwrapped particle positions on a uniform time axis, grouped into species.

    A particle is an atom, or the centre of mass of a molecule or residue; each belongs to one
    species (an atom type, a residue name, a molecule kind, or the whole selection).

    Attributes
    ----------
    positions : ndarray, shape (n_frames, n_particles, 3)
        Unwrapped (continuous) positions in m (or reduced sigma), float32 or float64; may be
        a read-only :class:`numpy.memmap` for trajectories larger than memory.
    dt : float
        Time between frames, in s (or reduced tau).
    box : ndarray, shape (n_frames, 3), or None
        Box edge lengths per frame, in m (or sigma): an orthorhombic box unless
        `box_angles` is given; None if the trajectory has no periodic box (only with
        coordinates that need no unwrapping).
    species : ndarray of int, shape (n_particles,)
        Index into `species_names` of each particle.
    species_names : tuple of str
        Label of each species (``type 1``, ``SOL``, the selection string, ...).
    masses : ndarray, shape (n_particles,)
        Particle masses in kg (or reduced); the summed atom masses for centres of mass
        (zero for massless sites).
    units : UnitSystem
        The engine convention the data came in; internal units follow from it.
    velocities : ndarray or None, shape (n_frames, n_particles, 3)
        Particle (centre-of-mass) velocities in m/s (or sigma/tau), or None.
    drift : ndarray or None, shape (n_frames, 3)
        Displacement of the whole system's centre of mass since the first frame, in m (or
        sigma); subtracted by the estimators to remove drift.
    drift_velocity : ndarray or None, shape (n_frames, 3)
        Velocity of the system's centre of mass in m/s (or sigma/tau), when velocities exist.
    temperature : float or None
        Temperature in K (or reduced), or None if unknown.
    temperature_source : str
        How `temperature` was obtained.
    atoms_per_particle : ndarray of int, shape (n_particles,)
        Atoms behind each particle (1 for atoms).
    system_atoms : int
        Atoms in the whole system (all atoms of the topology).
    group_by : str
        How particles were formed: ``atom``, ``type``, ``residue`` or ``molecule``.
    selection : str
        The selection the particles were built from.
    unwrap : str
        How continuous positions were obtained (``none``, ``unwrapped coordinates``,
        ``image flags``, ``displacement``).
    sources : tuple of Source
        The trajectory file(s) read, in time order.
    t0 : float
        Time of the first frame, in s (or tau).
    warnings : tuple of str
        What the reader noticed and the user must know.
    box_angles : ndarray, shape (n_frames, 3), or None
        Angles alpha, beta, gamma of a triclinic box per frame, in degrees; None for an
        orthorhombic box.
    """

    positions: np.ndarray
    dt: float
    box: np.ndarray | None
    species: np.ndarray
    species_names: tuple[str, ...]
    masses: np.ndarray
    units: UnitSystem
    velocities: np.ndarray | None = None
    drift: np.ndarray | None = None
    drift_velocity: np.ndarray | None = None
    temperature: float | None = None
    temperature_source: str = ""
    atoms_per_particle: np.ndarray | None = None
    system_atoms: int = 0
    group_by: str = "atom"
    selection: str = "all"
    unwrap: str = "none"
    sources: tuple[Source, ...] = ()
    t0: float = 0.0
    warnings: tuple[str, ...] = ()
    box_angles: np.ndarray | None = None

    def __post_init__(self) -> None:
        from .errors import InputError

        units = get_unit_system(self.units)
        object.__setattr__(self, "units", units)
        path = self.sources[0].path if self.sources else None
        p = self.positions if isinstance(self.positions, np.ndarray) else np.asarray(
            self.positions, dtype=np.float64)
        if p.ndim != 3 or p.shape[2] != 3 or p.shape[0] < 2 or p.shape[1] < 1:
            raise InputError(
                f"positions have shape {p.shape}",
                path=path,
                expected="frames x particles x 3 with at least 2 frames and 1 particle",
            )
        if not np.issubdtype(p.dtype, np.floating):
            p = p.astype(np.float64)
        n_frames, n_part, _ = p.shape
        if not (np.isfinite(self.dt) and self.dt > 0):
            raise InputError(
                f"time between frames is {self.dt!r}",
                path=path,
                expected="a positive time between frames",
                fix="pass --timestep (with step numbers in the file) or --frame-interval",
            )
        box = None if self.box is None else np.ascontiguousarray(np.broadcast_to(
            np.asarray(self.box, dtype=np.float64), (n_frames, 3)))
        if box is not None and not (np.all(np.isfinite(box)) and np.all(box > 0)):
            raise InputError(
                "box lengths are missing or not positive",
                path=path,
                expected="a periodic orthorhombic box in every frame",
                fix="use a trajectory format that stores the box (DCD, XTC, TRR, dump)",
            )
        species = np.ascontiguousarray(np.broadcast_to(
            np.asarray(self.species, dtype=np.intp), (n_part,)))
        names = tuple(str(s) for s in self.species_names)
        if species.size and (species.min() < 0 or species.max() >= len(names)):
            raise ValueError("species codes must index species_names")
        masses = np.ascontiguousarray(np.broadcast_to(
            np.asarray(self.masses, dtype=np.float64), (n_part,)))
        if not np.all(masses >= 0):
            raise InputError("a particle has a negative mass", path=path,
                             expected="non-negative masses",
                             fix="check the masses in the topology")
        v = self.velocities
        if v is not None:
            v = v if isinstance(v, np.ndarray) else np.asarray(v, dtype=np.float64)
            if v.shape != p.shape:
                raise InputError(f"velocities have shape {v.shape}, positions {p.shape}",
                                 path=path, expected="one velocity per position")
        drift = self.drift
        if drift is not None:
            drift = np.ascontiguousarray(drift, dtype=np.float64)
            if drift.shape != (n_frames, 3):
                raise ValueError(f"drift must have shape {(n_frames, 3)}, got {drift.shape}")
            drift.flags.writeable = False
        dv = self.drift_velocity
        if dv is not None:
            dv = np.ascontiguousarray(dv, dtype=np.float64)
            if dv.shape != (n_frames, 3):
                raise ValueError(f"drift_velocity must have shape {(n_frames, 3)}")
            dv.flags.writeable = False
        _check_temperature(self.temperature, path)
        app = self.atoms_per_particle
        app = (np.ones(n_part, dtype=np.intp) if app is None
               else np.ascontiguousarray(np.broadcast_to(np.asarray(app, dtype=np.intp),
                                                         (n_part,))))
        angles = self.box_angles
        if angles is not None:
            angles = np.ascontiguousarray(np.broadcast_to(
                np.asarray(angles, dtype=np.float64), (n_frames, 3)))
            if box is None or not np.all((angles > 0) & (angles < 180)):
                raise ValueError("box_angles need a box and must lie in (0, 180) degrees")
        for a in (box, angles, species, masses, app):
            if a is not None:
                a.flags.writeable = False
        object.__setattr__(self, "positions", _read_only(p))
        object.__setattr__(self, "velocities", None if v is None else _read_only(v))
        object.__setattr__(self, "box", box)
        object.__setattr__(self, "box_angles", angles)
        object.__setattr__(self, "species", species)
        object.__setattr__(self, "species_names", names)
        object.__setattr__(self, "masses", masses)
        object.__setattr__(self, "drift", drift)
        object.__setattr__(self, "drift_velocity", dv)
        object.__setattr__(self, "atoms_per_particle", app)
        object.__setattr__(self, "sources", tuple(self.sources))
        _set_common(self)

    # ---- derived views ---------------------------------------------------------------
    @property
    def n_frames(self) -> int:
        """Number of frames."""
        return int(self.positions.shape[0])

    @property
    def n_particles(self) -> int:
        """Number of particles (atoms or centres of mass)."""
        return int(self.positions.shape[1])

    @property
    def duration(self) -> float:
        """Time spanned by the frames, ``(n_frames - 1) * dt``, in s (or tau)."""
        return (self.n_frames - 1) * self.dt

    @property
    def time(self) -> np.ndarray:
        """Frame times in s (or tau), built on demand."""
        return self.t0 + self.dt * np.arange(self.n_frames)

    @property
    def source(self) -> Source:
        """The first trajectory file read (an empty Source for arrays)."""
        return self.sources[0] if self.sources else Source()

    @property
    def box_mean(self) -> np.ndarray | None:
        """Mean box lengths (3,), in m (or sigma), or None without a box."""
        return None if self.box is None else self.box.mean(axis=0)

    def species_indices(self, name: str) -> np.ndarray:
        """Indices of the particles of species `name`."""
        return np.flatnonzero(self.species == self.species_names.index(name))

    def with_temperature(self, temperature: float, source: str) -> PositionSeries:
        """Copy with the temperature set (K or reduced) and how it was obtained."""
        return replace(self, temperature=temperature, temperature_source=source)


def _read_only(a: np.ndarray) -> np.ndarray:
    """A read-only view of `a` (memory maps and caller arrays are not copied)."""
    v = a.view()
    v.flags.writeable = False
    return v
