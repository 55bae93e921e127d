"""Synthetic studies with known truth: thermo logs and a manifest (examples, tests, demo).

Each candidate's stress is a sum of Ornstein–Uhlenbeck modes (:mod:`transport.synthetic`)
whose Green–Kubo viscosity is exactly the candidate's true value at each state point; the
logs are written in the ``real`` convention (atm, fs, Angstrom) as an engine would.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from .demo import write_thermo_log
from .synthetic import OUStressModel
from .units import BOLTZMANN, UNIT_SYSTEMS

__all__ = ["write_synthetic_study"]

_REAL = UNIT_SYSTEMS["real"]


def write_synthetic_study(
    folder: str | Path,
    *,
    truth: Mapping[str, Mapping[str, float]],
    references: Mapping[str, tuple[float, float]],
    temperatures: Mapping[str, float],
    replicas: int,
    rows: int,
    rng: np.random.Generator,
    times_ps: Sequence[float] = (0.05, 0.3),
    fractions: Sequence[float] = (0.4, 0.6),
    box_length: float = 40.0,
    timestep_fs: float = 1.0,
    thermo_every: int = 4,
    target: float | None = 0.05,
    labels: Mapping[str, str] | None = None,
    name: str = "synthetic study",
    subfolder: str = "runs",
    file_format: str = "log",
    existing: Mapping[tuple[str, str], Sequence[Path]] | None = None,
) -> Path:
    """Write the logs and ``study.toml`` of a synthetic study; return the manifest's path.

    Parameters
    ----------
    folder : path
        Where ``study.toml`` goes; logs go to ``folder/subfolder``.
    truth : mapping
        candidate -> state label -> true viscosity (mPa s).
    references : mapping
        state label -> (value, stderr) of the invented reference viscosity (mPa s).
    temperatures : mapping
        state label -> temperature (K).
    replicas, rows : int
        Replicas per candidate and state point; production rows per log.
    rng : numpy.random.Generator
    file_format : {"log", "npz"}
        Thermo logs as an engine writes them, or ``.npz`` arrays (named columns with
        ``units`` and ``timestep``; written about 100x faster, for tests).
    existing : mapping, optional
        (candidate, state) -> logs already written (e.g. by the demo), used instead of new
        ones.
    """
    folder = Path(folder)
    data = folder / subfolder
    data.mkdir(parents=True, exist_ok=True)
    volume_a3 = box_length**3
    volume_m3 = volume_a3 * _REAL.volume
    dt_s = timestep_fs * thermo_every * _REAL.time
    lines = ["# synthetic study written by transport (invented data with known truth)",
             "[study]", f'name = "{name}"']
    if target is not None:
        lines.append(f"target = {target}")
    for label, temp in temperatures.items():
        v, s = references[label]
        lines += ["", "[[states]]", f'label = "{label}"', f"temperature = {temp}",
                  "[states.reference.viscosity]", f"value = {v}", f"stderr = {s}",
                  'source = "invented reference (synthetic study)"']
    for cand, per_state in truth.items():
        lines += ["", "[[candidates]]", f'name = "{cand}"',
                  f'label = "{(labels or {}).get(cand, cand)}"', 'units = "real"']
        for label, eta in per_state.items():
            temp = temperatures[label]
            paths = list((existing or {}).get((cand, label), ()))
            if not paths:
                model = OUStressModel.for_viscosity(
                    eta * 1e-3, volume_m3, BOLTZMANN * temp,
                    times=[t * 1e-12 for t in times_ps], fractions=list(fractions),
                    mean_pressure=_REAL.pressure, pressure_noise=20.0 * _REAL.pressure)
                for r in range(replicas):
                    p_atm = model.sample(rows, dt_s, rng) / _REAL.pressure
                    temps = temp + 2.0 * rng.standard_normal(rows)
                    path = data / f"{cand}_{label}_rep{r + 1}.{file_format}"
                    if file_format == "npz":
                        cols = dict(zip(("Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz"), p_atm,
                                        strict=True))
                        np.savez(path, Step=np.arange(rows) * thermo_every, Temp=temps,
                                 Volume=np.full(rows, volume_a3), **cols,
                                 units=np.array("real"), timestep=np.array(timestep_fs))
                    else:
                        write_thermo_log(path, p_atm, temperature=temps, volume=volume_a3,
                                         timestep_fs=timestep_fs, thermo_every=thermo_every)
                    paths.append(path)
            for path in paths:
                rel = Path(path).resolve().relative_to(folder.resolve()) \
                    if Path(path).resolve().is_relative_to(folder.resolve()) else Path(path)
                lines += ["[[candidates.runs]]", f'state = "{label}"', f'stress = "{rel}"']
    manifest = folder / "study.toml"
    manifest.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return manifest
