"""Run-length verdicts on data: re-analyse shorter parts of the runs, then judge.

:mod:`transport.convergence` judges results; this module (the analysis layer) makes the
results it needs. After an analysis of all the data, the same analysis runs again, with the
same settings, on the disjoint quarters and halves of every replica's analysed time (after the
transient the full analysis dropped, so that every length sees the same kind of data). Their
standard errors check the scaling law the projection assumes (see
:func:`transport.convergence.measure_scaling`); the four quarters and the two halves are
averaged per length, which halves (quarters) and divides by sqrt(2) (halves) the noise of a
single prefix. A part too short to analyse is left out.

Cost: the parts add about twice the analysis time of the full data.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace
from typing import Any

from .convergence import Verdict, run_verdict
from .errors import InputError
from .estimate import Estimate
from .series import PositionSeries, StressSeries

__all__ = ["PART_FRACTIONS", "diffusion_verdicts", "engine_speed", "viscosity_verdicts"]

#: Fractions of the analysed time re-analysed to check how the error falls with run length
#: (a factor 4 in length: enough lever arm for an exponent, each part still holding the
#: estimator's usual number of pieces in most runs).
PART_FRACTIONS: tuple[float, ...] = (0.25, 0.5)


def _count(fraction: float) -> int:
    """Disjoint parts of length `fraction` that fit in the run."""
    return max(1, int(math.floor(1.0 / fraction + 1e-9)))


def _same(a: Estimate, b: Estimate) -> bool:
    return a.quantity == b.quantity and a.method == b.method and a.group == b.group


def _part_estimates(full: Sequence[Estimate],
                    part_results: Sequence[tuple[float, Sequence[Estimate]]]
                    ) -> list[list[tuple[float, Estimate]]]:
    out: list[list[tuple[float, Estimate]]] = []
    for e in full:
        out.append([(f, p) for f, ests in part_results for p in ests if _same(e, p)])
    return out


def _stress_part(s: StressSeries, start: int, n: int) -> StressSeries:
    import numpy as np

    vol = s.volume if np.ndim(s.volume) == 0 else s.volume[start:start + n]
    return replace(s, pressure=s.pressure[:, start:start + n], volume=vol,
                   t0=s.t0 + start * s.dt)


def viscosity_verdicts(
    series: StressSeries | Sequence[StressSeries],
    estimates: Sequence[Estimate],
    *,
    target: float,
    cutoff: float | str = "auto",
    fit_window: tuple[float, float] | str = "auto",
    max_lag: float | None = None,
    components: str = "all",
    fractions: Sequence[float] = PART_FRACTIONS,
) -> tuple[Verdict, ...]:
    """Verdicts for viscosity estimates, with the scaling checked on shorter parts of the runs.

    Parameters
    ----------
    series : StressSeries or sequence of StressSeries
        The data the estimates were made from (replicas).
    estimates : sequence of Estimate
        Green–Kubo and/or Einstein estimates of :func:`transport.viscosity.analyse_viscosity`
        on `series` (their diagnostics say which transient was dropped).
    target : float
        Target relative standard error (0.05 for 5%).
    cutoff, fit_window, max_lag, components
        The settings the estimates were made with (internal units), reused on the parts.
    fractions : sequence of float
        Lengths of the parts, as fractions of every replica's analysed time.

    Returns
    -------
    tuple of Verdict
        One per estimate, in order.
    """
    from .viscosity import analyse_viscosity

    slist = [series] if isinstance(series, StressSeries) else list(series)
    if not estimates:
        return ()
    u = slist[0].units
    ts = u.time_scale
    skipped = estimates[0].diagnostics.get("skipped") or [0.0] * len(slist)
    starts = [min(int(round(float(sk) / ts / s.dt)), s.n) for sk, s in zip(skipped, slist,
                                                                           strict=False)]
    lengths = [s.n - st for s, st in zip(slist, starts, strict=True)]
    run_times = [n * s.dt * ts for n, s in zip(lengths, slist, strict=True)]
    methods = {e.method for e in estimates}
    method = "both" if methods >= {"green_kubo", "einstein"} else (
        "einstein" if methods == {"einstein"} else "green-kubo")
    results: list[tuple[float, Sequence[Estimate]]] = []
    for f in fractions:
        for j in range(_count(f)):
            part = [_stress_part(s, st + j * int(n * f), max(int(n * f), 1))
                    for s, st, n in zip(slist, starts, lengths, strict=True)]
            try:
                res = analyse_viscosity(
                    part, method=method, cutoff=cutoff,  # type: ignore[arg-type]
                    fit_window=fit_window, max_lag=max_lag,  # type: ignore[arg-type]
                    skip=None, components=components)  # type: ignore[arg-type]
            except InputError:  # too short to analyse (RunTooShortError is one): left out
                continue
            results.append((f, res.estimates))
    speed = engine_speed(slist)
    return tuple(
        run_verdict(e, target=target, run_times=run_times, parts=pre,
                    seconds_per_time=speed)
        for e, pre in zip(estimates, _part_estimates(estimates, results), strict=True))


def engine_speed(series: Sequence[StressSeries] | Sequence[PositionSeries]) -> float | None:
    """Wall-clock seconds per reported time unit (ps, or tau) the engine needed, from the
    run times its logs report (:attr:`transport.series.Source.wall_seconds_per_time`),
    weighted by each replica's length; None when any input does not say (trajectories)."""
    speeds, weights = [], []
    for s in series:
        srcs = (s.source,) if isinstance(s, StressSeries) else s.sources
        w = [src.wall_seconds_per_time for src in srcs]
        if not w or any(x is None or not x > 0 for x in w):
            return None
        speeds.append(sum(w) / len(w))  # type: ignore[arg-type]
        weights.append(s.n if isinstance(s, StressSeries) else s.n_frames)
    if not speeds:
        return None
    ts = series[0].units.time_scale
    # per internal unit (s, or tau) -> per reported unit: divide by the time scale
    return sum(a * b for a, b in zip(speeds, weights, strict=True)) / sum(weights) / ts


def _positions_part(s: PositionSeries, start: int, n: int) -> PositionSeries:
    """Frames start..start+n of `s` (the drift kept relative to its own first frame)."""
    def cut(a: Any) -> Any:
        return None if a is None else a[start:start + n]

    drift = None if s.drift is None else s.drift[start:start + n] - s.drift[start]
    return replace(s, positions=s.positions[start:start + n], box=cut(s.box),
                   velocities=cut(s.velocities), drift=drift,
                   drift_velocity=cut(s.drift_velocity), box_angles=cut(s.box_angles),
                   t0=s.t0 + start * s.dt)


def diffusion_verdicts(
    series: PositionSeries | Sequence[PositionSeries],
    estimates: Sequence[Estimate],
    *,
    target: float,
    fit_window: tuple[float, float] | str = "auto",
    remove_drift: bool = True,
    fractions: Sequence[float] = PART_FRACTIONS,
) -> tuple[Verdict, ...]:
    """Verdicts for self-diffusion estimates, with the scaling checked on shorter parts.

    Parameters
    ----------
    series : PositionSeries or sequence of PositionSeries
        The trajectories the estimates were made from (replicas).
    estimates : sequence of Estimate
        MSD (and VACF) estimates of :func:`transport.diffusion.analyse_diffusion`.
    target : float
        Target relative standard error.
    fit_window, remove_drift
        The settings the estimates were made with (internal units), reused on the parts.
    fractions : sequence of float
        Lengths of the parts, as fractions of every replica's frames.

    Returns
    -------
    tuple of Verdict
        One per estimate, in order.
    """
    from .diffusion import analyse_diffusion

    slist = [series] if isinstance(series, PositionSeries) else list(series)
    if not estimates:
        return ()
    ts = slist[0].units.time_scale
    run_times = [(s.n_frames - 1) * s.dt * ts for s in slist]
    want_vacf = any(e.method == "vacf" for e in estimates)
    results: list[tuple[float, Sequence[Estimate]]] = []
    for f in fractions:
        for j in range(_count(f)):
            part = [_positions_part(s, j * int(s.n_frames * f), max(int(s.n_frames * f), 2))
                    for s in slist]
            try:
                res = analyse_diffusion(part, fit_window=fit_window,  # type: ignore[arg-type]
                                        remove_drift=remove_drift,
                                        vacf="auto" if want_vacf else "no")
            except InputError:
                continue
            results.append((f, res.estimates))
    n_all = sum(s.positions.shape[1] for s in slist) / len(slist)
    out = []
    for e, pre in zip(estimates, _part_estimates(estimates, results), strict=True):
        vol = e.diagnostics.get("box_volume")
        spacing = (vol / n_all) ** (1.0 / 3.0) if isinstance(vol, (int, float)) and \
            vol > 0 and n_all > 0 else None
        out.append(run_verdict(e, target=target, run_times=run_times, parts=pre,
                               particle_spacing=spacing if spacing and math.isfinite(spacing)
                               else None))
    return tuple(out)
