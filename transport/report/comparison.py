"""Text tables, forest plot and JSON records of a study's comparison (reads results only)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..study_analysis import QuantityComparison, StudyComparison
from .text import format_number

__all__ = ["comparison_records", "forest_figure", "format_comparison",
           "write_comparison_report"]

_NAMES = {"shear_viscosity": "shear viscosity", "self_diffusion": "self-diffusion"}


def _verdict(v: Any) -> str:
    if v is None:
        return "-"
    if v.long_enough:
        return "long enough"
    more = []
    if v.additional_replicas:
        more.append(f"+{v.additional_replicas} replicas")
    if v.additional_time is not None:
        more.append(f"or +{format_number(v.additional_time, 2)} {v.time_unit} each")
    return "too short" + (f" ({' '.join(more)})" if more else "")


def _one(q: QuantityComparison) -> list[str]:
    ref = q.reference
    what = _NAMES.get(q.quantity, q.quantity) + (f" of {q.group}" if q.group else "")
    lines = [f"{q.state}: {what} ({ref.unit}); reference {format_number(ref.value)} ± "
             f"{format_number(ref.stderr, 2)}" + (f" ({ref.source})" if ref.source else "")]
    head = (f"  {'candidate':<14} {'value ± stderr':>18} {'95% interval':>20} "
            f"{'dev %':>8} {'dev/σ':>7}  verdict")
    lines += [head, "  " + "-" * (len(head) + 10)]
    for r in q.candidates:
        e, d = r.estimate, r.deviation
        lines.append(
            f"  {r.candidate:<14} {format_number(e.value) + ' ± ' + format_number(e.stderr, 2):>18}"
            f" {'[' + format_number(e.interval[0]) + ', ' + format_number(e.interval[1]) + ']':>20}"
            f" {d.percent:>+8.1f} {d.n_sigma:>+7.2f}  {_verdict(r.verdict)}")
    if q.differences:
        lines.append("  pairwise differences (Holm-adjusted p; significant at "
                     f"α = {q.differences[0].alpha:g}):")
        for x in q.differences:
            lines.append(
                f"    {x.first} - {x.second}: {format_number(x.difference)} ± "
                f"{format_number(x.stderr, 2)}, p = {x.p_value:.3g}, Holm p = "
                f"{x.p_adjusted:.3g} -> {'different' if x.significant else 'not different'}"
                f" ({x.test})")
    if q.ranking is not None:
        rank = q.ranking
        parts = [f"{i + 1}. {n} (P closest {p:.2f})" for i, (n, p) in
                 enumerate(zip(rank.names, rank.probability_closest, strict=True))]
        lines.append("  ranking by agreement with the reference: " + ", ".join(parts))
        lines += [f"  warning: {w}" for w in rank.warnings]
    return lines


def format_comparison(sc: StudyComparison) -> str:
    """The comparison as terminal text: one block per state point and quantity."""
    lines = [f"study: {sc.study}"]
    for q in sc.comparisons:
        lines += ["", *_one(q)]
    for f in sc.failures:
        lines.append(f"failed: {f}")
    for w in sc.warnings:
        lines.append(f"warning: {w}")
    lines += ["", "caution: agreement with one reference at a few state points does not make "
              "a potential right; the reference's own error, the thermostat and the "
              "electrostatics also bias these numbers."]
    return "\n".join(lines)


def comparison_records(sc: StudyComparison) -> dict[str, Any]:
    """The ``candidates`` and ``comparisons`` top-level keys of the JSON document."""
    cands = [{"state": q.state, "quantity": q.quantity, "group": q.group, **r.to_record()}
             for q in sc.comparisons for r in q.candidates]
    return {"candidates": cands, "comparisons": [q.to_record() for q in sc.comparisons],
            "failures": list(sc.failures)}


def forest_figure(sc: StudyComparison) -> Any:
    """Forest plot: each candidate's 95% interval against the reference's 95% band, one
    panel per state point and quantity."""
    from .figures import new_figure

    n = max(1, len(sc.comparisons))
    fig, axes = new_figure(n, 1, width=6.5, height=0.5 + 0.45 * max(
        (len(q.candidates) for q in sc.comparisons), default=2))
    for ax, q in zip(axes[:, 0], sc.comparisons, strict=False):
        ref = q.reference
        half = 1.959964 * ref.stderr
        ax.axvspan(ref.value - half, ref.value + half, color="0.85", label="reference 95%")
        ax.axvline(ref.value, color="0.4", lw=1)
        for i, r in enumerate(q.candidates):
            e = r.estimate
            ax.errorbar([e.value], [i], xerr=[[e.value - e.interval[0]],
                                              [e.interval[1] - e.value]],
                        fmt="o", color="C0", capsize=3)
        ax.set_yticks(range(len(q.candidates)), [r.candidate for r in q.candidates])
        ax.set_ylim(-0.7, len(q.candidates) - 0.3)
        ax.invert_yaxis()
        what = _NAMES.get(q.quantity, q.quantity) + (f" ({q.group})" if q.group else "")
        ax.set_title(f"{q.state}: {what}", fontsize=9)
        ax.set_xlabel(ref.unit, fontsize=8)
    return fig


def write_comparison_report(study: Any, sc: StudyComparison, settings: dict[str, Any],
                            out: str | Path, sources: Any = ()) -> Path:
    """The report of the report stage for the whole study (its pooled results, verdicts
    and summary figures), with the forest plot first and the rankings among the notes.
    Returns the path of the HTML document."""
    import hashlib
    from dataclasses import replace

    from .document import (
        Figure,
        ResultDocument,
        _with_figures,
        build_report,
        figure_png,
        write_report,
    )
    from .jsonout import build_document

    results = [r.estimate for q in sc.comparisons for r in q.candidates]
    doc = build_document("compare", inputs=sources, settings=settings, results=results,
                         warnings=sc.warnings, extra=comparison_records(sc))
    sha = hashlib.sha256(Path(study.path).read_bytes()).hexdigest()
    rep = build_report([ResultDocument(str(study.path), sha, doc)],
                       title=f"Comparison: {study.name}")
    forest = Figure("forest", "Each candidate's 95% interval (points) against the "
                    "reference's 95% band (grey), per state point and quantity.",
                    figure_png(forest_figure(sc)))
    lines = []
    for q in sc.comparisons:
        if q.ranking is not None:
            lines.append(f"{q.state} {q.quantity}: ranking " + ", ".join(
                f"{n} (P closest {p:.2f})" for n, p in zip(
                    q.ranking.names, q.ranking.probability_closest, strict=True)))
        for x in q.differences:
            lines.append(f"{q.state} {q.quantity}: {x.first} - {x.second} = "
                         f"{format_number(x.difference)} ± {format_number(x.stderr, 2)}, "
                         f"Holm p = {x.p_adjusted:.3g} "
                         f"({'different' if x.significant else 'not different'})")
    rep = replace(_with_figures(rep, (forest, *rep.figures)),
                  notes=(*rep.notes, *lines, *sc.failures))
    return write_report(rep, out)
