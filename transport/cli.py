"""Command-line interface: parses options, calls the library, prints.

Every failure caused by the input is one line on standard error naming the file, the line,
what was expected and the fix, with exit code 2 and no traceback (``--debug`` shows it).
Output files (``--json``, ``--plot``) are written only after every computation succeeded;
missing folders on their paths are then created. An output path that is one of the inputs,
or that runs through an existing file, is refused before anything is read.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import click

from . import __version__
from .errors import InputError

__all__ = ["main"]


class _InputFailure(click.ClickException):
    exit_code = 2

    def show(self, file: Any = None) -> None:
        click.echo(f"transport: error: {self.format_message()}", err=True)


# click >= 8.2 shows the help of a command called without arguments through this error
_NoArgsIsHelp: type = getattr(click.exceptions, "NoArgsIsHelpError", _InputFailure)


class _UsageFailure(click.UsageError):
    """A usage error shown as one line (click's default is usage text plus the error)."""

    def show(self, file: Any = None) -> None:
        where = self.ctx.command_path if self.ctx is not None else "transport"
        msg = " ".join(self.format_message().split())
        click.echo(f"transport: error: {msg} (see '{where} --help')", err=True)


class _Group(click.Group):
    """Click group that turns library errors into one-line messages."""

    def make_context(self, info_name: str | None, args: list[str],
                     parent: click.Context | None = None, **extra: Any) -> click.Context:
        try:
            return super().make_context(info_name, args, parent=parent, **extra)
        except click.UsageError as exc:  # the group's own options (transport --bogus)
            if isinstance(exc, (_UsageFailure, _NoArgsIsHelp)):
                raise  # without arguments the help is shown, as click does
            raise _UsageFailure(exc.format_message(), exc.ctx) from None

    def invoke(self, ctx: click.Context) -> Any:
        debug = bool(ctx.params.get("debug"))
        try:
            return super().invoke(ctx)
        except InputError as exc:
            if debug:
                raise
            raise _InputFailure(exc.one_line()) from None
        except click.UsageError as exc:
            if debug or isinstance(exc, (_UsageFailure, _NoArgsIsHelp)):
                raise
            raise _UsageFailure(exc.format_message(), exc.ctx) from None
        except (click.ClickException, click.exceptions.Exit, click.Abort, KeyboardInterrupt):
            raise
        except MemoryError:
            if debug:
                raise
            raise _InputFailure(
                "out of memory; expected an input that fits the machine; fix: use --max-lag "
                "or a shorter --skip range, or run on a larger machine"
            ) from None
        except Exception as exc:  # unexpected: a bug, not bad input
            if debug:
                raise
            click.echo(
                f"transport: internal error: {type(exc).__name__}: {exc} "
                "(rerun with --debug for the traceback and please report it)",
                err=True,
            )
            ctx.exit(1)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="transport")
@click.option("--debug", is_flag=True, help="Show full tracebacks on errors.")
@click.option("--quiet", "-q", is_flag=True, help="No progress bars or notes on stderr.")
@click.pass_context
def main(ctx: click.Context, debug: bool, quiet: bool) -> None:
    """Transport coefficients (shear viscosity, self-diffusion) from MD runs,
    with error bars that account for correlation."""
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug
    ctx.obj["quiet"] = quiet


# ---- shared options -------------------------------------------------------------------

def json_option(f: Callable) -> Callable:
    """``--json PATH`` (``-`` for standard output)."""
    return click.option(
        "--json", "json_path", type=click.Path(dir_okay=False, allow_dash=True),
        default=None, help="Write the results as JSON to PATH ('-' for stdout); missing folders "
             "are created.",
    )(f)


def plot_option(f: Callable) -> Callable:
    """``--plot PATH``: a figure (format from the suffix: .png, .pdf, .svg)."""
    return click.option(
        "--plot", "plot_path", type=click.Path(dir_okay=False), default=None,
        help="Write diagnostic plots to PATH (.png, .pdf or .svg); missing folders "
             "are created.",
    )(f)


def _units_option(f: Callable) -> Callable:
    """``--units NAME`` for files that do not say their unit convention."""
    return click.option(
        "--units", default=None,
        help="Unit convention where the file does not say it: real, metal, lj, si, cgs, "
             "electron, micro, nano, gromacs.",
    )(f)


def _timestep_option(f: Callable) -> Callable:
    """``--timestep DT`` (engine time unit) for files that do not say it."""
    return click.option(
        "--timestep", type=float, default=None,
        help="Integration time step in the engine's time unit, where the file does not "
             "say it.",
    )(f)


def _quiet(ctx: click.Context) -> bool:
    return bool((ctx.obj or {}).get("quiet"))


def _note(ctx: click.Context, text: str) -> None:
    """A note for the user on stderr (suppressed by --quiet)."""
    if not _quiet(ctx):
        click.echo(text, err=True)


def _parse_time(value: str | None, option: str, *, positive: bool = False) -> float | None:
    """Parse a time given on the command line (in the reported time unit: ps, or tau)."""
    if value is None or value == "auto":
        return None
    try:
        t = float(value)
    except ValueError:
        raise click.BadParameter(f"expected a number or 'auto', got {value!r}",
                                 param_hint=option) from None
    if not (math.isfinite(t) and (t > 0 if positive else t >= 0)):
        word = "positive" if positive else "non-negative"
        raise click.BadParameter(f"expected a finite {word} time, got {value!r}",
                                 param_hint=option)
    return t


def _check_outputs(inputs: tuple[str, ...], **outputs: str | None) -> None:
    """Refuse output paths that would overwrite an input or cannot be created.

    Called before anything is read, so that a bad path costs nothing. A missing folder is
    created when the output is written (after every computation succeeded).
    """
    import os
    from pathlib import Path

    given = {opt: out for opt, out in outputs.items() if out is not None and out != "-"}
    seen: dict[Path, str] = {}
    for opt, out in given.items():
        hint = "--" + opt.replace("_", "-")
        target = Path(out).resolve()
        for f in inputs:
            same = Path(f).resolve() == target or (
                target.exists() and Path(f).exists() and os.path.samefile(f, target))
            if same:
                raise click.BadParameter(
                    f"{out!r} is an input file and would be overwritten; give another path",
                    param_hint=hint)
        if target in seen:
            raise click.BadParameter(f"{out!r} is also given to {seen[target]}",
                                     param_hint=hint)
        seen[target] = hint
        parent = target.parent
        while not parent.exists() and parent != parent.parent:
            parent = parent.parent
        if not parent.is_dir():
            raise click.BadParameter(
                f"cannot create {out!r}: {str(parent)!r} is a file, not a folder",
                param_hint=hint)
        if not os.access(parent, os.W_OK | os.X_OK):
            raise click.BadParameter(
                f"cannot create {out!r}: no permission to write in {str(parent)!r}",
                param_hint=hint)


def _check_distinct(files: tuple[str, ...]) -> None:
    """The same file given twice would count one run as two independent replicas."""
    from pathlib import Path

    seen: dict[Path, str] = {}
    for f in files:
        key = Path(f).resolve()
        if key in seen:
            raise InputError(
                f"given twice (also as {seen[key]!r})", path=f,
                expected="each replica once",
                fix="remove the repeated file: a copy is not an independent replica")
        seen[key] = f


def _write_outputs(fig: Any, plot_path: str | None, doc: Any, json_path: str | None) -> None:
    """Write the figure and the JSON document; a failure is one line, exit code 2."""
    from pathlib import Path

    from .report.figures import save_figure
    from .report.jsonout import write_json

    written = None
    try:
        if fig is not None:
            save_figure(fig, plot_path)  # type: ignore[arg-type]
            written = plot_path
        if doc is not None:
            write_json(doc, json_path)  # type: ignore[arg-type]
    except OSError as exc:
        if written is not None:  # all or nothing
            Path(written).unlink(missing_ok=True)
        name = exc.filename or (plot_path if written is None else json_path)
        raise _InputFailure(
            f"{name}: cannot write the output ({exc.strerror or exc}); fix: check the "
            "path, the permissions and the free disk space") from None


def _check_plot_path(plot_path: str | None) -> None:
    """Refuse a ``--plot`` path whose suffix names no figure format (before any reading)."""
    from .report.figures import plot_format

    if plot_path is not None:
        try:
            plot_format(plot_path)
        except ValueError as exc:
            raise click.BadParameter(str(exc), param_hint="--plot") from None


def _parse_run_option(run: str | None) -> Any:
    """The ``--run`` choice parsed by :func:`transport.io.parse_run`."""
    from .io import parse_run

    try:
        return parse_run(run)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--run") from None


def _finish(ctx: click.Context, command: str, *, json_path: str | None, text: str,
            inputs: Any, settings: dict[str, Any], results: Any, warnings: Any = (),
            extra: dict[str, Any] | None = None, plot_path: str | None = None,
            figure: Callable[[], Any] | None = None, notes: Any = ()) -> None:
    """The common end of a command, once every estimate is computed.

    Makes the figure (``figure()``, only with `plot_path`) and the JSON document (only with
    `json_path`) before writing anything, writes them all or nothing, then shows `notes` on
    stderr and `text` on stdout (unless the JSON document goes there).
    """
    fig = figure() if plot_path is not None and figure is not None else None
    doc = None
    if json_path is not None:
        from .report.jsonout import build_document

        doc = build_document(command, inputs=inputs, settings=settings, results=results,
                             warnings=warnings, extra=extra)
    _write_outputs(fig, plot_path, doc, json_path)
    for n in notes:
        _note(ctx, f"transport: note: {n}")
    if json_path != "-":
        click.echo(text)


# ---- commands are registered below (one block per command) -----------------------------



# ---- viscosity ---------------------------------------------------------------------------

def _stress_options(f: Callable) -> Callable:
    """Options shared by commands that read the pressure tensor."""
    opts = [
        _units_option,
        _timestep_option,
        click.option("--temperature", type=float, default=None,
                     help="Thermostat set point (K, or reduced); default: the mean of the "
                          "file's temperature column."),
        click.option("--volume", type=float, default=None,
                     help="Box volume in the engine's length unit cubed, where the file has "
                          "no volume or box-length column."),
        click.option("--run", "run", default=None,
                     help="Which thermo block of a log to use (1-based), or 'all'."),
    ]
    for o in reversed(opts):
        f = o(f)
    return f


def _load_stress_files(ctx: click.Context, files: tuple[str, ...], **kw: Any) -> list:
    from ._progress import want_progress
    from .io import load_stress

    return [load_stress(f, progress=want_progress(_quiet(ctx)), **kw) for f in files]


@main.command()
@click.argument("files", nargs=-1, required=True, type=click.Path())
@_stress_options
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
    from .report.text import format_estimates
    from .viscosity import analyse_viscosity

    _check_plot_path(plot_path)
    _check_outputs(files, json=json_path, plot=plot_path)
    cut_t = _parse_time(cutoff, "--cutoff", positive=True)
    lag_t = _parse_time(max_lag, "--max-lag", positive=True)
    skip_t = None if skip == "auto" else _parse_time(skip, "--skip")
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
    _check_distinct(files)
    series = _load_stress_files(ctx, files, units=units, timestep=timestep,
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
        from .report.viscosity_plots import viscosity_figure

        return viscosity_figure(result.green_kubo, result.einstein)

    settings = {"method": method, "cutoff": cutoff, "fit_window": fit_window,
                "max_lag": max_lag, "skip": skip, "components": components,
                "units": series[0].units.name, "temperature": temperature,
                "volume": volume, "timestep": timestep, "run": run}
    _finish(ctx, "viscosity", json_path=json_path, plot_path=plot_path, figure=figure,
            inputs=[s.source for s in series], settings=settings, results=est,
            text=format_estimates(est, title=title))


# ---- demo --------------------------------------------------------------------------------

@main.command()
@click.option("--out", type=click.Path(file_okay=False), default="demo-output",
              show_default=True, help="Folder for the demo's data, figures and JSON.")
@click.option("--seed", type=int, default=2, show_default=True,
              help="Seed of the scenario's random generator.")
@click.pass_context
def demo(ctx: click.Context, out: str, seed: int) -> None:
    """Run every analysis on an invented scenario with known truth."""
    from ._progress import want_progress
    from .demo import run_demo

    run_demo(out, seed=seed, echo=click.echo, progress=want_progress(_quiet(ctx)))


# ---- inspect -----------------------------------------------------------------------------

@main.command("inspect")
@click.argument("file", type=click.Path())
@click.option("--run", "run", default=None,
              help="Thermo run (block) to use: N (1-based), A-B (joined), 'last' or 'all'; "
                   "default: the last with the pressure tensor, joined with the runs it "
                   "continues.")
@_units_option
@_timestep_option
@json_option
@click.pass_context
def inspect_file(ctx: click.Context, file: str, run: str | None, units: str | None,
                 timestep: float | None, json_path: str | None) -> None:
    """Show what the readers find in FILE: format, thermo runs (blocks) with their steps
    and columns, which were used, units, time step, rows kept and dropped, warnings."""
    from ._progress import want_progress
    from .io import read_table
    from .io._inspect import describe_table, stress_summary

    run_spec = _parse_run_option(run)
    _check_outputs((file,), json=json_path)
    table = read_table(file, run=run_spec, units=units, timestep=timestep,
                       progress=want_progress(_quiet(ctx)))
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
    _finish(ctx, "inspect", json_path=json_path, inputs=[table.source],
            settings={"run": run, "units": units, "timestep": timestep}, results=[],
            warnings=table.warnings,
            extra={"tables": [b.to_record() for b in table.blocks], "resolved": resolved},
            text=describe_table(table, summary))


# ---- average -----------------------------------------------------------------------------

def _average_unit(table: Any, column: str) -> str:
    """Unit label of a column where its meaning and the file's units are known, else ''."""
    u = table.units
    canon = {v: k for k, v in table.canonical.items()}.get(column)
    if u is None or canon is None:
        return ""
    if canon in ("press", "pxx", "pyy", "pzz", "pxy", "pxz", "pyz", "pyx", "pzx", "pzy"):
        return u.pressure_label
    if canon == "temperature":
        return "reduced" if u.reduced else "K"
    if canon in ("lx", "ly", "lz"):
        return u.length_label
    if canon == "volume":
        return f"{u.length_label}^3"
    return ""


def _average_column_name(table: Any, name: str) -> str:
    """The file's name of the column `name` found by ``Table.column``."""
    if name in table.columns:
        return name
    if name.lower() in table.canonical:
        return table.canonical[name.lower()]
    return next((k for k in table.columns if k.lower() == name.lower()), name)


def _average_check_finite(table: Any, column: str, x: Any) -> None:
    """InputError naming the file line of the first non-finite value of a column, or of
    the first value so large that sums of squares overflow double precision."""
    import numpy as np

    limit = math.sqrt(np.finfo(np.float64).max / max(x.size, 1)) / 10
    bad = np.flatnonzero(~(np.abs(x) < limit))
    if bad.size == 0:
        return
    row = int(bad[0])
    line = None
    for first_row, first_line in getattr(table, "line_map", ()):
        if first_row <= row:
            line = first_line + row - first_row
    if np.isfinite(x[row]):
        what = (f"a value too large to analyse ({x[row]:.3g}; its square overflows double "
                "precision)")
        expected = f"values below {limit:.1e} in magnitude"
    else:
        what, expected = f"a non-finite value ({x[row]})", "a number in every row"
    raise InputError(
        f"column {column!r} has {what} in row {row + 1}",
        path=table.source.path or None, line=line,
        expected=expected, fix="repair or remove the damaged rows",
    )


def _average_time_axis(table: Any) -> tuple[float | None, float, str]:
    """(dt, t0, unit) of the rows in the reported time unit, or (None, 0, 'samples')."""
    import numpy as np

    if table.time is None or table.units is None or table.n < 2:
        return None, 0.0, "samples"
    t = np.asarray(table.time, dtype=np.float64) * table.units.time_scale
    steps = np.diff(t)
    dt = float((t[-1] - t[0]) / (t.size - 1))
    if not dt > 0 or np.max(np.abs(steps - dt)) > 1e-6 * dt:
        typical = float(np.median(steps))
        off = np.flatnonzero(~(np.abs(steps - typical) <= 1e-6 * abs(typical)))
        row = int(off[0]) + 1 if off.size else 1
        u = table.units.time_unit
        if steps[row - 1] == 0:
            what = f"time {t[row]:.10g} {u} is repeated"
        elif not typical > 0:
            what = "time does not increase"
        else:
            what = (f"time jumps from {t[row - 1]:.10g} to {t[row]:.10g} {u} (the interval "
                    f"elsewhere is {typical:.6g} {u})")
        raise InputError(
            f"rows are not evenly spaced in time: {what}",
            path=table.source.path or None, line=table.line_of(row),
            expected="a constant output interval",
            fix="choose one thermo run with --run, or remove the rows out of sequence",
        )
    return dt, float(t[0]), table.units.time_unit


def _average_table_text(rows: list[tuple[str, Any]]) -> str:
    """Fixed-width table: source, column, mean, stderr, 95% interval, tau_int, n_eff,
    t_equil; then the warnings, each once."""
    from .report.text import format_number as f

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
@_units_option
@_timestep_option
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

    from ._progress import want_progress
    from .io import read_table
    from .stats import combine_replicas, mean_with_error

    _check_plot_path(plot_path)
    run_spec = _parse_run_option(run)
    skip_t = None if skip == "auto" else _parse_time(skip, "--skip")
    _check_outputs(files, json=json_path, plot=plot_path)
    if replicas:
        _check_distinct(files)

    tables = [read_table(f, run=run_spec, units=units, timestep=timestep,
                         progress=want_progress(_quiet(ctx))) for f in files]
    rows: list[tuple[str, Any]] = []
    per_column: dict[str, list] = {c: [] for c in dict.fromkeys(columns)}
    for path, table in zip(files, tables, strict=True):
        dt, t0, t_unit = _average_time_axis(table)
        for name in per_column:
            try:
                x = table.column(name)
            except KeyError:
                raise InputError(
                    f"no column {name!r}", path=path,
                    expected="one of: " + ", ".join(table.columns),
                    fix="pass --column with one of these names",
                ) from None
            col = _average_column_name(table, name)
            dup = f"duplicate column name {col!r}"
            for b in table.blocks:
                if b.used and any(nt.startswith(dup) for nt in b.notes):
                    raise InputError(
                        f"column name {col!r} appears more than once in the header",
                        path=path, line=b.header_line, expected="distinct column names",
                        fix="rename or remove the repeated column")
            _average_check_finite(table, col, x)
            if skip_t is None:
                skip_n: str | int | None = "auto"
            else:
                skip_n = int(round(skip_t / (dt if dt is not None else 1.0)))
            try:
                est = mean_with_error(x, dt=dt, t0=t0, name=name,
                                      unit=_average_unit(table, col), time_unit=t_unit,
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
        from .report.plots import average_figure

        singles = [(p, e) for p, e in rows if e.method != "replicas_student_t"]
        return average_figure([e for _, e in singles],
                              [f"{Path(p).name} {e.quantity}" for p, e in singles])

    read_notes = [w for t in tables for w in t.warnings]
    settings = {"columns": list(per_column), "skip": skip, "units": units,
                "timestep": timestep, "run": run, "replicas": replicas}
    _finish(ctx, "average", json_path=json_path, plot_path=plot_path, figure=figure,
            inputs=[t.source for t in tables], settings=settings,
            results=[e for _, e in rows], warnings=[*read_notes, *notes],
            notes=[*dict.fromkeys(read_notes), *notes], text=_average_table_text(rows))


# ---- diffusion ---------------------------------------------------------------------------

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


@main.command()
@click.argument("topology", type=click.Path(dir_okay=False))
@click.argument("trajectories", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("--select", default="all", show_default=True,
              help="MDAnalysis selection of the atoms to analyse, e.g. 'resname SOL'.")
@click.option("--group-by", "group_by",
              type=click.Choice(["atom", "molecule", "residue", "type"]), default="atom",
              show_default=True,
              help="Particles and species: the selected atoms as one group, atoms by type, "
                   "or centres of mass of residues / bonded molecules by name.")
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
              help="Unit convention: required for LAMMPS dumps (real, metal, lj, ...); "
                   "'lj' keeps reduced units; otherwise it sets the unit of --timestep.")
@click.option("--timestep", type=float, default=None,
              help="Integration time step (engine time unit, ps by default): frame times "
                   "are the stored step numbers times this.")
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
@json_option
@plot_option
@click.pass_context
def diffusion(ctx: click.Context, topology: str, trajectories: tuple[str, ...], select: str,
              group_by: str, unwrap: str, fit_window: str, skip: str, units: str | None,
              timestep: float | None, frame_interval: float | None,
              temperature: float | None, continuation: bool, vacf: str, remove_drift: bool,
              scratch: str | None, json_path: str | None, plot_path: str | None) -> None:
    """Self-diffusion from TOPOLOGY and TRAJECTORIES (several files = replicas, or parts of
    one run with --continue), per species, with the MSD fitted by generalized least squares
    and the VACF as a cross-check."""
    from ._progress import want_progress
    from .diffusion import analyse_diffusion
    from .io.trajectory import load_trajectory
    from .report.text import format_estimates
    from .units import get_unit_system

    _check_plot_path(plot_path)
    if units is not None:
        try:
            get_unit_system(units)
        except ValueError as exc:
            raise click.BadParameter(str(exc), param_hint="--units") from None
    _check_outputs((topology, *trajectories), json=json_path, plot=plot_path)
    _check_distinct(trajectories)
    ts = 1.0 if units is not None and get_unit_system(units).reduced else 1e12
    window = _diffusion_window(fit_window, ts)
    skip_t = _parse_time(skip, "--skip") or 0.0
    series = load_trajectory(
        topology, list(trajectories), select=select, group_by=group_by,  # type: ignore[arg-type]
        unwrap=unwrap, units=units, timestep=timestep,  # type: ignore[arg-type]
        frame_interval=frame_interval, skip=skip_t / ts, temperature=temperature,
        continuation=continuation, scratch_dir=scratch,
        # velocities serve the VACF and, without --temperature, the kinetic temperature
        velocities=vacf != "no" or temperature is None,
        progress=want_progress(_quiet(ctx)),
    )
    result = analyse_diffusion(series, fit_window=window,  # type: ignore[arg-type]
                               remove_drift=remove_drift, vacf=vacf)  # type: ignore[arg-type]
    est = result.estimates
    n = len(trajectories)
    kind = ("consecutive parts of one run" if continuation else "independent replicas")
    title = f"self-diffusion from {n} trajectory file(s)" + (f" ({kind})" if n > 1 else "")

    def figure() -> Any:
        from .report.diffusion_plots import diffusion_figure

        return diffusion_figure(result.msd, result.vacf)

    settings = {"topology": topology, "select": select, "group_by": group_by,
                "unwrap": unwrap, "unwrap_used": [s.unwrap for s in series],
                "fit_window": fit_window, "skip": skip, "units": series[0].units.name,
                "timestep": timestep, "frame_interval": frame_interval,
                "temperature": temperature, "continue": continuation, "vacf": vacf,
                "remove_drift": remove_drift}
    _finish(ctx, "diffusion", json_path=json_path, plot_path=plot_path, figure=figure,
            inputs=[src for s in series for src in s.sources], settings=settings,
            results=est, warnings=result.notes,
            text=format_estimates(est, title=title, notes=result.notes))
