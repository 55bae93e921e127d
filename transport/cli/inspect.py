"""``transport inspect``: what the readers find in stress files and trajectories."""

from __future__ import annotations

from typing import Any

import click

from ._group import main
from ._shared import (
    check_outputs,
    finish,
    json_option,
    parse_run_option,
    quiet,
    timestep_option,
    units_option,
)


@main.command("inspect")
@click.argument("files", nargs=-1, required=True, type=click.Path())
@click.option("--run", "run", default=None,
              help="Thermo run (block) to use: N (1-based), A-B (joined), 'last' or 'all'; "
                   "default: the last with the pressure tensor, joined with the runs it "
                   "continues.")
@units_option
@timestep_option
@click.option("--frame-interval", type=float, default=None,
              help="Trajectories: time between frames (engine time unit), overriding the "
                   "file.")
@click.option("--log", "log", type=click.Path(dir_okay=False), default=None,
              help="Trajectories: the run's LAMMPS log (units and time step of a dump; "
                   "default: log.lammps beside the dump).")
@json_option
@click.pass_context
def inspect_file(ctx: click.Context, files: tuple[str, ...], run: str | None,
                 units: str | None, timestep: float | None, frame_interval: float | None,
                 log: str | None, json_path: str | None) -> None:
    """Show what the readers find in each of FILES.

    Stress files (logs, tables, energy files): format, thermo runs (blocks) with their steps
    and columns, which were used, units, time step, rows kept and dropped, warnings.
    Trajectories (LAMMPS dumps, DCD, XTC, TRR, NetCDF, GRO, PDB, ...): format, atoms,
    frames, time between frames and where it comes from, box shape and whether it changes,
    wrapped or unwrapped coordinates or image flags, velocities, species, masses, and what
    'transport diffusion' would use."""
    from ..io._inspect_trajectory import (
        describe_trajectory,
        inspect_trajectory,
        looks_like_trajectory,
    )
    from ..series import Source

    run_spec = parse_run_option(run)
    check_outputs(tuple(files) + ((log,) if log else ()), json=json_path)
    texts: list[str] = []
    records: list[dict[str, Any]] = []
    inputs: list[Any] = []
    warnings: list[str] = []
    single: dict[str, Any] | None = None
    for f in files:
        if looks_like_trajectory(f):
            rec = inspect_trajectory(f, units=units, timestep=timestep,
                                     frame_interval=frame_interval, log=log)
            texts.append(describe_trajectory(rec))
            records.append({"kind": "trajectory", **rec})
            inputs.append(Source(path=str(rec["file"]), format=f"trajectory:{rec['format']}",
                                 description=rec["diffusion"], rows=int(rec["frames"])))
            continue
        text, extra, source, table_warnings = _stress(ctx, f, run_spec, units, timestep)
        texts.append(text)
        records.append({"kind": "stress", "file": f, **extra})
        inputs.append(source)
        warnings.extend(table_warnings)
        single = extra
    # one stress file keeps the layout it always had; otherwise one record per file
    extra_doc = single if len(files) == 1 and single is not None else {"files": records}
    finish(ctx, "inspect", json_path=json_path, inputs=inputs,
           settings={"run": run, "units": units, "timestep": timestep,
                     "frame_interval": frame_interval, "log": log}, results=[],
           warnings=warnings, extra=extra_doc, text="\n\n".join(texts))


def _stress(ctx: click.Context, file: str, run_spec: Any, units: str | None,
            timestep: float | None) -> tuple[str, dict[str, Any], Any, list[str]]:
    from .._progress import want_progress
    from ..io import read_table
    from ..io._inspect import describe_table, stress_summary

    table = read_table(file, run=run_spec, units=units, timestep=timestep,
                       progress=want_progress(quiet(ctx)))
    summary = stress_summary(table)
    resolved = {
        "units": table.units.name if table.units is not None else None,
        "units_source": table.units_source,
        "timestep": table.timestep,
        "timestep_source": table.timestep_source,
        "compression": table.compression,
        "rows": table.n,
        "stress": summary,
    }
    extra = {"tables": [b.to_record() for b in table.blocks], "resolved": resolved}
    return describe_table(table, summary), extra, table.source, list(table.warnings)
