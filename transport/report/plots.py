"""Diagnostic plots of averages: the blocking curve and the autocorrelation function.

Reads the curves an :class:`~transport.Estimate` from
:func:`transport.stats.mean_with_error` carries; recomputes nothing. Figures use the Agg
backend (no display) through :func:`transport.report.figures.new_figure`; save them with
:func:`transport.report.figures.save_figure` (temporary file, then rename).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..estimate import Estimate
from .figures import new_figure

__all__ = ["average_figure"]


def average_figure(estimates: Sequence[Estimate], labels: Sequence[str]):
    """One row per estimate: blocking curve (left) and autocorrelation function (right).

    Parameters
    ----------
    estimates : sequence of Estimate
        Results of :func:`transport.stats.mean_with_error` (curves ``blocking_block_time``,
        ``blocking_stderr``, ``blocking_stderr_error``, ``acf_lag``, ``acf``).
    labels : sequence of str
        A title for each row (file and column).

    Returns
    -------
    matplotlib.figure.Figure
    """
    if len(estimates) != len(labels) or not estimates:
        raise ValueError("need one label per estimate, and at least one estimate")
    fig, axes = new_figure(len(estimates), 2, width=9.0, height=2.8)
    for (ax_b, ax_a), est, label in zip(axes, estimates, labels, strict=True):
        c, d = est.curves, est.diagnostics
        t_unit = d.get("time_unit", "")
        # blocking: stderr estimated at each block length, with its uncertainty
        ax_b.errorbar(c["blocking_block_time"], c["blocking_stderr"],
                      yerr=c["blocking_stderr_error"], fmt="o-", ms=3, lw=1, capsize=2,
                      label="block averaging")
        ax_b.axhline(est.stderr, color="C3", lw=1, ls="--",
                     label=f"reported stderr ({est.method.replace('_', ' ')})")
        if "blocking_stderr" in d and "blocking_block_size" in d:
            step_b = c["blocking_block_time"][0]  # block of one sample
            ax_b.plot(d["blocking_block_size"] * step_b, d["blocking_stderr"], "*", ms=10,
                      color="C1", label="plateau chosen")
        ax_b.set_xscale("log", base=2)
        ax_b.set_xlabel(f"block length ({t_unit})")
        ax_b.set_ylabel(f"stderr of mean ({est.unit})" if est.unit else "stderr of mean")
        ax_b.set_title(f"{label}: blocking", fontsize=9)
        ax_b.legend(fontsize=7)
        # normalised autocorrelation with the summation window
        ax_a.plot(c["acf_lag"], c["acf"], lw=1)
        ax_a.axhline(0.0, color="0.5", lw=0.5)
        step = c["acf_lag"][1] - c["acf_lag"][0] if c["acf_lag"].size > 1 else 1.0
        window = d.get("tau_window_samples")
        if window is not None:
            ax_a.axvline(window * step, color="C3", lw=1, ls="--",
                         label=f"window; tau_int = {d['tau_int']:.3g} {t_unit}")
            ax_a.legend(fontsize=7)
        ax_a.set_xlabel(f"lag ({t_unit})")
        ax_a.set_ylabel("autocorrelation")
        ax_a.set_title(f"{label}: autocorrelation", fontsize=9)
        ax_a.set_ylim(min(-0.2, float(np.min(c["acf"])) - 0.05), 1.05)
    return fig
