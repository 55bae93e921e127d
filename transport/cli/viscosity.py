"""``transport viscosity``: shear viscosity from the pressure tensor."""

from __future__ import annotations

import math
from typing import Any

import click

from ._group import main
from ._shared import (
    check_distinct,
    check_outputs,
    check_plot_path,
    exit_for_verdicts,
    finish,
    json_option,
    load_stress_files,
    parse_target_option,
    parse_time,
    plot_option,
    stress_options,
    target_options,
    verdict_only,
)


@main.command()
@click.argument("files", nargs=-1, required=True, type=click.Path())
@stress_options
@click.option("--method", type=click.Choice(["green-kubo", "einstein", "both"]),
              default="green-kubo", show_default=True, help="Estimator(s) to report.")
@click.option("--cutoff", default="auto", show_default=True,
              help="Green–Kubo cutoff: 'auto' (time decomposition) or a time in ps (tau for "
                   "reduced units).")
@click.option("--fit-window", default="auto", show_default=True,
              help="Einstein fit window 'auto' or T0:T1 in ps (tau).")
@click.option("--max-lag", default=None, help="Longest correlation lag in ps (tau).")
@click.option("--skip", default="auto", show_default=True,
              help="Initial transient to drop: 'auto', or a time in ps (tau); 0 keeps all.")
@click.option("--components", type=click.Choice(["all", "off-diagonal"]), default="all",
              show_default=True,
              help="All components of the traceless tensor, or off-diagonal only.")
@target_options
@json_option
@plot_option
@click.pass_context
def viscosity(ctx: click.Context, files: tuple[str, ...], units: str | None,
              timestep: float | None, temperature: float | None, volume: float | None,
              run: str | None, method: str, cutoff: str, fit_window: str,
              max_lag: str | None, skip: str, components: str, target: str | None,
              strict: bool, json_path: str | None, plot_path: str | None) -> None:
    """Shear viscosity from the pressure tensor in FILES (several files = replicas).

    With --target, a run-length verdict follows the results: whether the run reaches the
    target precision and, if not, how much longer (or how many more replicas)."""
    run_viscosity(ctx, files, units=units, timestep=timestep, temperature=temperature,
                  volume=volume, run=run, method=method, cutoff=cutoff, fit_window=fit_window,
                  max_lag=max_lag, skip=skip, components=components, target=target,
                  strict=strict, json_path=json_path, plot_path=plot_path)


def run_viscosity(ctx: click.Context, files: tuple[str, ...], *, units: str | None = None,
                  timestep: float | None = None, temperature: float | None = None,
                  volume: float | None = None, run: str | None = None,
                  method: str = "green-kubo", cutoff: str = "auto", fit_window: str = "auto",
                  max_lag: str | None = None, skip: str = "auto", components: str = "all",
                  target: str | None = None, strict: bool = False,
                  json_path: str | None = None, plot_path: str | None = None,
                  default_target: str | None = None, verdicts_only: bool = False,
                  command: str = "viscosity") -> None:
    """The body of ``transport viscosity`` (also run by ``transport check``, which sets a
    default target and prints only the verdicts)."""
    from ..errors import RunTooShortError
    from ..report.text import format_estimates
    from ..viscosity import analyse_viscosity

    target_f = parse_target_option(target, strict, default=default_target)
    check_plot_path(plot_path)
    check_outputs(files, json=json_path, plot=plot_path)
    cut_t = parse_time(cutoff, "--cutoff", positive=True)
    lag_t = parse_time(max_lag, "--max-lag", positive=True)
    skip_t = None if skip == "auto" else parse_time(skip, "--skip")
    window = None
    if fit_window != "auto":
        try:
            a, b = (float(v) for v in fit_window.split(":"))
        except ValueError:
            raise click.BadParameter(f"expected 'auto' or T0:T1, got {fit_window!r}",
                                     param_hint="--fit-window") from None
        if not (math.isfinite(b) and 0 <= a < b):
            raise click.BadParameter(f"expected 0 <= T0 < T1 (finite), got {fit_window!r}",
                                     param_hint="--fit-window")
        window = (a, b)
    check_distinct(files)
    series = load_stress_files(ctx, files, units=units, timestep=timestep,
                                temperature=temperature, volume=volume, run=run)
    ts = series[0].units.time_scale  # reported time unit -> internal: divide by ts
    options = {
        "cutoff": "auto" if cut_t is None else cut_t / ts,
        "fit_window": "auto" if window is None else (window[0] / ts, window[1] / ts),
        "max_lag": None if lag_t is None else lag_t / ts,
        "components": "all" if components == "all" else "off_diagonal",
    }
    settings = {"method": method, "cutoff": cutoff, "fit_window": fit_window,
                "max_lag": max_lag, "skip": skip, "components": components,
                "units": series[0].units.name, "temperature": temperature,
                "volume": volume, "timestep": timestep, "run": run, "target": target_f}
    try:
        result = analyse_viscosity(
            series, method=method, skip="auto" if skip == "auto" else (skip_t or 0.0) / ts,
            **options)  # type: ignore[arg-type]
    except RunTooShortError as exc:
        if target_f is None:
            raise
        verdict_only(ctx, command, exc, quantity_of="viscosity", series=series,
                     target=target_f, strict=strict,
                     method=method, json_path=json_path, settings=settings)
        return
    est = result.estimates
    verdicts = ()
    if target_f is not None:
        from ..run_length import viscosity_verdicts

        verdicts = viscosity_verdicts(series, est, target=target_f,
                                      **options)  # type: ignore[arg-type]
    n_files = len(files)
    title = (f"shear viscosity from {n_files} file(s)"
             + (" treated as independent replicas" if n_files > 1 else ""))

    def figure() -> Any:
        from ..report.viscosity_plots import viscosity_figure

        return viscosity_figure(result.green_kubo, result.einstein)

    text = "" if verdicts_only else format_estimates(est, title=title)
    if target_f is not None:
        from ..report.verdicts import format_verdicts

        text += ("" if verdicts_only else "\n\n") + format_verdicts(verdicts)
    finish(ctx, command, json_path=json_path, plot_path=plot_path, figure=figure,
           inputs=[s.source for s in series], settings=settings, results=est,
           extra=None if target_f is None else
           {"verdicts": [v.to_record() for v in verdicts]},
           text=text)
    exit_for_verdicts(ctx, verdicts, strict)
