"""``transport check``: only the run-length verdicts, for stress files or trajectories."""

from __future__ import annotations

import click

from ._group import main
from ._shared import cache_options, json_option, quiet

#: The target when --target is not given (5% relative standard error).
DEFAULT_TARGET = "5%"


@main.command("check")
@click.argument("files", nargs=-1, required=True, type=click.Path())
@click.option("--target", default=None,
              help=f"Target relative standard error, e.g. 5% or 0.05 (default "
                   f"{DEFAULT_TARGET}).")
@click.option("--strict", is_flag=True,
              help="Exit with code 3 when a run is not long enough (for job scripts).")
@click.option("--units", default=None,
              help="Unit convention where the files do not say it (real, metal, lj, ...).")
@click.option("--timestep", type=float, default=None,
              help="Integration time step in the engine's time unit, where the files do "
                   "not say it.")
@click.option("--temperature", type=float, default=None,
              help="Temperature (K, or reduced): the thermostat set point.")
@click.option("--volume", type=float, default=None,
              help="Stress files: box volume in the engine's length unit cubed, where the "
                   "file has no volume or box-length column.")
@click.option("--run", "run", default=None,
              help="Stress files: which thermo run of a log to use (1-based), or 'all'.")
@click.option("--select", default="all", show_default=True,
              help="Trajectories: MDAnalysis selection of the atoms to analyse.")
@click.option("--group-by", "group_by",
              type=click.Choice(["atom", "molecule", "residue", "type"]), default="atom",
              show_default=True, help="Trajectories: particles and species, as in "
                                      "'transport diffusion'.")
@click.option("--continue", "continuation", is_flag=True,
              help="Trajectories: the files are consecutive parts of one run.")
@json_option
@cache_options[0]
@cache_options[1]
@click.pass_context
def check(ctx: click.Context, files: tuple[str, ...], target: str | None, strict: bool,
          units: str | None, timestep: float | None, temperature: float | None,
          volume: float | None, run: str | None, select: str, group_by: str, continuation: bool,
          json_path: str | None) -> None:
    """Is the run long enough? Run-length verdicts only, for the inputs of either
    'transport viscosity' (stress files: thermo logs, tables, energy files) or
    'transport diffusion' (a topology, then trajectories), told apart by what the first
    file holds. Default target 5%; exit code 0 whatever the verdict (3 with --strict)."""
    from ..errors import InputError
    from ..io import load_stress, sniff_format
    from .diffusion import run_diffusion
    from .viscosity import run_viscosity

    stress_error: InputError | None = None
    try:
        fmt, _ = sniff_format(files[0])
    except InputError as exc:  # binary of no stress format: a topology (or nothing)
        fmt, stress_error = "", exc
    is_stress = fmt in ("lammps-log", "npy", "npz", "edr")
    if fmt == "table":  # a table of stress, or a text topology: does it hold the tensor?
        try:
            load_stress(files[0], units=units, timestep=timestep, temperature=temperature,
                        volume=volume, run=run)
            is_stress = True
        except InputError as exc:
            stress_error = exc
    if is_stress:
        run_viscosity(ctx, files, units=units, timestep=timestep, temperature=temperature,
                      volume=volume, run=run, target=target, strict=strict, json_path=json_path,
                      default_target=DEFAULT_TARGET, verdicts_only=True, command="check")
        return
    from ..io.trajectory import split_inputs

    topology, _ = split_inputs(files)
    if len(files) < 2 and not _is_dump(files[0]):
        raise InputError(
            "not a stress file" + (f" ({stress_error.one_line()})" if stress_error else "")
            + ", and no trajectory follows it",
            path=files[0], expected="stress files, or a topology followed by trajectories",
            fix="give the engine's log with the pressure tensor, or TOPOLOGY TRAJECTORY...")
    if topology is not None and not quiet(ctx):
        click.echo(f"transport: note: {files[0]} holds no pressure tensor: read as the "
                   "topology of the trajectories that follow", err=True)
    run_diffusion(ctx, files, select=select, group_by=group_by, units=units,
                  timestep=timestep, temperature=temperature, continuation=continuation,
                  target=target, strict=strict, json_path=json_path,
                  default_target=DEFAULT_TARGET, verdicts_only=True, command="check")


def _is_dump(path: str) -> bool:
    from pathlib import Path

    from ..io._dump_atoms import is_dump

    return Path(path).is_file() and is_dump(Path(path))
