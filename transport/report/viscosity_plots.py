"""Figures that show how a viscosity estimate was obtained.

Every panel carries its units, the cutoff or fit window the estimate rests on, and an error
band: the standard error of the mean running integral (Green–Kubo), an approximate 95%
band of the normalised autocorrelation (Bartlett's formula), the spread between pieces
(which is the error itself), and the standard error of the mean Helfand moment with the
fitted slope (Einstein).

References
----------
M. S. Bartlett, J. R. Stat. Soc. Suppl. 8, 27 (1946) (variance of sample autocorrelations;
the band statsmodels' ``plot_acf`` draws is the same formula).
"""

from __future__ import annotations

import math

import numpy as np

from ..estimate import Estimate
from .figures import new_figure

__all__ = ["einstein_plot_scale", "viscosity_figure"]


def einstein_plot_scale(e: Estimate) -> float:
    """Factor that puts the Helfand moment ``helfand_msd`` in (viscosity unit) x (window
    unit), so that its slope against ``time`` is the estimate's value.

    The estimators store the moment in viscosity x internal time (seconds for SI input)
    while ``time`` is in ps: the two differ by a power of ten. The factor is the ratio of
    the estimate's value to the slope of the stored curve over the fit window, rounded to
    that power of ten; 1 when the ratio is not a power of ten (the curve is then drawn as
    stored).
    """
    c = e.curves
    t = np.asarray(c["time"], dtype=float)
    y = np.asarray(c["helfand_msd"], dtype=float)
    if e.window is None or not e.value:
        return 1.0
    k = (t >= e.window[0]) & (t <= e.window[1]) & np.isfinite(y)
    if np.count_nonzero(k) < 2:
        return 1.0
    slope = float(np.polyfit(t[k], y[k], 1)[0])
    if not slope or not np.isfinite(slope):
        return 1.0
    ratio = e.value / slope
    if ratio <= 0:
        return 1.0
    p = round(math.log10(ratio))
    return float(10.0**p) if abs(math.log10(ratio) - p) < 0.02 else 1.0


def _bartlett_band(t: np.ndarray, rho: np.ndarray, n_samples: float) -> np.ndarray:
    """Approximate 1.96-sigma band of a normalised autocorrelation at each lag:
    var(rho_k) = (1 + 2 sum_{0<j<k} rho_j^2) / N (Bartlett 1946), the sum taken as an
    integral over the lag grid (which may be thinned)."""
    dt = float(t[1] - t[0]) if t.size > 1 else 1.0
    r2 = np.nan_to_num(rho * rho)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (r2[1:] + r2[:-1]) * np.diff(t))]) / dt
    cum = np.maximum(cum - 0.5 * r2[0], 0.0)  # the j = 0 term is the 1
    return 1.96 * np.sqrt((1.0 + 2.0 * cum) / max(n_samples, 1.0))


def viscosity_figure(green_kubo: Estimate | None, einstein: Estimate | None = None):
    """Running integral with its band and the cutoff, normalised ACF, sigma(t) and its fit,
    and (if given) the Einstein (Helfand) moment with its band, fit window and slope.

    Returns a matplotlib Figure (not saved).
    """
    panels = (3 if green_kubo is not None else 0) + (1 if einstein is not None else 0)
    fig, axes = new_figure(max(panels, 1))
    ax = iter(axes[:, 0])
    if green_kubo is not None:
        e = green_kubo
        c = e.curves
        tu = e.window_unit
        t = np.asarray(c["time"], dtype=float)
        n = float(e.n_independent or 1)
        mean = np.asarray(c["running_integral"], dtype=float)
        band = np.asarray(c["running_integral_std"], dtype=float) / math.sqrt(n)
        a = next(ax)
        a.plot(t, mean, color="C0", lw=1.2, label="mean running integral")
        a.fill_between(t, mean - band, mean + band, color="C0", alpha=0.25,
                       label="± standard error of the mean")
        if "fit" in c:
            a.plot(t, np.asarray(c["fit"], dtype=float), color="C3", lw=1.0, ls="--",
                   label="double-exponential fit")
        if e.window is not None:
            a.axvline(e.window[1], color="k", lw=0.8, ls=":",
                      label=f"cutoff {e.window[1]:.3g} {tu}")
        a.axhspan(e.interval[0], e.interval[1], color="C2", alpha=0.2, label="95% interval")
        a.axhline(e.value, color="C2", lw=1.0)
        a.set_xlabel(f"time ({tu})")
        a.set_ylabel(f"running integral ({e.unit})")
        a.set_title(f"Green–Kubo: {e.value:.4g} ± {e.stderr:.2g} {e.unit}")
        a.legend(fontsize=7, loc="lower right")

        a = next(ax)
        rho = np.asarray(c["acf_normalised"], dtype=float)
        a.semilogx(t[1:], rho[1:], color="C1", lw=1.0, label="mean over pieces")
        d = e.diagnostics
        seg, pieces = d.get("segment_length"), d.get("pieces")
        if seg and pieces and t.size > 2:
            n_samples = float(pieces) * float(seg) / float(t[1] - t[0])
            bb = _bartlett_band(t, rho, n_samples)
            a.fill_between(t[1:], -bb[1:], bb[1:], color="0.5", alpha=0.25, lw=0,
                           label="≈95% band about zero (Bartlett)")
        a.axhline(0.0, color="k", lw=0.5)
        tdec = d.get("decorrelation_time")
        if tdec:
            a.axvline(float(tdec), color="C4", lw=0.8, ls="-.",
                      label=f"decorrelation time {float(tdec):.3g} {tu}")
        if e.window is not None:
            a.axvline(e.window[1], color="k", lw=0.8, ls=":", label="cutoff")
        a.legend(fontsize=7)
        a.set_xlabel(f"lag ({tu})")
        a.set_ylabel("stress ACF / ACF(0) (dimensionless)")

        a = next(ax)
        if "sigma" in c:
            a.loglog(t[1:], np.asarray(c["sigma"], dtype=float)[1:], color="C0", lw=1.0,
                     label="spread between pieces σ(t) (the error itself)")
            if "sigma_fit" in c:
                a.loglog(t[1:], np.asarray(c["sigma_fit"], dtype=float)[1:], color="C3",
                         ls="--", lw=1.0, label="fit A t^b")
            frac = float(d.get("sigma_fraction", 0.4))
            a.loglog(t[1:], frac * np.abs(mean[1:]), color="C2", lw=1.0,
                     label=f"{frac:g} × mean")
            if e.window is not None:
                a.axvline(e.window[1], color="k", lw=0.8, ls=":", label="cutoff")
            a.legend(fontsize=7)
        a.set_xlabel(f"time ({tu})")
        a.set_ylabel(f"σ ({e.unit})")
    if einstein is not None:
        e = einstein
        c = e.curves
        tu = e.window_unit
        t = np.asarray(c["time"], dtype=float)
        f = einstein_plot_scale(e)
        y = np.asarray(c["helfand_msd"], dtype=float) * f
        n = float(e.n_independent or 1)
        a = next(ax)
        a.plot(t, y, color="C0", lw=1.2, label="V/(2 k_B T) ⟨ΔG²⟩, mean over pieces")
        if "helfand_msd_std" in c:
            se = np.asarray(c["helfand_msd_std"], dtype=float) * f / math.sqrt(n)
            a.fill_between(t, y - se, y + se, color="C0", alpha=0.25, lw=0,
                           label="± standard error of the mean")
        if e.window is not None:
            a.axvspan(e.window[0], e.window[1], color="C2", alpha=0.15,
                      label=f"fit window {e.window[0]:.3g}–{e.window[1]:.3g} {tu}")
            k = (t >= e.window[0]) & (t <= e.window[1])
            if k.any():
                t0 = t[k]
                b = float(np.mean(y[k]) - e.value * np.mean(t0))
                a.plot(t0, e.value * t0 + b, color="C3", ls="--", lw=1.0,
                       label=f"slope {e.value:.4g} ± {e.stderr:.2g} {e.unit}")
        a.set_xlabel(f"time ({tu})")
        a.set_ylabel(f"Helfand moment ({e.unit} {tu})")
        a.set_title(f"Einstein (Helfand): {e.value:.4g} ± {e.stderr:.2g} {e.unit}")
        a.legend(fontsize=7, loc="upper left")
    return fig
