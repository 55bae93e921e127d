"""``transport report``: one document from the JSON results of the other commands."""

from __future__ import annotations

import click

from ._group import main


def _parse_pairs(pairs: tuple[str, ...]) -> list[tuple[str, str]]:
    out = []
    for p in pairs:
        parts = p.split("=")
        if len(parts) != 2 or not all(parts):
            raise click.BadParameter(
                f"expected DIFFUSION.json=VISCOSITY.json, got {p!r}", param_hint="--pair")
        out.append((parts[0], parts[1]))
    return out


@main.command("report")
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("--out", default="report", show_default=True,
              type=click.Path(file_okay=False),
              help="Folder for report.html, report.md, figures/ and report.json (a new "
                   "folder, or one holding a previous report, which is replaced).")
@click.option("--pair", "pairs", multiple=True,
              help="DIFFUSION.json=VISCOSITY.json: correct the diffusion results of the "
                   "first with the viscosity of the second (repeatable); otherwise a "
                   "viscosity result of the same temperature and box volume is used.")
@click.option("--title", default="Transport coefficients", show_default=True,
              help="Title of the document.")
@click.pass_context
def report(ctx: click.Context, files: tuple[str, ...], out: str, pairs: tuple[str, ...],
           title: str) -> None:
    """One document from the JSON results in FILES (the --json output of viscosity,
    diffusion and average, or the demo's JSON): an HTML page with its figures embedded,
    a Markdown twin with PNG figures, and the merged JSON. Periodic-box D is corrected for
    the box size when a viscosity result of the same system is among FILES."""
    from ..errors import InputError
    from ..report.document import (
        build_report,
        check_output_folder,
        read_documents,
        write_report,
    )
    from ..report.text import format_estimates

    parsed = _parse_pairs(pairs)
    check_output_folder(out, files)  # before reading: a bad folder costs nothing
    docs = read_documents(files)
    rep = build_report(docs, pairs=parsed, title=title)
    try:
        html = write_report(rep, out)
    except OSError as exc:
        raise InputError(
            f"cannot write the report ({exc.strerror or exc})", path=exc.filename or out,
            expected="a folder that can be created and written",
            fix="check the path, the permissions and the free disk space") from None
    rows = [r.estimate for r in (*rep.diffusion, *rep.extrapolations, *rep.viscosity,
                                 *rep.others)]
    click.echo(format_estimates(rows, title=f"{title} ({len(docs)} document(s))",
                                notes=rep.notes))
    click.echo(f"report written to {html} (Markdown twin and report.json beside it)")
