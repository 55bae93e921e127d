"""Options and helpers shared by the commands.

Output files (``--json``, ``--plot``) are written only after every computation succeeded;
missing folders on their paths are then created. An output path that is one of the inputs,
or that runs through an existing file, is refused before anything is read.
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Callable, Iterator
from typing import Any

import click

from ..errors import InputError
from ._group import InputFailure


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


def units_option(f: Callable) -> Callable:
    """``--units NAME`` for files that do not say their unit convention."""
    return click.option(
        "--units", default=None,
        help="Unit convention where the file does not say it: real, metal, lj, si, cgs, "
             "electron, micro, nano, gromacs.",
    )(f)


def timestep_option(f: Callable) -> Callable:
    """``--timestep DT`` (engine time unit) for files that do not say it."""
    return click.option(
        "--timestep", type=float, default=None,
        help="Integration time step in the engine's time unit, where the file does not "
             "say it.",
    )(f)


def quiet(ctx: click.Context) -> bool:
    return bool((ctx.obj or {}).get("quiet"))


def note(ctx: click.Context, text: str) -> None:
    """A note for the user on stderr (suppressed by --quiet)."""
    if not quiet(ctx):
        click.echo(text, err=True)


def parse_time(value: str | None, option: str, *, positive: bool = False) -> float | None:
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


def check_outputs(inputs: tuple[str, ...], **outputs: str | None) -> None:
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
        # tried by creating a temporary file there: permission bits say nothing to root
        # or on a read-only file system, which were found only after the computation
        from ..report.jsonout import folder_not_writable

        problem = folder_not_writable(target)
        if problem is not None:
            raise click.BadParameter(f"cannot create {out!r}: {problem}", param_hint=hint)


def check_distinct(files: tuple[str, ...]) -> None:
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


def write_outputs(fig: Any, plot_path: str | None, doc: Any, json_path: str | None) -> None:
    """Write the figure and the JSON document; a failure is one line, exit code 2."""
    from pathlib import Path

    from ..report.figures import save_figure
    from ..report.jsonout import write_json

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
        raise InputFailure(
            f"{name}: cannot write the output ({exc.strerror or exc}); fix: check the "
            "path, the permissions and the free disk space") from None


def check_plot_path(plot_path: str | None) -> None:
    """Refuse a ``--plot`` path whose suffix names no figure format (before any reading)."""
    from ..report.figures import plot_format

    if plot_path is not None:
        try:
            plot_format(plot_path)
        except ValueError as exc:
            raise click.BadParameter(str(exc), param_hint="--plot") from None


def parse_run_option(run: str | None) -> Any:
    """The ``--run`` choice parsed by :func:`transport.io.parse_run`."""
    from ..io import parse_run

    try:
        return parse_run(run)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--run") from None


def finish(ctx: click.Context, command: str, *, json_path: str | None, text: str,
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
        from ..report.jsonout import build_document

        doc = build_document(command, inputs=inputs, settings=settings, results=results,
                             warnings=warnings, extra=extra)
    # from here the command completes: Ctrl-C is held off, so that it either stopped the
    # computation above (nothing written, exit 130) or the outputs are complete (exit 0)
    with interrupts_held() as held:
        write_outputs(fig, plot_path, doc, json_path)
        for n in notes:
            note(ctx, f"transport: note: {n}")
        if json_path != "-":
            click.echo(text)
        if held:
            note(ctx, "transport: note: interrupt received while the outputs were written; "
                      "they are complete")


@contextlib.contextmanager
def interrupts_held() -> Iterator[list[int]]:
    """Hold off SIGINT (Ctrl-C) inside the block; the list says whether one came.

    Only the main thread can set signal handlers; elsewhere the block runs as it is.
    """
    import signal
    import threading

    got: list[int] = []
    if threading.current_thread() is not threading.main_thread():
        yield got
        return
    previous = signal.signal(signal.SIGINT, lambda signum, frame: got.append(signum))
    try:
        yield got
    finally:
        signal.signal(signal.SIGINT, previous)


def stress_options(f: Callable) -> Callable:
    """Options shared by commands that read the pressure tensor."""
    opts = [
        units_option,
        timestep_option,
        click.option("--temperature", type=float, default=None,
                     help="Thermostat set point (K, or reduced); default: the mean of the "
                          "file's temperature column."),
        click.option("--volume", type=float, default=None,
                     help="Box volume in the engine's length unit cubed, where the file has "
                          "no volume or box-length column."),
        click.option("--run", "run", default=None,
                     help="Which thermo block of a log to use (1-based), or 'all'."),
        *cache_options,
    ]
    for o in reversed(opts):
        f = o(f)
    return f


def _remember(name: str) -> Callable:
    def callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
        ctx.meta[f"transport.{name}"] = value
        return value
    return callback


cache_options = [
    click.option("--cache", "cache_dir", default=None, type=click.Path(file_okay=False),
                 expose_value=False, callback=_remember("cache_dir"),
                 help="Folder of the parse cache (parsed text logs kept as binary files); "
                      "default $TRANSPORT_CACHE, else the user cache folder "
                      "(~/.cache/transport). Size bound: TRANSPORT_CACHE_MAX (default 4G)."),
    click.option("--no-cache", is_flag=True, expose_value=False,
                 callback=_remember("no_cache"),
                 help="Parse the files again and keep nothing in the parse cache."),
    click.option("--stream/--no-stream", "stream", default=None, expose_value=False,
                 callback=_remember("stream"),
                 help="Keep the parsed series in a scratch file in the cache folder and "
                      "analyse it chunk by chunk, in bounded memory (same results); "
                      "default: when the series would take more than a third of the "
                      "available memory."),
]


def parse_cache(ctx: click.Context) -> Any:
    """The parse cache the options ask for (None with --no-cache)."""
    from ..io._cache import ParseCache, cache_folder

    if ctx.meta.get("transport.no_cache"):
        return None
    return ParseCache(cache_folder(ctx.meta.get("transport.cache_dir")))


def load_stress_files(ctx: click.Context, files: tuple[str, ...], **kw: Any) -> list:
    from .._progress import want_progress
    from ..io import load_stress
    from ..io._cache import cache_folder

    cache = parse_cache(ctx)
    scratch = cache_folder(ctx.meta.get("transport.cache_dir")) / "scratch"
    return [load_stress(f, progress=want_progress(quiet(ctx)), cache=cache,
                        stream=ctx.meta.get("transport.stream"), scratch=scratch, **kw)
            for f in files]


def target_options(f: Callable) -> Callable:
    """``--target`` (relative standard error wanted) and ``--strict``."""
    f = click.option(
        "--strict", is_flag=True,
        help="With --target: exit with code 3 when a run is not long enough (for job "
             "scripts); otherwise the verdict never changes the exit code.")(f)
    return click.option(
        "--target", default=None,
        help="Target relative standard error, e.g. 5% or 0.05: adds a run-length verdict "
             "(is the run long enough, and if not, how much longer or how many more "
             "replicas).")(f)


def parse_target_option(target: str | None, strict: bool, *,
                        default: str | None = None) -> float | None:
    """The ``--target`` value as a fraction (None without it); ``--strict`` needs one."""
    from ..convergence import parse_target

    value = target if target is not None else default
    if value is None:
        if strict:
            raise click.BadParameter("--strict needs --target", param_hint="--strict")
        return None
    try:
        return parse_target(value)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--target") from None


def exit_for_verdicts(ctx: click.Context, verdicts: Any, strict: bool) -> None:
    """Exit code 3 under ``--strict`` when a verdict says "not long enough"."""
    if strict and any(not v.long_enough for v in verdicts):
        ctx.exit(3)


def verdict_only(ctx: click.Context, command: str, error: Any, *, series: Any,
                 target: float, strict: bool, method: str, json_path: str | None,
                 settings: dict[str, Any], inputs: Any = None,
                 quantity_of: str = "viscosity") -> None:
    """Finish a command whose data were too short for any estimate, under ``--target``:
    the verdict (not long enough, and the least time that gives an error bar) instead of
    an error; exit code 0, or 3 with ``--strict``."""
    from ..convergence import too_short_verdict
    from ..report.verdicts import format_verdicts
    from ..run_length import engine_speed

    quantity = "shear_viscosity" if quantity_of == "viscosity" else "self_diffusion"
    meth = {"green-kubo": "green_kubo", "both": "green_kubo"}.get(method, method)
    v = too_short_verdict(error, quantity=quantity, method=meth, target=target,
                          replicas=len(series), seconds_per_time=engine_speed(series))
    srcs = inputs if inputs is not None else [s.source for s in series]
    finish(ctx, command, json_path=json_path, inputs=srcs, settings=settings, results=[],
           warnings=[error.one_line()], extra={"verdicts": [v.to_record()]},
           text=format_verdicts([v]))
    exit_for_verdicts(ctx, [v], strict)
