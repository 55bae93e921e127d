"""Figures that show how a self-diffusion estimate was obtained."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..estimate import Estimate
from .figures import new_figure

__all__ = ["diffusion_figure"]


def _positive(t: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    keep = (t > 0) & (y > 0) & np.isfinite(y)
    return t[keep], y[keep]


def diffusion_figure(msd: Sequence[Estimate], vacf: Sequence[Estimate] = ()):
    """MSD diagnostics per species, and the VACF when present.

    Panels: (1) the MSD on log-log axes with the local slope ``d log MSD / d log t`` on a
    second axis and the chosen fit window shaded; (2) the MSD
    on linear axes with the fit line and its 95% band over the window; (3) when VACF
    estimates are given, the normalised VACF and the running integral with the cutoff.

    Parameters
    ----------
    msd : sequence of Estimate
        ``msd_wls`` estimates (one per species) with their curves.
    vacf : sequence of Estimate
        ``vacf`` estimates, possibly empty.

    Returns
    -------
    matplotlib.figure.Figure
        Not saved.
    """
    panels = 2 + (2 if vacf else 0)
    fig, axes = new_figure(panels, height=2.8)
    ax = iter(axes[:, 0])
    a_log = next(ax)
    a_slope = a_log.twinx()
    a_lin = next(ax)
    for i, e in enumerate(msd):
        c = e.curves
        col = f"C{i % 10}"
        t = np.asarray(c["time"], dtype=float)
        y = np.asarray(c["msd"], dtype=float)
        tp, yp = _positive(t, y)
        a_log.loglog(tp, yp, color=col, lw=1.2, label=f"{e.group}: MSD")
        if "msd_sd" in c:
            sd_all = np.asarray(c["msd_sd"], dtype=float)
            keep = (t > 0) & (y > 0) & np.isfinite(y)
            lo_b = np.clip(y[keep] - sd_all[keep], yp * 1e-3, None)
            a_log.fill_between(tp, lo_b, y[keep] + sd_all[keep], color=col, alpha=0.15,
                               lw=0)
        if "local_slope" in c and len(c["local_slope"]):
            a_slope.semilogx(np.asarray(c["slope_time"]), np.asarray(c["local_slope"]),
                             color=col, lw=0.8, ls=":")
        if e.window is not None:
            a_log.axvspan(e.window[0], e.window[1], color=col, alpha=0.08,
                          label=f"{e.group}: fit window {e.window[0]:.3g}–{e.window[1]:.3g} "
                                f"{e.window_unit}")
        # linear panel: the MSD up to 1.5x the window end, the fit and its band
        hi = 1.5 * e.window[1] if e.window is not None else t[-1]
        k = t <= hi
        a_lin.plot(t[k], y[k], color=col, lw=1.0, label=f"{e.group}: MSD")
        if "msd_sd" in c:
            sd = np.asarray(c["msd_sd"])[k]
            a_lin.fill_between(t[k], y[k] - sd, y[k] + sd, color=col, alpha=0.12, lw=0)
        if "fit" in c and e.window is not None:
            w = (t >= e.window[0]) & (t <= e.window[1])
            f = np.asarray(c["fit"])
            band = 1.96 * np.asarray(c["fit_sd"])
            a_lin.plot(t[w], f[w], color="k", lw=0.9, ls="--")
            a_lin.fill_between(t[w], f[w] - band[w], f[w] + band[w], color="k", alpha=0.15,
                               lw=0)
        if e.window is not None:
            for edge in e.window:
                a_lin.axvline(edge, color=col, lw=0.7, ls=":")
    a_slope.axhline(1.0, color="0.5", lw=0.6)
    a_slope.set_ylim(0.0, 2.2)
    a_slope.set_ylabel("d log MSD / d log t (dotted)")
    if msd:
        e0 = msd[0]
        lu = e0.diagnostics.get("msd_unit", "")
        a_log.set_xlabel(f"lag ({e0.window_unit})")
        a_log.set_ylabel(f"MSD ({lu})")
        a_log.set_title("MSD, local slope and fit window (shaded)")
        a_log.legend(fontsize=7, loc="upper left")
        a_lin.set_xlabel(f"lag ({e0.window_unit})")
        a_lin.set_ylabel(f"MSD ({lu})")
        a_lin.set_title("weighted fit (dashed) with 95% band; MSD ± model sd",
                        fontsize=9)
        a_lin.legend(fontsize=7, loc="upper left")
        text = "\n".join(f"{e.group}: D = {e.value:.4g} ± {e.stderr:.2g} {e.unit}"
                         for e in msd)
        a_lin.text(0.98, 0.04, text, transform=a_lin.transAxes, ha="right", va="bottom",
                   fontsize=7)
    if vacf:
        a_v = next(ax)
        a_i = next(ax)
        for i, e in enumerate(vacf):
            c = e.curves
            col = f"C{i % 10}"
            t = np.asarray(c["time"], dtype=float)
            rho = np.asarray(c["vacf"], dtype=float)
            a_v.plot(t, rho, color=col, lw=1.0, label=e.group)
            d = e.diagnostics
            frames = d.get("frames")
            if frames and d.get("n_particles") and t.size > 2:
                from .viscosity_plots import _bartlett_band

                n_samples = float(d["n_particles"]) * float(np.sum(frames))
                bb = _bartlett_band(t, rho, n_samples)
                a_v.fill_between(t, -bb, bb, color=col, alpha=0.15, lw=0,
                                 label=f"{e.group}: ≈95% band about zero (Bartlett)")
            run = np.asarray(c["running_integral"])
            sd = 1.96 * np.asarray(c["running_integral_sd"])
            a_i.plot(t, run, color=col, lw=1.0, label=f"{e.group}: running integral")
            a_i.fill_between(t, run - sd, run + sd, color=col, alpha=0.2, lw=0)
            if e.window is not None:
                a_v.axvline(e.window[1], color=col, lw=0.8, ls=":")
                a_i.axvline(e.window[1], color=col, lw=0.8, ls=":")
        for e in msd:
            a_i.axhspan(e.interval[0], e.interval[1], color="0.5", alpha=0.15)
        a_v.axhline(0.0, color="k", lw=0.5)
        a_v.set_xlabel(f"lag ({vacf[0].window_unit})")
        a_v.set_ylabel("VACF / VACF(0) (dimensionless)")
        a_v.set_title("velocity autocorrelation (cutoff dotted)")
        a_v.legend(fontsize=7)
        a_i.set_xlabel(f"lag ({vacf[0].window_unit})")
        a_i.set_ylabel(f"D ({vacf[0].unit})")
        a_i.set_title("Green–Kubo running integral (grey: MSD 95% intervals)", fontsize=9)
        a_i.legend(fontsize=7)
    return fig
