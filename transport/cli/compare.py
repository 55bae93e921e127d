"""``transport compare``: candidate potentials compared on a study manifest."""

from __future__ import annotations

from pathlib import Path

import click

from ._group import main
from ._shared import check_outputs, finish, json_option, plot_option, quiet


@main.command("compare")
@click.argument("manifest", type=click.Path(dir_okay=False))
@click.option("--target", default=None,
              help="Target relative standard error of the verdicts, e.g. 5% or 0.05 "
                   "(default: the manifest's study.target; none: no verdicts).")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Local processes for the runs [default: the available CPUs].")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Address of a running dask.distributed scheduler (tcp://HOST:PORT): "
                   "the runs are analysed there (workers must see the files).")
@click.option("--store", "store_path", default=None, type=click.Path(dir_okay=False),
              help="Results store (SQLite) [default: STUDY.results.sqlite beside the "
                   "manifest].")
@click.option("--no-store", is_flag=True, help="Analyse every run; keep nothing.")
@click.option("--seed", type=int, default=0, show_default=True,
              help="Seed of the draws behind the probability of being closest.")
@click.option("--out", default=None, type=click.Path(file_okay=False),
              help="Folder for the report of the whole study (report.html, report.md, "
                   "figures/, report.json).")
@json_option
@plot_option
@click.pass_context
def compare(ctx: click.Context, manifest: str, target: str | None, workers: int | None,
            scheduler: str | None, store_path: str | None, no_store: bool, seed: int,
            out: str | None, json_path: str | None, plot_path: str | None) -> None:
    """Compare the candidate potentials of the study MANIFEST (TOML): every run analysed,
    replicas pooled, D corrected for the box, deviations from the reference, pairwise
    differences (Holm), ranking with the probability of being closest."""
    from ..parallel import start_early

    start_early(workers, scheduler)  # the workers' imports overlap this process's own
    import numpy as np

    from ..convergence import parse_target
    from ..report.comparison import (
        comparison_records,
        forest_figure,
        format_comparison,
        write_comparison_report,
    )
    from ..store import ResultStore
    from ..study import load_study
    from ..study_analysis import analyse_study, compare_study, sources_of
    from ._shared import check_plot_path

    target_f = None
    if target is not None:
        try:
            target_f = parse_target(target)
        except ValueError as exc:
            raise click.BadParameter(str(exc), param_hint="--target") from None
    check_plot_path(plot_path)
    study = load_study(manifest)
    inputs = tuple(str(p) for r in study.runs for p in r.files())
    check_outputs((manifest, *inputs), json=json_path, plot=plot_path)
    if out is not None:
        from ..report.document import check_output_folder

        check_output_folder(out, (manifest, *inputs))
    store = None
    if not no_store:
        path = Path(store_path) if store_path else study.path.with_suffix(".results.sqlite")
        store = ResultStore(path)
    try:
        runs = analyse_study(study, store=store, workers=workers, scheduler=scheduler,
                             progress=not quiet(ctx))
    finally:
        if store is not None:
            store.close()
    sc = compare_study(study, runs.records, target=target_f, rng=np.random.default_rng(seed),
                       failures=runs.failures)
    results = [r.estimate for q in sc.comparisons for r in q.candidates]
    settings = {"manifest": str(study.path), "target": target_f or study.target,
                "alpha": study.alpha, "seed": seed,
                "executor": scheduler or f"local processes ({workers or 'all CPUs'})",
                "store": None if store is None else str(store.path)}
    text = format_comparison(sc) + (
        f"\nruns analysed now: {len(runs.analysed)}, read from the store: {len(runs.reused)}")
    if out is not None:
        write_comparison_report(study, sc, settings, out, sources_of(runs.records))
        text += f"\nreport written to {out}/report.html"
    finish(ctx, "compare", json_path=json_path, text=text, inputs=sources_of(runs.records),
           settings=settings, results=results, warnings=sc.warnings, extra=comparison_records(sc),
           plot_path=plot_path, figure=lambda: forest_figure(sc))
    if sc.failures:
        ctx.exit(1 if not results else 0)
