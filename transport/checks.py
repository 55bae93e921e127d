"""Checks that keep a doubtful input from becoming a plausible wrong number.

Pure functions on arrays, series and results: each returns warnings (one line each) or
raises :class:`~transport.errors.InputError` (or :class:`~transport.errors.RunTooShortError`)
with the rule, the value seen and the fix. The estimators call them through one-line hooks;
each rule's threshold and the reason for it are written beside it here (and in
DEVELOPERS.md).

References
----------
.. [1] E. J. Maginn, R. A. Messerly, D. J. Carlson, D. R. Roe and J. R. Elliott, "Best
   practices for computing transport properties 1. Self-diffusivity and viscosity from
   equilibrium molecular dynamics", LiveCoMS 1, 6324 (2019): the checks a careful
   practitioner makes (sampling interval, equilibration, run length, error bars).
.. [2] F. R. Hampel, "The influence curve and its role in robust estimation", J. Am. Stat.
   Assoc. 69, 383 (1974): the median absolute deviation as a robust scale.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from .errors import InputError, RunTooShortError

__all__ = [
    "MAX_TEMPERATURE_K",
    "MAX_TEMPERATURE_REDUCED",
    "MIN_FIT_POINTS",
    "OUTLIER_MAD",
    "PRESSURE_MISMATCH",
    "REPLICA_TEMPERATURE_RTOL",
    "REPLICA_VOLUME_RTOL",
    "STRESS_MIN_FIRST",
    "STRESS_WARN_FIRST",
    "TEMPERATURE_TOLERANCE",
    "check_diffusion_result",
    "check_replicas",
    "check_viscosity_result",
    "pressure_column_mismatch",
    "pressure_outlier",
    "stress_first_lag",
    "stress_sampling",
    "temperature_against_column",
    "temperature_plausible",
]

#: Normalised stress autocorrelation one sample after the origin below which Green–Kubo and
#: Einstein viscosities are refused. Measured on the LJ logs of tests/data (4 replicas,
#: pressure every 0.02 tau, thinned to every k-th row): rho(1) = 0.93, 0.77, 0.37, 0.15,
#: 0.053 for k = 1, 2, 5, 10, 25 gave Green–Kubo 3.196, 3.193, 3.255, 3.821, 6.766 (+- 0.09
#: to 0.2): +20% (6 standard errors) at rho(1) = 0.15 and +112% at 0.053, with Einstein
#: biased the same way (both integrate the sampled stress by the trapezoid rule), so the
#: two methods agree and the cross-check cannot see it. The n-hexane log (stress every
#: 4 fs, rho(1) = 0.80; Green–Kubo 0.231 +- 0.014 mPa s) thinned to 8, 20 and 100 fs:
#: rho(1) = 0.31, -0.25 (fast bond vibrations aliased), 0.005, Green–Kubo 0.238, 0.254,
#: 0.619. An exponential decay sampled with
#: rho(1) = r biases the trapezoid integral by (x/2) coth(x/2) - 1, x = -ln r: 9% at
#: r = 0.37, 30% at r = 0.14.
STRESS_MIN_FIRST = 0.2
#: Below this (and above :data:`STRESS_MIN_FIRST`) a warning: the bias is a few percent
#: (+2% measured at rho(1) = 0.37 on LJ, up to ~9% for a purely exponential decay).
STRESS_WARN_FIRST = 0.5
#: rho(1) aimed at by the fix's sampling interval (exponential model: bias 1%).
_STRESS_GOOD_FIRST = 0.7
#: At most this many samples (from the start of the pieces) enter the first-lag estimate:
#: its relative error is then ~1/sqrt(2^20 / tau_int), far below the thresholds' spacing.
_FIRST_LAG_SAMPLES = 1 << 20

#: Robust distance (in units of 1.4826 MAD, the standard deviation of a normal sample)
#: beyond which a pressure value is refused as damaged. A normal sample of 10^9 values
#: reaches ~6.1; pressure fluctuations of small systems are skewed but not heavy-tailed:
#: the largest distance in the LJ (4 x 50001 rows) and n-hexane (500001 rows) logs of
#: tests/data is 5.3 (4.3-5.3 per file), and 12.6 for the first row of a run still cooling
#: from 300 K (argon_real_tworuns.log: an initial transient, which --skip removes, so only
#: isolated spikes are refused). A damaged cell (1e12 atm) is ~1e9 away.
OUTLIER_MAD = 30.0
#: At most this many evenly spaced values per component set the median and the MAD.
_ROBUST_SAMPLES = 1 << 18


def _traceless() -> np.ndarray:
    m = np.eye(6)
    m[:3, :3] -= 1.0 / 3.0
    return m


def stress_first_lag(pieces: Sequence[Sequence[np.ndarray]], weights: np.ndarray,
                     offsets: Sequence[np.ndarray] | None = None) -> float:
    """Normalised autocorrelation of the weighted traceless stress one sample later.

    rho(1) = sum_c w_c sum_t y_c(t) y_c(t+1) / sum_c w_c sum_t y_c(t)^2, pooled over the
    pieces, with y the traceless components (offsets subtracted, mean not removed: the same
    correlation the Green–Kubo integral uses), each sum normalised by its number of pairs.

    Parameters
    ----------
    pieces : sequence of sequences of 6 arrays
        The raw pressure rows (xx, yy, zz, xy, xz, yz) of each independent piece.
    weights : array of 6 floats
        Weights of the traceless components (zero for components not used).
    offsets : sequence of arrays of 6 floats, optional
        Subtracted from the traceless components of each piece.

    Returns
    -------
    float
        rho(1), or nan when the stress does not fluctuate.
    """
    mix = _traceless()
    used = np.flatnonzero(np.asarray(weights) > 0)
    c0 = c1 = 0.0
    left = _FIRST_LAG_SAMPLES
    for i, rows in enumerate(pieces):
        if left <= 1:
            break
        n = min(rows[0].shape[0], left)
        left -= n
        if n < 2:
            continue
        for c in used:
            # one traceless component from the rows it uses (no stack of all six rows)
            y = sum(float(w) * np.asarray(rows[j][:n], dtype=np.float64)
                    for j, w in enumerate(mix[c]) if w != 0.0)
            if offsets is not None:
                y = y - offsets[i][c]
            c0 += weights[c] * float(y @ y) / n
            c1 += weights[c] * float(y[1:] @ y[:-1]) / (n - 1)
    return c1 / c0 if c0 > 0 else float("nan")


def stress_sampling(prep: Any, slist: Sequence[Any], weights: np.ndarray) -> tuple[str, ...]:
    """Refuse (or warn about) a pressure tensor sampled too coarsely for the stress integral.

    Both viscosity estimators integrate the sampled stress by the trapezoid rule, which
    overestimates the integral when the stress autocorrelation decays within a sample
    (see :data:`STRESS_MIN_FIRST` for the measured bias). The same rule guards the VACF
    (``transport.vacf.VACF_MIN_FIRST``).

    Parameters
    ----------
    prep : viscosity preparation
        With ``pieces`` (each with ``stress`` rows and ``offset``) and ``dt``.
    slist : sequence of StressSeries
        The series analysed (for the unit and the file named in the message).
    weights : array of 6 floats
        Weights of the traceless components.

    Returns
    -------
    tuple of str
        A warning when rho(1) < :data:`STRESS_WARN_FIRST`, else nothing.

    Raises
    ------
    InputError
        rho(1) < :data:`STRESS_MIN_FIRST`: the integral cannot be resolved.
    """
    pieces = getattr(prep, "pieces", ())
    if not pieces:
        return ()
    r1 = stress_first_lag([pc.stress for pc in pieces], weights,
                          [pc.offset for pc in pieces])
    if not math.isfinite(r1) or r1 >= STRESS_WARN_FIRST:
        return ()
    u = slist[0].units
    dt = prep.dt * u.time_scale
    what = (f"the stress autocorrelation falls to {r1:.2g} of its initial value one sample "
            f"later ({dt:.3g} {u.time_unit} between samples)")
    if r1 > 0:
        # exponential model: rho(1) = exp(-dt/tau) -> the interval giving rho = 0.7
        good = dt * math.log(_STRESS_GOOD_FIRST) / math.log(r1)
        how = f"at least every {good:.2g} {u.time_unit}"
    else:
        how = f"far more often than every {dt:.3g} {u.time_unit} (the decay is not resolved)"
    if r1 < STRESS_MIN_FIRST:
        raise InputError(
            f"pressure tensor sampled too coarsely for a viscosity: {what}, so the "
            "integral of the stress is overestimated (x1.2 to x2 measured)",
            path=slist[-1].source.path or None,
            expected=f"a normalised stress autocorrelation of at least {STRESS_WARN_FIRST:g} "
                     "at the first sample",
            fix=f"write the pressure tensor {how}",
        )
    return (f"{what}: the pressure tensor is sampled coarsely and the viscosity may be a few "
            f"percent too large; write it {how}",)


def check_viscosity_result(analysis: Any, slist: Sequence[Any]) -> Any:
    """Refuse viscosity estimates whose 95% interval includes unphysical values.

    A shear viscosity is positive. An estimate whose value or 95% interval reaches zero or
    below says only that the run holds too little information, however it is printed: it
    is raised as :class:`~transport.errors.RunTooShortError` carrying the estimate as
    ``partial`` and the run length at which the interval would be about +-50% of the
    value (the error bar falls as 1/sqrt(run length) once the pieces are independent).

    Also makes printed what the user must see: a Green–Kubo cutoff at the maximum lag (the
    time-decomposition threshold was never reached, so the plateau is not located inside
    the computed lags), and an Einstein fit window that ends at the maximum lag, each
    become a warning.

    Parameters
    ----------
    analysis : ViscosityAnalysis
        The estimates made.
    slist : sequence of StressSeries
        The series analysed (their total duration is the run length).

    Returns
    -------
    ViscosityAnalysis
        `analysis` with those warnings added, when every interval lies above zero.
    """
    analysis = _window_warnings(analysis)
    for est in analysis.estimates:
        lo = est.interval[0]
        if lo > 0 and est.value > 0:
            continue
        u = slist[0].units
        have = sum(s.duration for s in slist) * u.time_scale
        name = est.method.replace("_", "-")
        if est.value > 0 and est.stderr > 0:
            q = (est.interval[1] - est.value) / est.stderr  # the interval's own quantile
            need = have * (2.0 * q * est.stderr / est.value) ** 2
            extra: float | None = max(need - have, 0.0)
            fix = None
        else:
            need = extra = None
            fix = ("run much longer or add replicas (the estimate is not positive, so no "
                   "projection can be made)")
        raise RunTooShortError(
            f"{name} viscosity {est.value:.3g} +- {est.stderr:.2g} {est.unit}: its 95% "
            f"interval [{lo:.3g}, {est.interval[1]:.3g}] includes zero or negative "
            f"viscosities, so the run ({have:.3g} {u.time_unit}) is too short for this "
            "estimate" + ("" if extra is None else " (the extension is projected from this "
                          "uncertain estimate: a rough guide)"),
            partial=est, needed_time=need, extra_time=extra, time_unit=u.time_unit,
            path=slist[-1].source.path or None, fix=fix,
        )
    return analysis


def _window_warnings(analysis: Any) -> Any:
    """Warnings for a Green–Kubo cutoff or an Einstein window at the maximum lag."""
    from dataclasses import replace

    out = {}
    for field in ("green_kubo", "einstein"):
        est = getattr(analysis, field, None)
        if est is None or est.window is None:
            continue
        d = est.diagnostics
        top = d.get("max_lag")
        if top is None or not est.window[1] >= top * (1 - 1e-9):
            continue
        unit = est.window_unit
        if field == "green_kubo":
            text = (f"the Green–Kubo cutoff is the maximum lag ({top:.3g} {unit}): the "
                    "replica spread never reached the threshold, so the plateau is not "
                    "located within the computed lags; check the running integral, or give "
                    "a longer --max-lag")
        else:
            text = (f"the Einstein fit window ends at the maximum lag ({top:.3g} {unit}): "
                    "the linear regime may continue beyond it; give a longer --max-lag")
        if text not in est.warnings:
            out[field] = est.with_warnings(text)
    return replace(analysis, **out) if out else analysis


def pressure_outlier(pressure: np.ndarray) -> tuple[int, int, float, bool] | None:
    """The value of a pressure tensor farthest from its component's median, if absurd.

    For each component the median and the median absolute deviation (MAD) of up to
    2^18 evenly spaced samples give a robust centre and scale (1.4826 MAD is the standard
    deviation of a normal sample, [2]_); a value more than :data:`OUTLIER_MAD` such
    standard deviations from the median cannot be a fluctuation.

    Parameters
    ----------
    pressure : array (6, n)
        The pressure tensor (any unit).

    Returns
    -------
    (component, row, distance, isolated) or None
        The worst value beyond the threshold (distance in robust standard deviations) and
        whether it is an isolated spike (a row after the first whose neighbours are within
        the threshold: a damaged cell, not an initial transient), or None when every value
        is within the threshold. Components that do not vary are skipped.
    """
    p = np.asarray(pressure)
    n = p.shape[1]
    step = max(1, n // _ROBUST_SAMPLES)
    worst: tuple[int, int, float, bool] | None = None
    for c in range(p.shape[0]):
        sample = np.asarray(p[c, ::step], dtype=np.float64)
        med = float(np.median(sample))
        scale = 1.4826 * float(np.median(np.abs(sample - med)))
        if not scale > 0:
            continue
        lo, hi = float(p[c].min()), float(p[c].max())
        far = max(hi - med, med - lo) / scale
        if far > OUTLIER_MAD and (worst is None or far > worst[2]):
            row = int(np.argmax(p[c])) if hi - med >= med - lo else int(np.argmin(p[c]))
            near = p[c, max(row - 1, 0): row + 2]
            isolated = row > 0 and int(np.sum(np.abs(near - med) > OUTLIER_MAD * scale)) == 1
            worst = (c, row, far, isolated)
    return worst


#: Largest temperature accepted (K): above it no liquid exists (the hottest molten
#: materials simulated are a few 10^4 K); a larger number is a typo or another unit.
MAX_TEMPERATURE_K = 1e5
#: Largest reduced (Lennard-Jones) temperature accepted: the LJ fluid's critical point is
#: T* = 1.3 (common practice); T* = 1000 is far into the dilute gas.
MAX_TEMPERATURE_REDUCED = 1e3
#: A given temperature may differ from the mean of the file's temperature column by this
#: fraction beyond three standard errors of that mean (thermostats hold the mean kinetic
#: temperature within a percent or so; engines count degrees of freedom differently, which
#: shifts the printed temperature by 3/N to a few percent).
TEMPERATURE_TOLERANCE = 0.05


def temperature_plausible(value: float, *, reduced: bool, option: str = "--temperature",
                          path: str | None = None) -> None:
    """InputError unless `value` is a finite temperature in (0, MAX] (K or reduced)."""
    top = MAX_TEMPERATURE_REDUCED if reduced else MAX_TEMPERATURE_K
    unit = "reduced (lj)" if reduced else "K"
    if not (math.isfinite(value) and 0 < value <= top):
        raise InputError(
            f"{option} {value:g} is not a plausible temperature", path=path,
            expected=f"a positive temperature of at most {top:g} {unit}",
            fix=f"pass the thermostat set point in {unit}")


def _mean_and_stderr(x: np.ndarray) -> tuple[float, float]:
    """Mean and a correlation-aware standard error from 20 block means (0 if too few)."""
    x = np.asarray(x, dtype=np.float64)
    n = x.shape[0]
    mean = float(np.mean(x))
    nb = 20
    if n < 2 * nb:
        return mean, float(np.std(x, ddof=1) / math.sqrt(n)) if n > 1 else 0.0
    blocks = x[: (n // nb) * nb].reshape(nb, -1).mean(axis=1)
    return mean, float(blocks.std(ddof=1) / math.sqrt(nb))


def temperature_against_column(given: float, column: np.ndarray, *, name: str,
                               reduced: bool, path: str | None = None,
                               line: int | None = None) -> None:
    """Compare a given temperature with the file's temperature column.

    A mismatch beyond three standard errors of the column's mean plus
    :data:`TEMPERATURE_TOLERANCE` of it is an InputError naming both values (a set point
    in other units, or for another run): the viscosity is proportional to 1/T, so a wrong
    temperature is a silent factor. Returns a note with both values otherwise.
    """
    temperature_plausible(given, reduced=reduced, path=path)
    mean, se = _mean_and_stderr(column)
    unit = " (reduced)" if reduced else " K"
    if abs(given - mean) > 3.0 * se + TEMPERATURE_TOLERANCE * abs(mean):
        raise InputError(
            f"--temperature {given:g}{unit} differs from the mean of the file's temperature "
            f"column '{name}' ({mean:.4g} +- {se:.2g}{unit}) by more than "
            f"{TEMPERATURE_TOLERANCE:.0%} and its error",
            path=path, line=line, expected="the set point of the run in this file",
            fix=f"pass the run's set point in the file's units (the column says {mean:.4g}), "
                "or leave out --temperature to use the column's mean")


#: Largest median |(Pxx + Pyy + Pzz)/3 - P| relative to the median size of the diagonal
#: components before the pressure column and the tensor are said to disagree. The engine
#: prints both from the same virial; printing to 6-8 significant digits leaves ~1e-5.
#: Measured on the logs of tests/data: 1.2e-7 (LJ, %14.7g), 1e-8 (argon, real and metal).
PRESSURE_MISMATCH = 1e-3


def pressure_column_mismatch(pressure: np.ndarray, press: np.ndarray, *,
                             scale: float = 1.0) -> tuple[float, int]:
    """How far the diagonal of the pressure tensor is from the file's pressure column.

    Parameters
    ----------
    pressure : array (6, n)
        The tensor (xx, yy, zz, xy, xz, yz).
    press : array (n,)
        The file's scalar pressure column; ``press * scale`` is in the unit of `pressure`.
    scale : float
        Unit factor of `press`.

    Returns
    -------
    (relative median mismatch, row of the largest mismatch)
        median |tr/3 - P| over the median size of the diagonal components (0 when the
        diagonal is zero), both from up to 2^18 evenly spaced rows, and the row where
        |tr/3 - P| is largest.
    """
    n = pressure.shape[1]
    step = max(1, n // _ROBUST_SAMPLES)
    chunk = step * max(1, (1 << 20) // step)  # chunks start on the sampling grid
    sampled, best, where = [], -1.0, 0
    for lo in range(0, n, chunk):  # no whole-column temporary (10^8 rows: 1.6 GB)
        hi = min(n, lo + chunk)
        r = (pressure[0, lo:hi] + pressure[1, lo:hi]) + pressure[2, lo:hi]
        r /= 3.0
        r -= np.asarray(press[lo:hi], dtype=np.float64) * scale
        np.abs(r, out=r)
        sampled.append(r[::step])
        k = int(np.argmax(r))
        if r[k] > best or (np.isnan(r[k]) and not np.isnan(best)):
            best, where = float(r[k]), lo + k
    size = float(np.mean([np.median(np.abs(pressure[c, ::step])) for c in range(3)]))
    rel = float(np.median(np.concatenate(sampled))) / size if size > 0 else 0.0
    return rel, where


#: Fewest MSD points in a diffusion fit: with 2 points (0 degrees of freedom, as a
#: 10-frame trajectory gave) the line passes through both exactly and nothing shows
#: whether the MSD is linear there; 3 leave one. More are not required: the error bar
#: comes from the scatter of independent time blocks (`diffusion.py`), not from the fit's
#: residuals, and automatic windows on real data hold 4 points (LJ time blocks, OU tests).
MIN_FIT_POINTS = 3


def check_diffusion_result(analysis: Any, slist: Sequence[Any]) -> Any:
    """Refuse MSD diffusion estimates from too few fit points or with an interval <= 0.

    Raises :class:`~transport.errors.RunTooShortError` with the estimate as ``partial``
    and the run length at which the fit window (which ends at a quarter of the run) holds
    :data:`MIN_FIT_POINTS` points; returns `analysis` unchanged otherwise.
    """
    for est in getattr(analysis, "msd", ()):
        npts = int(est.diagnostics.get("fit_points", MIN_FIT_POINTS))
        bad_points = npts < MIN_FIT_POINTS
        if not bad_points and est.interval[0] > 0 and est.value > 0:
            continue
        members = [s for s in slist if est.group in getattr(s, "species_names", ())] or \
            list(slist)
        u = members[0].units
        ts = u.time_scale
        dt = members[0].dt * ts
        have = max(s.duration for s in members) * ts
        start = est.window[0] if est.window is not None else dt
        # points are spaced by half the window start (at least one frame); the window
        # ends at a quarter of the run
        spacing = max(dt, 0.5 * start)
        need = 4.0 * (start + (MIN_FIT_POINTS - 1) * spacing)
        what = (f"only {npts} fit point(s) ({npts - 2} degrees of freedom; at least "
                f"{MIN_FIT_POINTS} are needed)" if bad_points else
                f"its 95% interval [{est.interval[0]:.3g}, {est.interval[1]:.3g}] includes "
                "zero or negative values")
        if bad_points and need <= have:
            # the run is long enough: the window given was too narrow
            raise InputError(
                f"{est.group or 'all'}: self-diffusion {est.value:.4g} {est.unit} rests on "
                f"{what}", path=members[-1].source.path or None,
                expected=f"a fit window holding at least {MIN_FIT_POINTS} MSD points "
                         f"(spaced by {spacing:.3g} {u.time_unit})",
                fix="give a wider --fit-window, or leave it automatic")
        raise RunTooShortError(
            f"{est.group or 'all'}: self-diffusion {est.value:.4g} {est.unit} rests on "
            f"{what}; the run ({have:.3g} {u.time_unit}) is too short for the fit",
            partial=est, needed_time=need, extra_time=max(need - have, 0.0),
            time_unit=u.time_unit, path=members[-1].source.path or None)
    return analysis


#: Largest relative difference between the mean volumes of replicas of one system. Runs of
#: one state point differ far less: the relative volume fluctuation under a barostat is
#: sqrt(k_B T kappa_T / V), 0.8% for 1,000 water molecules at 298 K (kappa_T = 4.5e-10 1/Pa,
#: from memory), and a run's mean averages many such samples; the same liquid at another
#: size or density differs by far more (500 against 864 atoms at one density: 73%).
REPLICA_VOLUME_RTOL = 0.05
#: Largest relative difference between the temperatures of replicas. The instantaneous
#: kinetic temperature fluctuates by sqrt(2 / (3N)) (3.6% for 500 atoms; common practice),
#: and a run's mean over hundreds of independent samples by a tenth of that; 3% is above that
#: scatter and below the spacing of most temperature series (298 and 310 K: 4%).
REPLICA_TEMPERATURE_RTOL = 0.03


def _replica_name(s: Any, k: int) -> str:
    path = s.source.path if s.source is not None else ""
    return path or f"series {k + 1}"


def _same_value(slist: Sequence[Any], values: Sequence[float | None], what: str,
                rtol: float, unit: str, fix: str) -> None:
    """InputError naming `what` when two known values differ by more than `rtol`."""
    known = [(k, v) for k, v in enumerate(values) if v is not None and math.isfinite(v)]
    if len(known) < 2:
        return
    k0, v0 = known[0]
    for k, v in known[1:]:
        if abs(v - v0) > rtol * max(abs(v0), abs(v)):
            u = f" {unit}" if unit else ""
            by = (f" differ by {abs(v - v0) / max(abs(v0), abs(v)):.1%} (more than "
                  f"{rtol:.0%})" if rtol > 0 else " differ")
            within = f" within {rtol:.0%}" if rtol > 0 else ""
            raise InputError(
                f"replicas are not the same system: {what} {v0:.6g}{u} "
                f"({_replica_name(slist[k0], k0)}) and {v:.6g}{u} "
                f"({_replica_name(slist[k], k)}){by}",
                path=slist[k].source.path or None,
                expected=f"replicas of one system: the same {what}{within}",
                fix=fix)


def check_replicas(slist: Sequence[Any]) -> None:
    """InputError when replicas cannot be the same system.

    Checked in this order, each naming the differing property and the two files: the unit
    system (before the sampling intervals, which then differ too and would be blamed
    instead), the number of atoms (position series), the mean volume
    (:data:`REPLICA_VOLUME_RTOL`) and the temperature (:data:`REPLICA_TEMPERATURE_RTOL`).
    Works on stress series (:class:`~transport.series.StressSeries`) and position series
    (:class:`~transport.series.PositionSeries`) alike.
    """
    names = [s.units.name for s in slist]
    if len(set(names)) > 1:
        k = next(i for i, nm in enumerate(names) if nm != names[0])
        raise InputError(
            f"replicas use different unit systems: {names[0]} "
            f"({slist[0].source.path or 'series 1'}) and {names[k]}",
            path=slist[k].source.path or None, expected="one unit system across replicas",
            fix="read every replica with the same --units (or analyse them separately)")
    if len(slist) < 2:
        return
    separately = "analyse different systems separately (or give the right files)"
    atoms = [float(getattr(s, "system_atoms", 0)) or None for s in slist]
    _same_value(slist, atoms, "number of atoms", 0.0, "", separately)
    reduced = slist[0].units.reduced
    _same_value(slist, [_mean_volume(s) for s in slist], "mean volume",
                REPLICA_VOLUME_RTOL, "sigma^3" if reduced else "m^3", separately)
    _same_value(slist, [s.temperature for s in slist], "temperature",
                REPLICA_TEMPERATURE_RTOL, "(reduced)" if reduced else "K",
                separately + "; if a temperature is wrong pass --temperature")


def _mean_volume(s: Any) -> float | None:
    """Mean volume of a stress series (its volume) or a position series (its cell)."""
    if hasattr(s, "volume"):
        return float(np.mean(s.volume))
    box = getattr(s, "box", None)
    if box is None:
        return None
    vol = np.prod(box, axis=1)
    ang = getattr(s, "box_angles", None)
    if ang is not None:
        # triclinic cell volume abc sqrt(1 - sum cos^2 + 2 prod cos) (common practice)
        c = np.cos(np.radians(ang))
        vol = vol * np.sqrt(np.maximum(
            1.0 - np.sum(c * c, axis=1) + 2.0 * np.prod(c, axis=1), 0.0))
    return float(np.mean(vol))
