"""``transport average``: the mean of any column with a correlation-aware error bar."""

from __future__ import annotations

from typing import Any

import click

from ._group import main
from ._shared import (
    check_distinct,
    check_outputs,
    check_plot_path,
    finish,
    json_option,
    parse_run_option,
    parse_time,
    plot_option,
    quiet,
    timestep_option,
    units_option,
)


def _average_table_text(rows: list[tuple[str, Any]]) -> str:
    """Fixed-width table: source, column, mean, stderr, 95% interval, tau_int, n_eff,
    t_equil; then the warnings, each once."""
    from ..report.text import format_number as f

    header = ("source", "column", "mean", "stderr", "95% interval", "unit", "tau_int",
              "n_eff", "t_equil")
    lines = []
    for label, e in rows:
        d = e.diagnostics
        t_unit = d.get("time_unit", e.window_unit)
        if e.method == "replicas_student_t":
            tau, t_eq = "-", "-"
        else:
            tau = f"{f(d['tau_int'], 3)} {t_unit}"
            t_eq = f"{f(d['t_equil'], 3)} {t_unit}"
        lines.append((label, e.quantity, f(e.value, 6), f(e.stderr, 2),
                      f"[{f(e.interval[0], 6)}, {f(e.interval[1], 6)}]", e.unit or "-",
                      tau, f(e.n_independent, 3), t_eq))
    widths = [max(len(h), *(len(r[i]) for r in lines)) for i, h in enumerate(header)]
    out = ["  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True))]
    out += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)) for r in lines]
    warned = list(dict.fromkeys(w for _, e in rows for w in e.warnings))
    out += [f"warning: {w}" for w in warned]
    return "\n".join(s.rstrip() for s in out)


@main.command()
@click.argument("files", nargs=-1, required=True, type=click.Path())
@click.option("--column", "columns", multiple=True, required=True,
              help="Column to average, by its name in the file (or a canonical name such "
                   "as density, press, temperature); repeat for several.")
@click.option("--skip", default="auto", show_default=True,
              help="Initial transient to drop: 'auto' (detected), a time in ps (tau for "
                   "reduced units; rows if the file has no time axis), or 0 to keep all.")
@units_option
@timestep_option
@click.option("--run", "run", default=None,
              help="Thermo run (block) of a log: N (1-based), A-B (joined), 'last' or 'all'.")
@click.option("--replicas/--no-replicas", default=True, show_default=True,
              help="With several files, also combine them as independent replicas "
                   "(Student t over the per-file means).")
@json_option
@plot_option
@click.pass_context
def average(ctx: click.Context, files: tuple[str, ...], columns: tuple[str, ...], skip: str,
            units: str | None, timestep: float | None, run: str | None, replicas: bool,
            json_path: str | None, plot_path: str | None) -> None:
    """Mean of any column of FILES (density, energy, pressure...) with an error bar that
    accounts for correlation: stderr, 95% interval, autocorrelation time, effective samples
    and the detected equilibration time. Each file is analysed on its own; with several
    files their replica estimate follows."""
    from dataclasses import replace
    from pathlib import Path

    from .._progress import want_progress
    from ..errors import InputError
    from ..io import checked_column, column_unit, even_time_axis, read_table
    from ..stats import combine_replicas, mean_with_error

    check_plot_path(plot_path)
    run_spec = parse_run_option(run)
    skip_t = None if skip == "auto" else parse_time(skip, "--skip")
    check_outputs(files, json=json_path, plot=plot_path)
    if replicas:
        check_distinct(files)

    tables = [read_table(f, run=run_spec, units=units, timestep=timestep,
                         progress=want_progress(quiet(ctx))) for f in files]
    rows: list[tuple[str, Any]] = []
    per_column: dict[str, list] = {c: [] for c in dict.fromkeys(columns)}
    for path, table in zip(files, tables, strict=True):
        dt, t0, t_unit = even_time_axis(table)
        for name in per_column:
            x, col = checked_column(table, name, path=path)
            if skip_t is None:
                skip_n: str | int | None = "auto"
            else:
                skip_n = int(round(skip_t / (dt if dt is not None else 1.0)))
            try:
                est = mean_with_error(x, dt=dt, t0=t0, name=name,
                                      unit=column_unit(table, col), time_unit=t_unit,
                                      skip=skip_n)
            except ValueError as exc:
                raise InputError(str(exc), path=path, expected="a finite series of at least "
                                 "16 rows after the skip",
                                 fix="use a longer run or a smaller --skip") from None
            est = replace(est, diagnostics={**est.diagnostics, "source": path})
            rows.append((path, est))
            per_column[name].append(est)
    notes: list[str] = []
    if replicas and len(files) > 1:
        for name, ests in per_column.items():
            try:
                comb = combine_replicas(ests)
            except ValueError as exc:
                notes.append(f"{name}: files not combined as replicas ({exc})")
                continue
            comb = replace(comb, diagnostics={**comb.diagnostics, "sources": list(files)})
            rows.append((f"replicas ({len(files)} files)", comb))


    def figure() -> Any:
        from ..report.plots import average_figure

        singles = [(p, e) for p, e in rows if e.method != "replicas_student_t"]
        return average_figure([e for _, e in singles],
                              [f"{Path(p).name} {e.quantity}" for p, e in singles])

    read_notes = [w for t in tables for w in t.warnings]
    settings = {"columns": list(per_column), "skip": skip, "units": units,
                "timestep": timestep, "run": run, "replicas": replicas}
    finish(ctx, "average", json_path=json_path, plot_path=plot_path, figure=figure,
            inputs=[t.source for t in tables], settings=settings,
            results=[e for _, e in rows], warnings=[*read_notes, *notes],
            notes=[*dict.fromkeys(read_notes), *notes], text=_average_table_text(rows))
