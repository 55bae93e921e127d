"""The study manifest: a TOML file naming state points, references and candidate runs.

A study compares candidate interatomic potentials on their predicted transport
coefficients. The manifest (a format of our own, read with the standard library's
``tomllib``) says what was simulated and where the runs are; it is parsed and validated
here, at the door, before anything is analysed. Every problem is one
:class:`~transport.errors.InputError` naming the manifest, the key path
(``candidates[2].runs[0].stress``) and the fix. Paths are relative to the manifest.

Layout (see README.md, "Comparing candidate potentials")::

    [study]
    name = "Corvane-9 candidates"     # optional
    target = 0.05                     # optional relative standard error for the verdicts
    alpha = 0.05                      # optional level of the pairwise tests

    [[states]]
    label = "T373"
    temperature = 373.15              # K (reduced, k_B = 1, for runs in lj units)
    pressure = 1.0                    # optional, bar
    density = 820.0                   # optional, kg/m^3
    [states.reference.viscosity]      # at least one reference per state point
    value = 5.1
    stderr = 0.1
    unit = "mPa s"                    # optional (default mPa s; "reduced (lj)" for lj runs)
    source = "invented measurement"
    [states.reference.diffusion]      # optional
    species = "CRV"
    value = 0.45
    stderr = 0.02                     # 1e-9 m^2/s

    [[candidates]]
    name = "model_a"
    label = "fitted force field"      # optional
    units = "real"                    # optional settings of the readers
    timestep = 1.0
    select = "all"
    group_by = "molecule"
    [[candidates.runs]]               # one replica per entry
    state = "T373"
    stress = "runs/a_rep1.log.gz"     # and/or topology + trajectory
    box = "L45"                       # optional box-size group
"""

from __future__ import annotations

import hashlib
import math
import os
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import InputError
from .units import REDUCED_LABEL

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = ["Candidate", "Run", "StatePoint", "Study", "StudyReference", "load_study"]

QUANTITIES = ("viscosity", "diffusion")
_UNITS = {"viscosity": "mPa s", "diffusion": "1e-9 m^2/s"}


@dataclass(frozen=True)
class StudyReference:
    """A reference value (e.g. an experiment) for one quantity at one state point.

    Attributes
    ----------
    quantity : {"viscosity", "diffusion"}
    value, stderr : float
        In `unit` (mPa s for viscosity, 1e-9 m^2/s for diffusion).
    unit : str
    source : str
    species : str or None
        For diffusion: the species (group) of the candidates' results it applies to.
    """

    quantity: str
    value: float
    stderr: float
    unit: str
    source: str = ""
    species: str | None = None


@dataclass(frozen=True)
class StatePoint:
    """A thermodynamic state: label, temperature (K), optional pressure (bar) and density
    (kg/m^3), and the references measured there."""

    label: str
    temperature: float
    pressure: float | None
    density: float | None
    references: tuple[StudyReference, ...]


@dataclass(frozen=True)
class Run:
    """One replica run of a candidate at a state point (absolute paths).

    Attributes
    ----------
    candidate, state : str
    index : int
        Position in the candidate's ``runs`` list (names the run in messages).
    stress : Path or None
        Pressure-tensor file (thermo log, table, energy file).
    topology, trajectory : Path or None
        For self-diffusion.
    box : str or None
        Box-size group label.
    settings : Mapping
        The candidate's reader settings (units, timestep, select, group_by).
    """

    candidate: str
    state: str
    index: int
    stress: Path | None
    topology: Path | None
    trajectory: Path | None
    box: str | None
    settings: Mapping[str, Any] = field(default_factory=dict)

    @property
    def name(self) -> str:
        """How messages name the run: ``model_a/T373/run 2 (a_rep2.log.gz)``."""
        f = self.stress or self.trajectory
        return f"{self.candidate}/{self.state}/run {self.index} ({f.name if f else '-'})"

    def files(self) -> tuple[Path, ...]:
        """The input files of the run."""
        return tuple(p for p in (self.stress, self.topology, self.trajectory) if p)

    def content_hash(self) -> str:
        """SHA-256 of the bytes of every input file (in a fixed order)."""
        h = hashlib.sha256()
        for p in self.files():
            h.update(p.name.encode() + b"\0")
            with open(p, "rb") as fh:
                for chunk in iter(lambda fh=fh: fh.read(1 << 20), b""):
                    h.update(chunk)
        return h.hexdigest()


@dataclass(frozen=True)
class Candidate:
    """A candidate potential: name, label, reader settings and its runs."""

    name: str
    label: str
    settings: Mapping[str, Any]
    runs: tuple[Run, ...]


@dataclass(frozen=True)
class Study:
    """A validated study manifest."""

    path: Path
    name: str
    target: float | None
    alpha: float
    states: tuple[StatePoint, ...]
    candidates: tuple[Candidate, ...]

    @property
    def runs(self) -> tuple[Run, ...]:
        """Every run of every candidate, in manifest order."""
        return tuple(r for c in self.candidates for r in c.runs)

    def state(self, label: str) -> StatePoint:
        """The state point with this label."""
        return next(s for s in self.states if s.label == label)


# ---- validation ---------------------------------------------------------------------------

class _Checker:
    def __init__(self, path: Path) -> None:
        self.path = path

    def fail(self, key: str, message: str, fix: str) -> InputError:
        return InputError(f"{key}: {message}", path=str(self.path), fix=fix)

    def table(self, obj: Any, key: str, allowed: Mapping[str, str],
              required: tuple[str, ...]) -> Mapping[str, Any]:
        if not isinstance(obj, Mapping):
            raise self.fail(key, f"expected a table, got {_kind(obj)}",
                            f"write {key} as a TOML table")
        for k in obj:
            if k not in allowed:
                known = ", ".join(allowed)
                raise self.fail(f"{key}.{k}" if key else k, "unknown key",
                                f"remove it or use one of: {known}")
        for k in required:
            if k not in obj:
                raise self.fail(f"{key}.{k}" if key else k, "missing key",
                                f"add {k} ({allowed[k]})")
        return obj

    def typed(self, obj: Mapping[str, Any], k: str, key: str, kind: str,
              default: Any = None) -> Any:
        full = f"{key}.{k}" if key else k
        if k not in obj:
            return default
        v = obj[k]
        if kind == "str":
            if not isinstance(v, str) or not v.strip():
                raise self.fail(full, f"expected a non-empty string, got {_kind(v)}",
                                f'write {k} = "..."')
            return v
        if kind in ("number", "positive"):
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise self.fail(full, f"expected a number, got {_kind(v)}",
                                f"write {k} = 1.0 (a number without quotes)")
            if kind == "positive" and v <= 0:
                raise self.fail(full, f"expected a positive number, got {v!r}",
                                f"give {k} a value > 0")
            return float(v)
        if kind == "list":
            if not isinstance(v, list):
                raise self.fail(full, f"expected an array of tables, got {_kind(v)}",
                                f"write [[{full}]] sections")
            return v
        raise AssertionError(kind)  # pragma: no cover

    def file(self, obj: Mapping[str, Any], k: str, key: str) -> Path | None:
        v = self.typed(obj, k, key, "str")
        if v is None:
            return None
        p = Path(v)
        if not p.is_absolute():
            p = self.path.parent / p
        if not p.is_file():
            raise self.fail(f"{key}.{k}", f"file {v!r} does not exist "
                            f"(paths are relative to the manifest's folder)",
                            "correct the path or create the file")
        return p


def _kind(v: Any) -> str:
    if isinstance(v, bool):
        return f"boolean {str(v).lower()}"
    if isinstance(v, (int, float)):
        return f"number {v!r}"
    if isinstance(v, str):
        return f"string {v!r}"
    if isinstance(v, list):
        return "an array"
    if isinstance(v, Mapping):
        return "a table"
    return type(v).__name__


_TOP = {"study": "a table [study]", "states": "[[states]] sections",
        "candidates": "[[candidates]] sections"}
_STUDY = {"name": "a string", "target": "relative standard error, e.g. 0.05",
          "alpha": "significance level, e.g. 0.05"}
_STATE = {"label": 'a string, e.g. "T373"', "temperature": "in K",
          "pressure": "in bar", "density": "in kg/m^3",
          "reference": "a table of references per quantity"}
_REF = {"value": "a number", "stderr": "a number > 0", "unit": "a string",
        "source": "a string", "species": "the species of the diffusion results"}
_CAND = {"name": "a string", "label": "a string", "units": "real, metal, lj, si or gromacs",
         "timestep": "engine time step (ps; fs for real units)", "select": "atom selection",
         "group_by": "atom, residue, molecule or type", "runs": "[[candidates.runs]] sections"}
_RUN = {"state": "the label of a state point", "stress": "a pressure-tensor file",
        "topology": "a topology file", "trajectory": "a trajectory file",
        "box": "a box-size group label"}


def load_study(path: str | os.PathLike[str]) -> Study:
    """Read and validate a study manifest.

    Parameters
    ----------
    path : path
        The TOML manifest. Relative paths inside it are relative to its folder.

    Returns
    -------
    Study

    Raises
    ------
    InputError
        One line naming the manifest, the key path and the fix, for a file that is not
        TOML, a missing or unknown key, a wrong type, a file that does not exist, a state
        point without a reference or a run at an unknown state point.
    """
    p = Path(path)
    if not p.is_file():
        raise InputError("study manifest not found", path=str(p),
                         fix="give the path of a TOML study manifest")
    try:
        with open(p, "rb") as fh:
            raw = tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", path=str(p),
                         fix="correct the TOML syntax (see README, study manifest)") from None
    except UnicodeDecodeError:
        raise InputError("not a text file", path=str(p), fix="give a TOML manifest") from None
    ck = _Checker(p)
    ck.table(raw, "", _TOP, ("states", "candidates"))
    study = ck.table(raw.get("study", {}), "study", _STUDY, ())
    target = ck.typed(study, "target", "study", "positive")
    alpha = ck.typed(study, "alpha", "study", "positive", 0.05)
    if not alpha < 1:
        raise ck.fail("study.alpha", f"expected a level in (0, 1), got {alpha!r}",
                      "write alpha = 0.05")
    states = _states(ck, ck.typed(raw, "states", "", "list"))
    labels = {s.label for s in states}
    cands_raw = ck.typed(raw, "candidates", "", "list")
    if len(cands_raw) < 2:
        raise ck.fail("candidates", f"{len(cands_raw)} candidate(s); a comparison needs two",
                      "add another [[candidates]] section")
    cands: list[Candidate] = []
    for i, c in enumerate(cands_raw):
        key = f"candidates[{i}]"
        ck.table(c, key, _CAND, ("name", "runs"))
        name = ck.typed(c, "name", key, "str")
        if any(x.name == name for x in cands):
            raise ck.fail(f"{key}.name", f"candidate {name!r} appears twice",
                          "give each candidate its own name")
        settings = {"units": ck.typed(c, "units", key, "str"),
                    "timestep": ck.typed(c, "timestep", key, "positive"),
                    "select": ck.typed(c, "select", key, "str", "all"),
                    "group_by": ck.typed(c, "group_by", key, "str", "atom")}
        runs_raw = ck.typed(c, "runs", key, "list")
        if not runs_raw:
            raise ck.fail(f"{key}.runs", "no runs", "add [[candidates.runs]] sections")
        runs = []
        for j, r in enumerate(runs_raw):
            rkey = f"{key}.runs[{j}]"
            ck.table(r, rkey, _RUN, ("state",))
            state = ck.typed(r, "state", rkey, "str")
            if state not in labels:
                raise ck.fail(f"{rkey}.state", f"no state point labelled {state!r}",
                              f"use one of: {', '.join(sorted(labels))}")
            stress = ck.file(r, "stress", rkey)
            topology = ck.file(r, "topology", rkey)
            trajectory = ck.file(r, "trajectory", rkey)
            if (topology is None) != (trajectory is None):
                miss = "topology" if topology is None else "trajectory"
                raise ck.fail(f"{rkey}.{miss}", "missing key (a trajectory needs a "
                              "topology and a topology a trajectory)", f"add {miss}")
            if stress is None and trajectory is None:
                raise ck.fail(f"{rkey}.stress", "missing key (a run needs a stress file "
                              "or a topology and trajectory)", "add stress = \"FILE\"")
            runs.append(Run(name, state, j, stress, topology, trajectory,
                            ck.typed(r, "box", rkey, "str"), settings))
        cands.append(Candidate(name, ck.typed(c, "label", key, "str", name), settings,
                               tuple(runs)))
    return Study(p, ck.typed(study, "name", "study", "str", p.stem), target, alpha,
                 tuple(states), tuple(cands))


def _states(ck: _Checker, raw: list[Any]) -> list[StatePoint]:
    if not raw:
        raise ck.fail("states", "no state points", "add a [[states]] section")
    out: list[StatePoint] = []
    for i, s in enumerate(raw):
        key = f"states[{i}]"
        ck.table(s, key, _STATE, ("label", "temperature", "reference"))
        label = ck.typed(s, "label", key, "str")
        if any(x.label == label for x in out):
            raise ck.fail(f"{key}.label", f"state point {label!r} appears twice",
                          "give each state point its own label")
        refs_raw = ck.table(s["reference"], f"{key}.reference",
                            {q: "a table" for q in QUANTITIES}, ())
        if not refs_raw:
            raise ck.fail(f"{key}.reference", "state point without a reference",
                          "add [states.reference.viscosity] with value and stderr")
        refs = []
        for q, r in refs_raw.items():
            rkey = f"{key}.reference.{q}"
            ck.table(r, rkey, _REF, ("value", "stderr", *(("species",) if q == "diffusion"
                                                          else ())))
            unit = ck.typed(r, "unit", rkey, "str", _UNITS[q])
            if unit not in (_UNITS[q], REDUCED_LABEL):
                raise ck.fail(f"{rkey}.unit", f"unit {unit!r} not supported",
                              f"give the value in {_UNITS[q]} (or {REDUCED_LABEL!r} for "
                              "runs in reduced Lennard-Jones units)")
            refs.append(StudyReference(q, ck.typed(r, "value", rkey, "number"),
                                       ck.typed(r, "stderr", rkey, "positive"), unit,
                                       ck.typed(r, "source", rkey, "str", ""),
                                       ck.typed(r, "species", rkey, "str")))
        out.append(StatePoint(label, ck.typed(s, "temperature", key, "positive"),
                              ck.typed(s, "pressure", key, "number"),
                              ck.typed(s, "density", key, "positive"), tuple(refs)))
    return out
