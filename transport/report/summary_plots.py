"""The report's figures: summaries of the results and the diagnostic figures redrawn from
the thinned curves in the JSON documents (nothing is recomputed from raw data).

Every panel has units on its axes, the interval each value rests on (95% error bars or
bands) and, for diagnostic figures, the cutoff or window (see
:mod:`transport.report.viscosity_plots` and :mod:`transport.report.diffusion_plots`).
"""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np

from .document import Figure, Report, ResultDocument, _estimates, figure_png
from .figures import new_figure

__all__ = ["diffusion_summary_figure", "extrapolation_figure", "report_figures",
           "viscosity_summary_figure"]


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", text).strip("_") or "figure"


def _errorbar(ax, x: float, e, color: str, marker: str, label: str | None) -> None:
    lo, hi = e.interval
    yerr = np.array([[max(e.value - lo, 0.0)], [max(hi - e.value, 0.0)]])
    ax.errorbar([x], [e.value], yerr=yerr, fmt=marker, color=color, capsize=3, ms=5,
                label=label)


def diffusion_summary_figure(report: Report):
    """D per group and source: periodic box, corrected, and box-size extrapolated, with
    95% intervals."""
    rows = [r for r in (*report.diffusion, *report.extrapolations)
            if r.estimate.quantity == "self_diffusion"]
    fig, axes = new_figure(1, width=7.0, height=3.2)
    ax = axes[0, 0]
    keys: list[tuple] = []
    for r in rows:
        k = (r.estimate.group or "all", r.source if r.estimate.method != "box_size_extrapolation"
             else "extrapolated")
        if k not in keys:
            keys.append(k)
    styles = {None: ("C0", "o", "periodic box"), "yeh_hummer": ("C3", "s", "Yeh–Hummer"),
              "oseen_lattice_sum": ("C1", "s", "Oseen lattice sum"),
              "box_size_extrapolation": ("C2", "D", "box-size extrapolation")}
    seen: set = set()
    for r in rows:
        e = r.estimate
        if e.method not in ("msd_gls", "box_size_extrapolation"):
            continue
        k = (e.group or "all", r.source if e.method != "box_size_extrapolation"
             else "extrapolated")
        col, mk, lab = styles.get(e.corrected, ("C4", "^", str(e.corrected)))
        off = {None: -0.12}.get(e.corrected, 0.12)
        _errorbar(ax, keys.index(k) + off, e, col, mk, None if lab in seen else lab)
        seen.add(lab)
    ax.set_xticks(range(len(keys)), [f"{g}\n{s}" for g, s in keys], fontsize=7)
    ax.set_xlim(-0.5, max(len(keys), 1) - 0.5)
    unit = rows[0].estimate.unit if rows else ""
    ax.set_ylabel(f"D ({unit})")
    ax.set_title("self-diffusion with 95% intervals (MSD fit)")
    if seen:
        ax.legend(fontsize=7)
    return fig


def viscosity_summary_figure(report: Report):
    """Shear viscosity by method and source with 95% intervals."""
    rows = [r for r in (*report.viscosity, *report.extrapolations)
            if r.estimate.quantity == "shear_viscosity"]
    fig, axes = new_figure(1, width=7.0, height=3.2)
    ax = axes[0, 0]
    sources = list(dict.fromkeys(r.source for r in rows))
    methods = list(dict.fromkeys(r.estimate.method for r in rows))
    for r in rows:
        m = methods.index(r.estimate.method)
        off = (m - (len(methods) - 1) / 2) * 0.15
        lab = r.estimate.method.replace("_", " ")
        _errorbar(ax, sources.index(r.source) + off, r.estimate, f"C{m}", "o",
                  lab if sources.index(r.source) == 0 or r.source == sources[0] else None)
    ax.set_xticks(range(len(sources)), sources, fontsize=7)
    ax.set_xlim(-0.5, max(len(sources), 1) - 0.5)
    unit = rows[0].estimate.unit if rows else ""
    ax.set_ylabel(f"shear viscosity ({unit})")
    ax.set_title("shear viscosity by method with 95% intervals")
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        uniq = dict(zip(labels, handles, strict=True))
        ax.legend(uniq.values(), uniq.keys(), fontsize=7)
    return fig


def extrapolation_figure(estimate):
    """D against x = xi/(6 pi L) with the weighted line and its 95% band (box-size
    extrapolation)."""
    d = estimate.diagnostics
    x = np.asarray(d["x"], dtype=float)
    y = np.asarray(d["d_pbc"], dtype=float)
    s = np.asarray(d["d_pbc_stderr"], dtype=float)
    cov = np.asarray(d["covariance"], dtype=float)
    fig, axes = new_figure(1, width=6.0, height=3.2)
    ax = axes[0, 0]
    ax.errorbar(x, y, yerr=1.96 * s, fmt="o", color="C0", capsize=3,
                label="periodic-box D (95%)")
    xx = np.linspace(0.0, float(x.max()) * 1.1, 100)
    a = np.column_stack([np.ones_like(xx), xx])
    line = estimate.value + d["slope"] * xx
    band = 1.96 * np.sqrt(np.einsum("ni,ij,nj->n", a, cov, a))
    ax.plot(xx, line, color="C3", lw=1.0, label="weighted fit")
    ax.fill_between(xx, line - band, line + band, color="C3", alpha=0.2, lw=0,
                    label="95% band of the line")
    ax.set_xlabel(f"x = ξ/(6πL) ({d.get('x_unit', '')}); 0 is the infinite box")
    ax.set_ylabel(f"D ({estimate.unit})")
    ax.set_title(f"box-size extrapolation ({estimate.group or 'all'}): D_inf = "
                 f"{estimate.value:.4g} ± {estimate.stderr:.2g}")
    ax.legend(fontsize=7)
    return fig


def report_figures(report: Report, documents: Sequence[ResultDocument]) -> list[Figure]:
    """All figures of the report, rendered to PNG."""
    from .diffusion_plots import diffusion_figure
    from .plots import average_figure
    from .viscosity_plots import viscosity_figure

    out: list[Figure] = []
    if any(r.estimate.quantity == "self_diffusion" for r in report.diffusion):
        out.append(Figure("summary_diffusion", "Self-diffusion per group: periodic box, "
                          "finite-size corrected and box-size extrapolated, with 95% "
                          "intervals.", figure_png(diffusion_summary_figure(report))))
    if report.viscosity:
        out.append(Figure("summary_viscosity", "Shear viscosity by method and document, "
                          "with 95% intervals.", figure_png(viscosity_summary_figure(report))))
    for r in report.extrapolations:
        if r.estimate.quantity == "self_diffusion" and "covariance" in r.estimate.diagnostics:
            out.append(Figure(_slug(f"extrapolation_{r.estimate.group or 'all'}"),
                              f"Box-size extrapolation of D ({r.estimate.group or 'all'}).",
                              figure_png(extrapolation_figure(r.estimate))))
    for doc in documents:
        ests = _estimates(doc)
        with_curves = [e for e in ests if e.curves]
        gk = next((e for e in with_curves if e.quantity == "shear_viscosity"
                   and e.method == "green_kubo"), None)
        ein = next((e for e in with_curves if e.quantity == "shear_viscosity"
                    and e.method == "einstein"), None)
        if gk is not None or ein is not None:
            out.append(Figure(_slug(f"viscosity_{doc.label}"),
                              f"{doc.label}: how the viscosity was obtained (running "
                              "integral, stress autocorrelation, spread between pieces, "
                              "Helfand moment) with cutoffs, windows and error bands.",
                              figure_png(viscosity_figure(gk, ein))))
        msd = [e for e in with_curves if e.quantity == "self_diffusion"
               and e.method == "msd_gls" and "msd" in e.curves]
        vacf = [e for e in with_curves if e.quantity == "self_diffusion"
                and e.method == "vacf" and "vacf" in e.curves]
        if msd:
            out.append(Figure(_slug(f"diffusion_{doc.label}"),
                              f"{doc.label}: MSD with its local slope and fit window, the "
                              "GLS fit with its 95% band" + (", and the VACF cross-check"
                                                             if vacf else "") + ".",
                              figure_png(diffusion_figure(msd, vacf))))
        avg = [e for e in with_curves if "blocking_block_time" in e.curves
               and "acf_lag" in e.curves]
        if avg:
            out.append(Figure(_slug(f"averages_{doc.label}"),
                              f"{doc.label}: blocking curves and autocorrelations of the "
                              "averaged columns.",
                              figure_png(average_figure(avg, [e.quantity for e in avg]))))
    return out
