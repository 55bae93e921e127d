"""Figures that show how a viscosity estimate was obtained."""

from __future__ import annotations

import math

import numpy as np

from ..estimate import Estimate
from .figures import new_figure

__all__ = ["viscosity_figure"]


def viscosity_figure(green_kubo: Estimate | None, einstein: Estimate | None = None):
    """Running integral with its band and the cutoff, normalised ACF, sigma(t) and its fit,
    and (if given) the Einstein mean-squared integrated stress with its fit window.

    Returns a matplotlib Figure (not saved).
    """
    panels = (3 if green_kubo is not None else 0) + (1 if einstein is not None else 0)
    fig, axes = new_figure(max(panels, 1))
    ax = iter(axes[:, 0])
    if green_kubo is not None:
        e = green_kubo
        c = e.curves
        t = np.asarray(c["time"])
        n = float(e.n_independent or 1)
        mean = np.asarray(c["running_integral"])
        band = np.asarray(c["running_integral_std"]) / math.sqrt(n)
        a = next(ax)
        a.plot(t, mean, color="C0", lw=1.2, label="mean running integral")
        a.fill_between(t, mean - band, mean + band, color="C0", alpha=0.25,
                       label="± standard error of the mean")
        if "fit" in c:
            a.plot(t, c["fit"], color="C3", lw=1.0, ls="--", label="double-exponential fit")
        if e.window is not None:
            a.axvline(e.window[1], color="k", lw=0.8, ls=":", label="cutoff")
        a.axhspan(e.interval[0], e.interval[1], color="C2", alpha=0.2, label="95% interval")
        a.axhline(e.value, color="C2", lw=1.0)
        a.set_xlabel(f"time ({e.window_unit})")
        a.set_ylabel(f"viscosity ({e.unit})")
        a.set_title(f"Green–Kubo: {e.value:.4g} ± {e.stderr:.2g} {e.unit}")
        a.legend(fontsize=7, loc="lower right")
        a = next(ax)
        a.semilogx(t[1:], np.asarray(c["acf_normalised"])[1:], color="C1", lw=1.0)
        a.axhline(0.0, color="k", lw=0.5)
        tdec = e.diagnostics.get("decorrelation_time")
        if tdec:
            a.axvline(float(tdec), color="k", lw=0.8, ls=":", label="decorrelation time")
            a.legend(fontsize=7)
        a.set_xlabel(f"lag ({e.window_unit})")
        a.set_ylabel("normalised stress ACF")
        a = next(ax)
        if "sigma" in c:
            a.loglog(t[1:], np.asarray(c["sigma"])[1:], color="C0", lw=1.0,
                     label="spread between pieces σ(t)")
            a.loglog(t[1:], np.asarray(c["sigma_fit"])[1:], color="C3", ls="--", lw=1.0,
                     label="fit A t^b")
            frac = float(e.diagnostics.get("sigma_fraction", 0.4))
            a.loglog(t[1:], frac * np.abs(mean[1:]), color="C2", lw=1.0,
                     label=f"{frac:g} × mean")
            if e.window is not None:
                a.axvline(e.window[1], color="k", lw=0.8, ls=":")
            a.legend(fontsize=7)
        a.set_xlabel(f"time ({e.window_unit})")
        a.set_ylabel(f"σ ({e.unit})")
    if einstein is not None:
        e = einstein
        c = e.curves
        t = np.asarray(c["time"])
        y = np.asarray(c["helfand_msd"])
        a = next(ax)
        a.plot(t, y, color="C0", lw=1.2, label="V/(2kT) ⟨ΔG²⟩")
        if e.window is not None:
            a.axvspan(e.window[0], e.window[1], color="C2", alpha=0.15, label="fit window")
            k = (t >= e.window[0]) & (t <= e.window[1])
            if k.any():
                t0 = t[k]
                b = float(np.mean(y[k]) - e.value * np.mean(t0))
                a.plot(t0, e.value * t0 + b, color="C3", ls="--", lw=1.0,
                       label=f"slope {e.value:.4g} {e.unit}")
        a.set_xlabel(f"time ({e.window_unit})")
        a.set_ylabel(f"({e.unit}) × time")
        a.set_title("Einstein (Helfand)")
        a.legend(fontsize=7)
    return fig
