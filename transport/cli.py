"""Command-line interface: parses options, calls the library, prints.

Every failure caused by the input is one line on standard error naming the file, the line,
what was expected and the fix, with exit code 2 and no traceback (``--debug`` shows it).
Output files (``--json``, ``--plot``) are written only after every computation succeeded.
"""

from __future__ import annotations

import sys
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


class _Group(click.Group):
    """Click group that turns library errors into one-line messages."""

    def invoke(self, ctx: click.Context) -> Any:
        debug = bool(ctx.params.get("debug"))
        try:
            return super().invoke(ctx)
        except InputError as exc:
            if debug:
                raise
            raise _InputFailure(exc.one_line()) from None
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
        default=None, help="Write the results as JSON to PATH ('-' for stdout).",
    )(f)


def plot_option(f: Callable) -> Callable:
    """``--plot PATH``: a figure (format from the suffix: .png, .pdf, .svg)."""
    return click.option(
        "--plot", "plot_path", type=click.Path(dir_okay=False), default=None,
        help="Write diagnostic plots to PATH (.png, .pdf or .svg).",
    )(f)


def _quiet(ctx: click.Context) -> bool:
    return bool((ctx.obj or {}).get("quiet"))


def _note(ctx: click.Context, text: str) -> None:
    """A note for the user on stderr (suppressed by --quiet)."""
    if not _quiet(ctx):
        click.echo(text, err=True)


def _parse_time(value: str | None, option: str) -> float | None:
    """Parse a time given on the command line (in the reported time unit: ps, or tau)."""
    if value is None or value == "auto":
        return None
    try:
        t = float(value)
    except ValueError:
        raise click.BadParameter(f"expected a number or 'auto', got {value!r}",
                                 param_hint=option) from None
    if not t >= 0:
        raise click.BadParameter(f"expected a non-negative time, got {value!r}",
                                 param_hint=option)
    return t


# ---- commands are registered below (one block per command) -----------------------------


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
