"""The command group: global options and the translation of failures into one line.

Every failure caused by the input is one line on standard error naming the file, the line,
what was expected and the fix, with exit code 2 and no traceback (``--debug`` shows it).
"""

from __future__ import annotations

from typing import Any

import click

from .. import __version__
from ..errors import InputError

__all__ = ["InputFailure", "main"]


class InputFailure(click.ClickException):
    exit_code = 2

    def show(self, file: Any = None) -> None:
        click.echo(f"transport: error: {self.format_message()}", err=True)


# click >= 8.2 shows the help of a command called without arguments through this error
_NoArgsIsHelp: type = getattr(click.exceptions, "NoArgsIsHelpError", InputFailure)


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
            raise InputFailure(exc.one_line()) from None
        except click.UsageError as exc:
            if debug or isinstance(exc, (_UsageFailure, _NoArgsIsHelp)):
                raise
            raise _UsageFailure(exc.format_message(), exc.ctx) from None
        except KeyboardInterrupt:
            if debug:
                raise
            # outputs are written only after the computation, with Ctrl-C held off
            # (cli/_shared.finish): interrupted here means nothing was written
            click.echo("transport: interrupted; nothing was written", err=True)
            ctx.exit(130)
        except (click.ClickException, click.exceptions.Exit, click.Abort):
            raise
        except MemoryError:
            if debug:
                raise
            raise InputFailure(
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
