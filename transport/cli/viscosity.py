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
    finish,
    json_option,
    load_stress_files,
    parse_time,
    plot_option,
    stress_options,
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
@json_option
@plot_option
@click.pass_context
def viscosity(ctx: click.Context, files: tuple[str, ...], units: str | None,
              timestep: float | None, temperature: float | None, volume: float | None,
              run: str | None, method: str, cutoff: str, fit_window: str,
              max_lag: str | None, skip: str, components: str, json_path: str | None,
              plot_path: str | None) -> None:
    """Shear viscosity from the pressure tensor in FILES (several files = replicas)."""
    from ..report.text import format_estimates
    from ..viscosity import analyse_viscosity

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
    result = analyse_viscosity(
        series,
        method=method,
        cutoff="auto" if cut_t is None else cut_t / ts,
        fit_window="auto" if window is None else (window[0] / ts, window[1] / ts),
        max_lag=None if lag_t is None else lag_t / ts,
        skip="auto" if skip == "auto" else (skip_t or 0.0) / ts,
        components="all" if components == "all" else "off_diagonal",
    )
    est = result.estimates
    n_files = len(files)
    title = (f"shear viscosity from {n_files} file(s)"
             + (" treated as independent replicas" if n_files > 1 else ""))

    def figure() -> Any:
        from ..report.viscosity_plots import viscosity_figure

        return viscosity_figure(result.green_kubo, result.einstein)

    settings = {"method": method, "cutoff": cutoff, "fit_window": fit_window,
                "max_lag": max_lag, "skip": skip, "components": components,
                "units": series[0].units.name, "temperature": temperature,
                "volume": volume, "timestep": timestep, "run": run}
    finish(ctx, "viscosity", json_path=json_path, plot_path=plot_path, figure=figure,
            inputs=[s.source for s in series], settings=settings, results=est,
            text=format_estimates(est, title=title))
