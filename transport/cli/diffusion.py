"""``transport diffusion``: self-diffusion from trajectories."""

from __future__ import annotations

from typing import Any

import click

from ._group import main
from ._shared import (
    cache_options,
    check_distinct,
    check_outputs,
    check_plot_path,
    exit_for_verdicts,
    finish,
    json_option,
    load_stress_files,
    note,
    parse_target_option,
    parse_time,
    plot_option,
    quiet,
    target_options,
    verdict_only,
)


def _diffusion_window(value: str, scale: float) -> tuple[float, float] | str:
    """``auto`` or ``T0:T1`` (reported time unit) -> internal time units."""
    if value == "auto":
        return "auto"
    try:
        a, b = (float(v) for v in value.split(":"))
    except ValueError:
        raise click.BadParameter(f"expected 'auto' or T0:T1, got {value!r}",
                                 param_hint="--fit-window") from None
    if not 0 <= a < b:
        raise click.BadParameter(f"expected 0 <= T0 < T1, got {value!r}",
                                 param_hint="--fit-window")
    return a / scale, b / scale


def _parse_viscosity(value: str | None) -> tuple[float, float] | str | None:
    """``auto``, ``VALUE`` or ``VALUE+-ERR`` (also ``VALUE±ERR``) -> (value, stderr)."""
    import math
    import re

    if value is None or value == "auto":
        return value
    m = re.fullmatch(r"\s*([^+±\s][^±]*?)\s*(?:(?:\+-|\+/-|±)\s*(\S+))?\s*", value)
    try:
        if m is None:
            raise ValueError
        v = float(m.group(1))
        e = float(m.group(2)) if m.group(2) is not None else 0.0
    except ValueError:
        raise click.BadParameter(
            f"expected 'auto', VALUE or VALUE+-ERR (e.g. 0.855+-0.02), got {value!r}",
            param_hint="--viscosity") from None
    if not (math.isfinite(v) and math.isfinite(e)):
        raise click.BadParameter(
            f"expected 'auto', VALUE or VALUE+-ERR with finite numbers, got {value!r}",
            param_hint="--viscosity")
    if not (v > 0 and e >= 0):
        raise click.BadParameter(f"expected a positive viscosity and an error >= 0, got "
                                 f"{value!r}", param_hint="--viscosity")
    return v, e


@main.command()
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=False),
                metavar="[TOPOLOGY] TRAJECTORY...")
@click.option("--select", default="all", show_default=True,
              help="MDAnalysis selection of the atoms to analyse, e.g. 'resname SOL'.")
@click.option("--group-by", "group_by",
              type=click.Choice(["atom", "molecule", "residue", "type"]), default="atom",
              show_default=True,
              help="Particles and species: the selected atoms as one group, atoms by type, "
                   "or centres of mass of residues / bonded molecules, named by residue name "
                   "or else composition (e.g. C6H14, or t1x2-t2x4 from types).")
@click.option("--unwrap", type=click.Choice(["auto", "none", "images", "displacement"]),
              default="auto", show_default=True,
              help="Continuous positions from unwrapped coordinates, image flags, or "
                   "minimum-image steps in the instantaneous box ('auto' picks in that "
                   "order).")
@click.option("--fit-window", default="auto", show_default=True,
              help="MSD fit window 'auto' (local slope) or T0:T1 in ps (tau for --units lj).")
@click.option("--skip", default="0", show_default=True,
              help="Initial time to drop, in ps (tau).")
@click.option("--units", default=None,
              help="Unit convention: needed for LAMMPS dumps (real, metal, lj, ...) unless "
                   "--log or a log.lammps beside the dump gives it; "
                   "'lj' keeps reduced units; otherwise it sets the unit of --timestep.")
@click.option("--timestep", type=float, default=None,
              help="Integration time step (engine time unit, ps by default): frame times "
                   "are the stored step numbers times this.")
@click.option("--log", "log", type=click.Path(dir_okay=False), default=None,
              help="The run's LAMMPS log: units style and time step where not given "
                   "(default for a dump: log.lammps beside it, when settings are missing).")
@click.option("--masses", default=None, metavar="TYPE=MASS,...",
              help="Masses per atom type (g/mol for real and metal), e.g. 1=12.011,2=1.008, "
                   "for a dump without mass column or a topology without masses.")
@click.option("--frame-interval", type=float, default=None,
              help="Time between frames (engine time unit, ps by default), overriding the "
                   "file.")
@click.option("--temperature", type=float, default=None,
              help="Temperature (K, or reduced), recorded for finite-size corrections; "
                   "default: from the velocities when present.")
@click.option("--continue", "continuation", is_flag=True,
              help="The trajectories are consecutive parts of one run (default: "
                   "independent replicas).")
@click.option("--vacf", type=click.Choice(["auto", "yes", "no"]), default="auto",
              show_default=True,
              help="Velocity-autocorrelation (Green–Kubo) cross-check: when velocities are "
                   "sampled finely enough, always, or never.")
@click.option("--remove-drift/--keep-drift", default=True, show_default=True,
              help="Remove the centre-of-mass drift of the whole system.")
@click.option("--scratch", type=click.Path(file_okay=False), default=None,
              help="Folder for the scratch file used when positions exceed the memory.")
@click.option("--viscosity", default=None,
              help="Also report D corrected for the periodic box (Yeh–Hummer for a cube, "
                   "the Oseen lattice sum for other cells) with this shear viscosity: "
                   "'auto' (Green–Kubo from --stress of the same run) or VALUE[+-ERR] in "
                   "mPa s (reduced for --units lj).")
@click.option("--stress", "stress_files", multiple=True, type=click.Path(dir_okay=False),
              help="Thermo log or table with the pressure tensor of the same run, for "
                   "--viscosity auto (repeat for replicas); read with --units, --timestep "
                   "and --temperature where the file does not say them.")
@cache_options[0]
@cache_options[1]
@target_options
@json_option
@plot_option
@click.pass_context
def diffusion(ctx: click.Context, files: tuple[str, ...], select: str,
              group_by: str, unwrap: str, fit_window: str, skip: str, units: str | None,
              timestep: float | None, log: str | None, masses: str | None,
              frame_interval: float | None,
              temperature: float | None, continuation: bool, vacf: str, remove_drift: bool,
              scratch: str | None, viscosity: str | None, stress_files: tuple[str, ...],
              target: str | None, strict: bool, json_path: str | None,
              plot_path: str | None) -> None:
    """Self-diffusion from trajectories, per species, with the MSD fitted over its
    diffusive window, the error bar from independent time blocks, and the VACF as a
    cross-check. Several trajectories are replicas, or parts of one run with --continue.

    \b
    Two forms:
      transport diffusion TOPOLOGY TRAJECTORY...   (e.g. system.data run.dcd)
      transport diffusion TRAJECTORY...            (files that list their atoms)

    One file, or only LAMMPS dumps, need no topology: a dump with id and type columns
    (and mol, mass, element, q when present) gives the atoms from its first frame; GRO,
    PDB and other files MDAnalysis reads alone work too. Otherwise the first file is the
    topology. A dump's units and time step come from --units/--timestep, or --log, or a
    log.lammps beside it.

    With --target, a run-length verdict follows the results for each species."""
    run_diffusion(ctx, files, select=select, group_by=group_by,
                  unwrap=unwrap, fit_window=fit_window, skip=skip, units=units,
                  timestep=timestep, log=log, masses=masses,
                  frame_interval=frame_interval, temperature=temperature,
                  continuation=continuation, vacf=vacf, remove_drift=remove_drift,
                  scratch=scratch, viscosity=viscosity, stress_files=stress_files,
                  target=target, strict=strict, json_path=json_path, plot_path=plot_path)


def run_diffusion(ctx: click.Context, files: tuple[str, ...], *,
                  select: str = "all", group_by: str = "atom", unwrap: str = "auto",
                  fit_window: str = "auto", skip: str = "0", units: str | None = None,
                  timestep: float | None = None, log: str | None = None,
                  masses: str | None = None, frame_interval: float | None = None,
                  temperature: float | None = None, continuation: bool = False,
                  vacf: str = "auto", remove_drift: bool = True, scratch: str | None = None,
                  viscosity: str | None = None, stress_files: tuple[str, ...] = (),
                  target: str | None = None, strict: bool = False,
                  json_path: str | None = None, plot_path: str | None = None,
                  default_target: str | None = None, verdicts_only: bool = False,
                  command: str = "diffusion") -> None:
    """The body of ``transport diffusion`` (also run by ``transport check``)."""
    from .._progress import want_progress
    from ..diffusion import analyse_diffusion
    from ..errors import RunTooShortError
    from ..io.trajectory import load_trajectory, split_inputs, trajectory_log
    from ..report.text import format_estimates
    from ..units import get_unit_system

    target_f = parse_target_option(target, strict, default=default_target)
    check_plot_path(plot_path)
    if units is not None:
        try:
            get_unit_system(units)
        except ValueError as exc:
            raise click.BadParameter(str(exc), param_hint="--units") from None
    eta_given = _parse_viscosity(viscosity)
    if eta_given == "auto" and not stress_files:
        raise click.BadParameter("'auto' needs the pressure tensor of the same run: give "
                                 "--stress FILE", param_hint="--viscosity")
    if stress_files and eta_given != "auto":
        raise click.BadParameter("--stress is read only with --viscosity auto",
                                 param_hint="--stress")
    check_outputs((*files, *stress_files, *((log,) if log else ())), json=json_path,
                  plot=plot_path)
    topology, trajectories = split_inputs(files)
    check_distinct(tuple(str(t) for t in trajectories))
    if log is None:
        log = trajectory_log(trajectories[0], units=units, timestep=timestep,
                             frame_interval=frame_interval)
        if log is not None:
            note(ctx, f"transport: note: settings missing for the dump are read from {log}, "
                      "found beside it (give --log FILE to choose another)")
    check_distinct(stress_files)
    ts = 1.0 if units is not None and get_unit_system(units).reduced else 1e12
    window = _diffusion_window(fit_window, ts)
    skip_t = parse_time(skip, "--skip") or 0.0
    series = load_trajectory(
        topology, list(trajectories), select=select, group_by=group_by,  # type: ignore[arg-type]
        unwrap=unwrap, units=units, timestep=timestep, log=log,  # type: ignore[arg-type]
        masses=masses,
        frame_interval=frame_interval, skip=skip_t / ts, temperature=temperature,
        continuation=continuation, scratch_dir=scratch,
        # velocities serve the VACF and, without --temperature, the kinetic temperature
        velocities=vacf != "no" or temperature is None,
        progress=want_progress(quiet(ctx)),
    )
    settings = {"topology": topology, "log": log, "masses": masses, "select": select,
                "group_by": group_by,
                "unwrap": unwrap, "unwrap_used": [s.unwrap for s in series],
                "fit_window": fit_window, "skip": skip, "units": series[0].units.name,
                "timestep": timestep, "frame_interval": frame_interval,
                "temperature": temperature, "continue": continuation, "vacf": vacf,
                "remove_drift": remove_drift, "viscosity": viscosity,
                "stress": list(stress_files), "target": target_f}
    try:
        result = analyse_diffusion(series, fit_window=window,  # type: ignore[arg-type]
                                   remove_drift=remove_drift, vacf=vacf)  # type: ignore[arg-type]
    except RunTooShortError as exc:
        if target_f is None:
            raise
        verdict_only(ctx, command, exc, quantity_of="diffusion", series=series,
                     target=target_f, strict=strict, method="msd_wls", json_path=json_path,
                     settings=settings, inputs=[src for s in series for src in s.sources])
        return
    verdicts = ()
    if target_f is not None:  # on the periodic-box estimates (before any correction)
        from ..run_length import diffusion_verdicts

        verdicts = diffusion_verdicts(series, result.estimates, target=target_f,
                                      fit_window=window,  # type: ignore[arg-type]
                                      remove_drift=remove_drift)
    est = list(result.estimates)
    notes = list(result.notes)
    stress_sources: list = []
    if eta_given is not None:
        est, extra_notes, stress_sources = _corrected(
            ctx, est, eta_given, stress_files, units=units, timestep=timestep,
            temperature=temperature)
        notes.extend(extra_notes)
    n = len(trajectories)
    kind = ("consecutive parts of one run" if continuation else "independent replicas")
    title = f"self-diffusion from {n} trajectory file(s)" + (f" ({kind})" if n > 1 else "")

    def figure() -> Any:
        from ..report.diffusion_plots import diffusion_figure

        return diffusion_figure(result.msd, result.vacf)

    text = "" if verdicts_only else format_estimates(est, title=title, notes=notes)
    if target_f is not None:
        from ..report.verdicts import format_verdicts

        text += ("" if verdicts_only else "\n\n") + format_verdicts(verdicts)
    finish(ctx, command, json_path=json_path, plot_path=plot_path, figure=figure,
           inputs=[*(src for s in series for src in s.sources), *stress_sources],
           settings=settings, results=est, warnings=notes,
           extra=None if target_f is None else
           {"verdicts": [v.to_record() for v in verdicts]},
           text=text)
    exit_for_verdicts(ctx, verdicts, strict)


def _corrected(ctx: click.Context, est: list, eta: tuple[float, float] | str,
               stress_files: tuple[str, ...], *, units: str | None,
               timestep: float | None, temperature: float | None) -> tuple[list, list, list]:
    """The estimates with corrected D after each periodic-box one (and, for 'auto', the
    Green–Kubo viscosity used), run-level notes, and the stress files read."""
    from ..corrections import correct_each
    from ..errors import InputError
    from ..viscosity import analyse_viscosity

    notes: list[str] = []
    sources: list = []
    visc_est: list = []
    if eta == "auto":
        runs = load_stress_files(ctx, stress_files, units=units, timestep=timestep,
                                 temperature=temperature)
        vres = analyse_viscosity(runs)
        used: Any = vres.green_kubo
        visc_est = list(vres.estimates)
        sources = [r.source for r in runs]
    else:
        used = eta
        if eta[1] == 0:
            notes.append("the viscosity was given without an error: the finite-size "
                         "correction's uncertainty is taken as zero")
    try:
        out = correct_each(est, used, temperature=temperature)
    except ValueError as exc:
        fix = ("give --temperature" if "temperature" in str(exc)
               else "give the viscosity in the unit of the trajectory's results")
        raise InputError(f"cannot correct D for the box size: {exc}",
                         expected="the temperature, the box and a viscosity in matching "
                                  "units", fix=fix) from None
    return [*out, *visc_est], notes, sources
