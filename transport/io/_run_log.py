"""A trajectory's settings from the run's own log: unit style, time step, dump interval.

A LAMMPS log echoes the input commands. For a dump, three of them say what the dump does
not: ``units STYLE``, ``timestep DT`` (which ``units`` resets to the style's default) and
``dump ID GROUP STYLE N FILE ...`` (with ``dump_modify ID every N``), the interval in steps.
:func:`log_settings` reads them as they stand at the ``run`` commands that write the dump.
Only command lines are looked at: the file is searched in blocks of bytes with one regular
expression (the thermo rows in between are skipped at C speed), so a log of 10^7 rows costs
about as much as reading it.

:func:`find_run_log` finds ``log.lammps`` (the engine's default name, also compressed)
beside a dump.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ._scan import DEFAULT_TIMESTEP

__all__ = ["RunSettings", "find_run_log", "log_settings"]

_CMD = re.compile(rb"^[ \t]*(units|timestep|mass|dump|dump_modify|undump|run|rerun|clear)[ \t]"
                  rb"[^\n]*", re.MULTILINE)
_BLOCK = 1 << 25
_COMPRESSED = ("", ".gz", ".bz2", ".xz")


@dataclass(frozen=True)
class RunSettings:
    """What a log says about a dump: each value with the line that set it (None: not said).

    ``timestep`` is in the style's time unit; ``dump_every`` in steps.
    """

    path: Path
    units: str | None
    units_line: int | None
    timestep: float | None
    timestep_line: int | None  # None with a value: the style's default
    dump_every: int | None
    dump_line: int | None
    masses: dict[str, float] = field(default_factory=dict)  # ``mass TYPE M`` commands

    def describe(self) -> str:
        """``units real (line 3), timestep 2 (line 12), dump every 500 steps (line 40)``."""
        parts = []
        if self.units is not None:
            parts.append(f"units {self.units} (line {self.units_line})")
        if self.timestep is not None:
            parts.append(f"timestep {self.timestep:g}" + (
                f" (line {self.timestep_line})" if self.timestep_line else
                f" (default of units {self.units})"))
        if self.dump_every is not None:
            parts.append(f"dump every {self.dump_every} steps (line {self.dump_line})")
        return ", ".join(parts) if parts else "nothing"


def find_run_log(trajectory: Path) -> Path | None:
    """``log.lammps`` (optionally compressed) in the folder of `trajectory`, if any."""
    for suffix in _COMPRESSED:
        cand = trajectory.parent / f"log.lammps{suffix}"
        if cand.is_file() and cand.resolve() != trajectory.resolve():
            return cand
    return None


def _stem(name: str) -> str:
    for suffix in _COMPRESSED[1:]:
        name = name.removesuffix(suffix)
    return name


def log_settings(path: Path, trajectory: Path | None = None) -> RunSettings:
    """Unit style, time step and dump interval that the log `path` sets for `trajectory`.

    The dump is the one whose file name matches `trajectory` (compression suffixes aside),
    else the only dump of the log. Units and time step are those in force at the first
    ``run`` after that dump is defined (the last ``run`` of the log when no dump matches).

    Raises
    ------
    InputError
        The file is not a LAMMPS log (no ``units``, ``timestep`` or ``run`` command), or the
        time step or units change between the runs that write the dump.
    """
    from ._open import DECOMPRESSION_ERRORS, open_bytes

    units: tuple[str, int] | None = None
    timestep: tuple[float, int | None] | None = None
    dumps: dict[str, tuple[str, int, int]] = {}  # id -> (file, every, line)
    masses: dict[str, float] = {}
    active: set[str] = set()
    at_runs: dict[str, list[tuple[tuple | None, tuple | None, int]]] = {}
    last_run: tuple[tuple | None, tuple | None, int] | None = None
    target = None if trajectory is None else _stem(trajectory.name)
    line0 = 1
    rest = b""
    try:
        with open_bytes(path) as opened:
            while True:
                chunk = opened.stream.read(_BLOCK)
                data = rest + chunk
                if chunk:
                    cut = data.rfind(b"\n") + 1
                    data, rest = data[:cut], data[cut:]
                pos, line = 0, line0
                for m in _CMD.finditer(data):
                    line += data.count(b"\n", pos, m.start())
                    pos = m.start()
                    toks = m.group(0).split(b"#", 1)[0].decode("ascii", "replace").split()
                    cmd = toks[0]
                    if cmd == "units" and len(toks) == 2:
                        units, timestep = (toks[1].lower(), line), None
                    elif cmd == "timestep" and len(toks) == 2:
                        try:
                            timestep = (float(toks[1]), line)
                        except ValueError:
                            pass  # an unexpanded variable
                    elif cmd == "mass" and len(toks) == 3 and toks[1].isdigit():
                        with _suppress_value_error():
                            masses[toks[1]] = float(toks[2])
                    elif cmd == "dump" and len(toks) >= 6:
                        try:
                            dumps[toks[1]] = (toks[5], int(toks[4]), line)
                            active.add(toks[1])
                        except ValueError:
                            pass
                    elif cmd == "dump_modify" and len(toks) >= 4 and toks[1] in dumps:
                        for k in range(2, len(toks) - 1):
                            if toks[k] == "every":
                                with _suppress_value_error():
                                    f, _, _ = dumps[toks[1]]
                                    dumps[toks[1]] = (f, int(toks[k + 1]), line)
                    elif cmd == "undump" and len(toks) >= 2:
                        active.discard(toks[1])
                    elif cmd in ("run", "rerun"):
                        ts = timestep
                        if ts is None and units is not None and units[0] in DEFAULT_TIMESTEP:
                            ts = (DEFAULT_TIMESTEP[units[0]], None)
                        last_run = (units, ts, line)
                        for d in active:
                            at_runs.setdefault(d, []).append((units, ts, line))
                    elif cmd == "clear":
                        units, timestep = None, None
                        masses = {}
                line0 = line + data.count(b"\n", pos)
                if not chunk:
                    break
    except DECOMPRESSION_ERRORS as exc:
        raise InputError(f"log cannot be decompressed ({exc})", path=str(path),
                         fix="check that the file was copied completely") from None
    chosen = None
    if target is not None:
        named = [d for d, (f, _, _) in dumps.items() if Path(_stem(f)).name == target]
        chosen = named[-1] if named else None
    if chosen is None and len(dumps) == 1:
        chosen = next(iter(dumps))
    runs = at_runs.get(chosen, []) if chosen is not None else []
    if not runs:
        runs = [last_run] if last_run is not None else []
    if not runs and units is None and timestep is None:
        raise InputError("no units, timestep or run command found: not a LAMMPS log",
                         path=str(path), expected="the LAMMPS log of the run that wrote "
                                                  "the trajectory",
                         fix="give the run's log.lammps with --log, or pass --units and "
                             "--timestep")
    u_set, t_set = (runs[0][0], runs[0][1]) if runs else (units, timestep)
    for u2, t2, ln in runs[1:]:
        if (u2 and u2[0]) != (u_set and u_set[0]) or (t2 and t2[0]) != (t_set and t_set[0]):
            raise InputError(
                "the units or time step change between the runs that write the dump "
                f"({_said(u_set, t_set)} at the first, {_said(u2, t2)} at the run on line "
                f"{ln})", path=str(path), line=ln, expected="one time step for the dump",
                fix="pass --units and --frame-interval for the part you analyse")
    every = dumps[chosen][1] if chosen is not None else None
    dline = dumps[chosen][2] if chosen is not None else None
    return RunSettings(path, None if u_set is None else u_set[0],
                       None if u_set is None else u_set[1],
                       None if t_set is None else t_set[0],
                       None if t_set is None else t_set[1], every, dline,
                       {k: v for k, v in masses.items() if v > 0})


def _said(u: tuple | None, t: tuple | None) -> str:
    return f"units {u[0] if u else '?'}, timestep {t[0] if t else '?'}"


class _suppress_value_error:
    def __enter__(self) -> None:
        return None

    def __exit__(self, kind: object, *_: object) -> bool:
        return kind is ValueError
