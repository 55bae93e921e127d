"""``transport inspect``: what the readers find in a file."""

from __future__ import annotations

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
@click.argument("file", type=click.Path())
@click.option("--run", "run", default=None,
              help="Thermo run (block) to use: N (1-based), A-B (joined), 'last' or 'all'; "
                   "default: the last with the pressure tensor, joined with the runs it "
                   "continues.")
@units_option
@timestep_option
@json_option
@click.pass_context
def inspect_file(ctx: click.Context, file: str, run: str | None, units: str | None,
                 timestep: float | None, json_path: str | None) -> None:
    """Show what the readers find in FILE: format, thermo runs (blocks) with their steps
    and columns, which were used, units, time step, rows kept and dropped, warnings."""
    from .._progress import want_progress
    from ..io import read_table
    from ..io._inspect import describe_table, stress_summary

    run_spec = parse_run_option(run)
    check_outputs((file,), json=json_path)
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
    finish(ctx, "inspect", json_path=json_path, inputs=[table.source],
            settings={"run": run, "units": units, "timestep": timestep}, results=[],
            warnings=table.warnings,
            extra={"tables": [b.to_record() for b in table.blocks], "resolved": resolved},
            text=describe_table(table, summary))
