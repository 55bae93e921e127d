"""``transport demo``: every analysis on an invented scenario with known truth."""

from __future__ import annotations

import click

from ._group import main
from ._shared import (
    quiet,
)


@main.command()
@click.option("--out", type=click.Path(file_okay=False), default="demo-output",
              show_default=True, help="Folder for the demo's data, figures and JSON.")
@click.option("--seed", type=int, default=2, show_default=True,
              help="Seed of the scenario's random generator.")
@click.pass_context
def demo(ctx: click.Context, out: str, seed: int) -> None:
    """Run every analysis on an invented scenario with known truth."""
    from .._progress import want_progress
    from ..demo import run_demo

    run_demo(out, seed=seed, echo=click.echo, progress=want_progress(quiet(ctx)))
