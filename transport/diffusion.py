"""Self-diffusion from particle trajectories: Einstein (MSD) and Green–Kubo (VACF) estimators.

MSD route (method ``msd_wls``). The mean-squared displacement of each species is averaged
over particles and all time origins with FFTs (:func:`transport.stats.msd`), after the
system's centre-of-mass drift is removed. The diffusive window is found from the local slope
``alpha(t) = d log MSD / d log t``: it ends where fewer than three non-overlapping intervals of
the lag fit in the run (lag <= (N+1)/4 for N steps; the long-lag tail, few origins) and starts
at the first lag from which ``alpha`` stays within ``max(0.1, 3 sd)`` of 1 over a factor 3 in
lag (``sd`` the statistical spread of ``alpha`` for a random walk with as many particles and
frames), which excludes the ballistic start and the caging shoulder, and where the slope of
the MSD over one doubling of the lag agrees with the slope over the next within 2% (or 3
model sd): ``alpha`` near 1 does not make an MSD ``6 D t + b`` linear when ``b`` is not
small, and molecule centres still bend there.

The estimate and its error bar come from independent time blocks [8]_: the run is cut into
8 blocks (6 or 4 when the window does not fit), the window is cut at half a block if need
be (never below twice its start), each block's MSD uses only its own frames, and
``MSD(t) = 6 D t + b`` is fitted to the particle-weighted mean of the block MSDs by least
squares weighted with the inverse model variance of each point, at evenly spaced lags. The
standard error is the scatter of the block values (each block fitted the same way) about
their weighted mean, over sqrt(blocks); the 95% interval is Student's t with blocks - 1 dof.
Independent repeats see every correlation the data have (between MSD points, and between
particles that move together in a periodic box or belong to one molecule), which a model of
one MSD curve cannot. A run too short for four such blocks gets the model error below (times
the Birge ratio when the fit's chi-square rejects the model [6]_ [7]_) and a warning.

Covariance model (the weights, the model error and the model check): the analytic
covariance of the time-averaged MSD of a Gaussian random walk without localisation noise
[1]_, derived here in closed form (see :func:`msd_covariance`), with particles (and
replicas) taken as independent. For a random walk the MSD points at lags n and m of one
coordinate of one particle with ``N + 1`` frames and step variance ``s^2`` have

    Cov[M(n), M(m)] = 2 s^4 S(n, m) / ((N - n + 1)(N - m + 1)),
    S(n, m) = sum_{i,j} overlap(i, n; j, m)^2,

the sum running over the origins of both lags and ``overlap`` the number of steps the two
displacement windows share (Isserlis' theorem: Cov[A^2, B^2] = 2 Cov[A, B]^2 for zero-mean
Gaussians). Its shape does not depend on D; its scale ``s^2 = 2 D dt`` is evaluated at the
fitted D. Only its diagonal weights the fit: with the full covariance (generalized least
squares, optimal if the model held [1]_) the fit becomes one of the MSD's increments and
rests on the first two lags of the window, which on real liquids made the answer hang on
where the window starts (see :func:`fit_msd`). The model error of the weighted fit is the
sandwich with the full covariance (``stderr_model`` in the diagnostics); the GLS answer and
the chi-square of its residuals against the model are reported as diagnostics.

The interval without time blocks (:func:`msd_interval`) uses the normal quantile, not
Student's t: no scale is estimated from the fit residuals, so the residual degrees of freedom
say nothing about the error bar's own uncertainty. Because the model error is proportional to
D, it inverts ``|D_hat - D| <= z c D`` (``c = stderr / D_hat``),
``[D_hat / (1 + z c), D_hat / (1 - z c)]``, instead of plugging ``D_hat`` into the error bar
(measured on single random walks with ``c = 0.19``: 0.929 symmetric, 0.945-0.950 inverted).

The MSD of a species (:func:`species_msd`) sums the power spectra of all its particles and
coordinates before one inverse FFT (the transform is linear; only the particle average is
needed), working through blocks of particles in one reused zero-padded buffer.

VACF route (method ``vacf``): ``D = (1/3) integral <v(0) . v(t)> dt`` (trapezoid rule) up to a
cutoff twice the lag after which the normalised VACF stays below 0.01 for a further doubling of
the lag; the error bar is the spread of the integral over independent time segments (at
least 10 cutoffs long, shortened to no less than two cutoffs to give 8 segments); blocks of
particles, which share the collective motion of the box, are added only when the run holds
fewer than four segments, with a warning. Frames more than a small fraction of the velocity
decorrelation time apart make the integral meaningless: when the VACF falls below 0.7 of its
initial value within one frame the estimate is skipped (``vacf="auto"``) or carries a warning.

D is the value in the periodic box; the diagnostics record box lengths, temperature and group
sizes for the Yeh–Hummer finite-size correction [3]_, which needs the shear viscosity.

References
----------
.. [1] J. T. Bullerjahn, S. von Bülow and G. Hummer, "Optimal estimates of self-diffusion
   coefficients from molecular dynamics simulations", J. Chem. Phys. 153, 024116 (2020).
.. [2] M. von Bülow, J. T. Bullerjahn and G. Hummer, "Systematic errors in diffusion
   coefficients from long-time molecular dynamics simulations at constant pressure",
   J. Chem. Phys. 153, 021101 (2020).
.. [3] I.-C. Yeh and G. Hummer, "System-size dependence of diffusion coefficients and
   viscosities from molecular dynamics simulations with periodic boundary conditions",
   J. Phys. Chem. B 108, 15873 (2004).
.. [4] H. Qian, M. P. Sheetz and E. L. Elson, "Single particle tracking. Analysis of diffusion
   and flow in two-dimensional systems", Biophys. J. 60, 910 (1991): variance of the
   time-averaged MSD of a random walk.
.. [5] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (Oxford,
   2017), Sec. 8.3 (MSD and VACF by FFT) and Sec. 2.7 (Einstein and Green–Kubo forms of D).
.. [6] R. T. Birge, "The calculation of errors by the method of least squares", Phys. Rev.
   40, 207 (1932).
.. [7] Particle Data Group, "Review of Particle Physics", Introduction, section on averaging
   measurements: the scale factor S (from memory).
.. [8] H. Flyvbjerg and H. G. Petersen, "Error estimates on averages of correlated data",
   J. Chem. Phys. 91, 461 (1989): means of independent blocks and their variance.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.fft as sfft
from scipy import special

from .checks import check_diffusion_result, check_replicas
from .errors import InputError, Note, RunTooShortError
from .estimate import Estimate
from .msd_fit import (
    CHI2_SCALE_P,
    ORIGINS_PER_LAG,
    MSDFit,
    _alpha_outside,
    _local_slope,
    _wls_slope,
    diffusive_window,
    fit_msd,
    msd_covariance,
    msd_interval,
    msd_variance,
)
from .series import PositionSeries
from .stats import msd as _fft_msd
from .units import UnitSystem
from .vacf import vacf_estimate

__all__ = [
    "DiffusionAnalysis",
    "MSDFit",
    "analyse_diffusion",
    "diffusive_window",
    "fit_msd",
    "msd_covariance",
    "msd_diffusion",
    "msd_interval",
    "msd_variance",
    "species_msd",
    "vacf_diffusion",
]

#: Numbers of independent time blocks tried for the MSD estimate (most first), and the
#: fewest with which it is made (dof = blocks - 1).
BLOCK_COUNTS = (8, 6, 4)
BLOCKS_MIN = 4
#: Inside a time block the fit window is cut at half the block if need be, but not below
#: this factor in lag.
BLOCK_WINDOW_MIN = 2.0
#: Chunk of float64 values converted at a time (bounded memory for big trajectories).
_CHUNK_VALUES = 1 << 23
#: Bytes of the zero-padded float64 buffer of one block of particles in :func:`species_msd`
#: (about 1 MB: stays in cache, no fresh memory per block; 4 MB measured 25% slower).
_MSD_BLOCK_BYTES = 1 << 20
_DIM = 3


# ---------------------------------------------------------------------------------------
# MSD and VACF of a species from PositionSeries
# ---------------------------------------------------------------------------------------


def _chunks(idx: np.ndarray, n_frames: int) -> list[np.ndarray]:
    size = max(1, _CHUNK_VALUES // (n_frames * _DIM))
    return [idx[i:i + size] for i in range(0, idx.size, size)]


def species_msd(
    series: PositionSeries,
    particles: np.ndarray,
    *,
    max_lag: int | None = None,
    remove_drift: bool = True,
    workers: int | None = None,
) -> np.ndarray:
    """Particle- and origin-averaged MSD of some particles of a series, by FFT.

    Parameters
    ----------
    series : PositionSeries
    particles : ndarray of int
        Particle indices.
    max_lag : int, optional
        Largest lag in frames (default ``n_frames - 1``).
    remove_drift : bool
        Subtract the system's centre-of-mass displacement first.
    workers : int, optional
        Threads for the FFTs.

    Returns
    -------
    ndarray, shape (max_lag + 1,)
        MSD summed over the three coordinates, internal length^2 (m^2 or sigma^2).

    Notes
    -----
    :func:`transport.stats.msd` [1]_ on the selected particles of the float32 store, with
    the drift as the common shift, in blocks of about 1 MB of zero-padded float64 buffer.

    References
    ----------
    .. [1] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (2017).
    """
    n = series.n_frames
    k = n - 1 if max_lag is None else int(max_lag)
    if not 0 <= k < n:
        raise ValueError(f"max_lag must be in [0, {n - 1}], got {max_lag!r}")
    idx = np.unique(np.asarray(particles, dtype=np.intp))
    if idx.size == 0:
        raise ValueError("no particles given")
    length = sfft.next_fast_len(n + k, real=True)
    drift = series.drift if remove_drift else None
    return _fft_msd(series.positions, max_lag=k, particles=idx, shift=drift, workers=workers,
                    chunk_size=max(1, _MSD_BLOCK_BYTES // (_DIM * length * 8)))


@dataclass(frozen=True)
class DiffusionAnalysis:
    """MSD (weighted least squares, time blocks) and VACF estimates per species.

    Attributes
    ----------
    msd : tuple of Estimate
        ``self_diffusion`` by ``msd_wls``, one per species.
    vacf : tuple of Estimate
        ``self_diffusion`` by ``vacf``, one per species that had velocities sampled finely
        enough.
    notes : tuple of str
        Why an estimate is missing, and other run-level remarks.
    """

    msd: tuple[Estimate, ...]
    vacf: tuple[Estimate, ...]
    notes: tuple[str, ...] = ()

    @property
    def estimates(self) -> tuple[Estimate, ...]:
        """All estimates: per species, the MSD estimate followed by its VACF cross-check."""
        out: list[Estimate] = []
        by_group = {e.group: e for e in self.vacf}
        for e in self.msd:
            out.append(e)
            if e.group in by_group:
                out.append(by_group.pop(e.group))
        return (*out, *by_group.values())


def _as_list(series: PositionSeries | Sequence[PositionSeries]) -> list[PositionSeries]:
    if isinstance(series, PositionSeries):
        return [series]
    out = list(series)
    if not out:
        raise ValueError("no position series given")
    check_replicas(out)  # units, atoms, volume, temperature (checks.py)
    dt = out[0].dt
    for s in out[1:]:
        if not math.isclose(s.dt, dt, rel_tol=1e-6):
            raise InputError(
                f"replicas have different times between frames ({dt:.6g} and {s.dt:.6g})",
                path=s.source.path or None,
                expected="the same frame interval in every replica",
                fix="analyse runs with different output intervals separately",
            )
        if s.units.reduced != out[0].units.reduced:
            raise InputError("replicas mix reduced and SI units",
                             path=s.source.path or None, expected="one unit system")
    return out


def _species_order(slist: list[PositionSeries]) -> list[str]:
    return list(dict.fromkeys(n for s in slist for n in s.species_names))


def _length_unit(reduced: bool) -> tuple[str, float]:
    """Reported length unit and the factor from internal units."""
    return ("sigma", 1.0) if reduced else ("nm", 1e9)


def _common_diag(slist: list[PositionSeries], name: str, remove_drift: bool) -> dict:
    u = slist[0].units
    lu, lf = _length_unit(u.reduced)
    counts, boxes, fluct, drift, angles = [], [], [], [], []
    for s in slist:
        if name in s.species_names:
            counts.append(int(s.species_indices(name).size))
        if s.box is not None:
            boxes.append(s.box.mean(axis=0))
            fluct.append(float(np.max(s.box.std(axis=0) / s.box.mean(axis=0))))
            angles.append(np.full(3, 90.0) if s.box_angles is None
                          else s.box_angles.mean(axis=0))
        if s.drift is not None:
            drift.append(float(np.max(np.linalg.norm(s.drift, axis=1))))
    box = np.mean(boxes, axis=0) * lf if boxes else None
    ang = np.mean(angles, axis=0) if angles else None
    volume = None
    if box is not None and ang is not None:
        # triclinic cell volume abc sqrt(1 - sum cos^2 + 2 prod cos) (common practice)
        c = np.cos(np.radians(ang))
        volume = float(np.prod(box) * np.sqrt(max(
            1.0 - float(np.sum(c * c)) + 2.0 * float(np.prod(c)), 0.0)))
    tilted = ang is not None and bool(np.any(np.abs(ang - 90.0) > 1e-3))
    temps = [s.temperature for s in slist if s.temperature is not None]
    return {
        "n_particles": int(sum(counts)),
        "particles_per_replica": counts,
        "replicas": len(slist),
        "group_by": slist[0].group_by,
        "selection": slist[0].selection,
        "atoms_per_particle": float(np.mean(np.concatenate(
            [s.atoms_per_particle[s.species_indices(name)] for s in slist
             if name in s.species_names]))),
        "system_atoms": [s.system_atoms for s in slist],
        "frames": [s.n_frames for s in slist],
        "frame_interval": slist[0].dt * u.time_scale,
        "time_unit": u.time_unit,
        "box_lengths": None if box is None else [float(b) for b in box],
        "box_angles": [float(a) for a in ang] if tilted else None,
        "box_volume": volume,
        "length_unit": lu,
        "box_fluctuation": max(fluct) if fluct else None,
        "temperature": float(np.mean(temps)) if temps else None,
        "temperature_source": slist[0].temperature_source or None,
        "unwrap": [s.unwrap for s in slist],
        "drift_removed": bool(remove_drift),
        "drift_max": (max(drift) * lf) if drift else None,
        "finite_size": "value for the periodic box; not corrected (Yeh–Hummer needs the "
                       "shear viscosity, the box length and the temperature)",
    }


def msd_diffusion(
    series: PositionSeries | Sequence[PositionSeries],
    *,
    fit_window: tuple[float, float] | Literal["auto"] = "auto",
    remove_drift: bool = True,
    max_lag: int | None = None,
    workers: int | None = None,
) -> tuple[Estimate, ...]:
    """Self-diffusion per species from the MSD of independent time blocks (weighted fit).

    Parameters
    ----------
    series : PositionSeries or sequence of PositionSeries
        One run, or independent replicas (same frame interval).
    fit_window : (float, float) or "auto"
        Fit range of lag times in internal units (s, or tau), or ``"auto"`` (local slope of
        log MSD; see the module notes). The time blocks may cut its end at half a block
        (with a warning when the range was given).
    remove_drift : bool
        Subtract the system's centre-of-mass drift before computing the MSD.
    max_lag : int, optional
        Longest lag computed, in frames (default: half the shortest replica).
    workers : int, optional
        Threads for the FFTs.

    Returns
    -------
    tuple of Estimate
        ``self_diffusion`` by ``msd_wls`` for each species, in 1e-9 m^2/s (or reduced).
        ``window`` is the fit range the estimate uses, in ps (or tau); ``n_independent``
        the number of particles. ``diagnostics`` hold the time blocks (``block_count``,
        ``block_length``, ``block_values``, ``block_stderrs``), the model error
        (``stderr_model``) and the factor to the reported one, ``weight_span``, the
        whole-run fit over the full window, the GLS and OLS answers, the chi-square of
        the model check, the intercept, the box, temperature and group sizes.
        ``curves`` hold ``time``, ``msd``, ``msd_sd``, ``fit``, ``fit_sd``,
        ``slope_time`` and ``local_slope``.

    Raises
    ------
    RunTooShortError
        No diffusive regime within the trusted lags; carries a partial estimate.

    References
    ----------
    .. [1] Bullerjahn, von Bülow & Hummer, J. Chem. Phys. 153, 024116 (2020).
    .. [2] Flyvbjerg & Petersen, J. Chem. Phys. 91, 461 (1989).
    """
    return analyse_diffusion(series, fit_window=fit_window, remove_drift=remove_drift,
                             vacf="no", max_lag=max_lag, workers=workers).msd


def vacf_diffusion(
    series: PositionSeries | Sequence[PositionSeries],
    *,
    cutoff: float | Literal["auto"] = "auto",
    remove_drift: bool = True,
    workers: int | None = None,
) -> tuple[Estimate, ...]:
    """Self-diffusion per species from the velocity autocorrelation (Green–Kubo).

    ``D = (1/3) integral_0^tc <v(0) . v(t)> dt``.

    Parameters
    ----------
    series : PositionSeries or sequence of PositionSeries
        Series with velocities.
    cutoff : float or "auto"
        Upper limit of the integral in internal time units, or ``"auto"`` (see the module
        notes).
    remove_drift : bool
        Subtract the system's centre-of-mass velocity first.
    workers : int, optional
        Threads for the FFTs.

    Returns
    -------
    tuple of Estimate
        ``self_diffusion`` by ``vacf`` per species; ``window`` is ``(0, cutoff)``.

    References
    ----------
    .. [1] Allen & Tildesley, *Computer Simulation of Liquids*, 2nd ed. (2017), Sec. 2.7.
    """
    res = analyse_diffusion(series, vacf="yes", vacf_cutoff=cutoff,
                            remove_drift=remove_drift, workers=workers, msd=False)
    return res.vacf


def analyse_diffusion(
    series: PositionSeries | Sequence[PositionSeries],
    *,
    fit_window: tuple[float, float] | Literal["auto"] = "auto",
    remove_drift: bool = True,
    vacf: Literal["auto", "yes", "no"] = "auto",
    vacf_cutoff: float | Literal["auto"] = "auto",
    max_lag: int | None = None,
    workers: int | None = None,
    msd: bool = True,
) -> DiffusionAnalysis:
    """MSD estimates per species and, where velocities allow, the VACF cross-check.

    Parameters
    ----------
    series, fit_window, remove_drift, max_lag, workers
        As in :func:`msd_diffusion`.
    vacf : {"auto", "yes", "no"}
        ``auto``: VACF estimate when every series has velocities sampled finely enough;
        ``yes``: always (a warning if the sampling is too coarse; an InputError without
        velocities); ``no``: never.
    vacf_cutoff : float or "auto"
        As `cutoff` in :func:`vacf_diffusion`.
    msd : bool
        Make the MSD estimates (False: VACF only).

    Returns
    -------
    DiffusionAnalysis

    Raises
    ------
    RunTooShortError
        No species has a diffusive regime within the trusted lags (a species without one,
        beside others that have one, is named in ``notes`` instead).
    """
    if vacf not in ("auto", "yes", "no"):
        raise ValueError(f"vacf must be 'auto', 'yes' or 'no', got {vacf!r}")
    slist = _as_list(series)
    names = _species_order(slist)
    notes: list[str] = []
    msd_est: list[Estimate] = []
    vacf_est: list[Estimate] = []
    common_warn = tuple(dict.fromkeys(w for s in slist for w in s.warnings))
    failures: list[RunTooShortError] = []
    for name in names:
        if msd:
            try:
                msd_est.append(_msd_estimate(slist, name, fit_window, remove_drift, max_lag,
                                             workers, common_warn))
            except RunTooShortError as exc:
                # one species without a diffusive regime does not hide the others
                if len(names) == 1:
                    raise
                failures.append(exc)
                notes.append(f"no MSD estimate: {exc.one_line()}")
    if msd and failures and not msd_est:
        raise failures[0]
    if vacf != "no":
        has_v = all(s.velocities is not None for s in slist)
        if not has_v:
            if vacf == "yes":
                raise InputError("the VACF needs velocities, and the trajectory has none",
                                 path=slist[0].source.path or None,
                                 expected="velocities in every frame",
                                 fix="write velocities, or drop the VACF estimate")
            notes.append(Note("no velocities in the trajectory: VACF cross-check not made"))
        else:
            for name in names:
                members = [s for s in slist if name in s.species_names]
                est, note = vacf_estimate(members, name, vacf_cutoff, remove_drift, workers,
                                          force=vacf == "yes", common_warn=common_warn,
                                          diag=_common_diag(members, name, remove_drift))
                if est is not None:
                    vacf_est.append(est)
                if note:
                    notes.append(note)
    return check_diffusion_result(  # too few fit points or an interval <= 0: refused
        DiffusionAnalysis(tuple(msd_est), tuple(vacf_est), tuple(dict.fromkeys(notes))), slist)


def _msd_estimate(slist: list[PositionSeries], name: str,
                  fit_window: tuple[float, float] | str, remove_drift: bool,
                  max_lag: int | None, workers: int | None,
                  common_warn: tuple[str, ...]) -> Estimate:
    u = slist[0].units
    ts = u.time_scale
    lf = _length_unit(u.reduced)[1]
    dt = slist[0].dt
    members = [s for s in slist if name in s.species_names]
    frames = [s.n_frames for s in members]
    counts = [float(s.species_indices(name).size) for s in members]
    k = min(frames) // 2 if max_lag is None else min(int(max_lag), min(frames) - 1)
    k = max(k, 2)
    curves_m = [species_msd(s, s.species_indices(name), max_lag=k,
                            remove_drift=remove_drift, workers=workers) for s in members]
    mean = np.average(np.array(curves_m), axis=0, weights=counts)
    diag = _common_diag(members, name, remove_drift)
    warn = list(common_warn)
    if fit_window == "auto":
        k0, k1, rule = diffusive_window(mean, frames=frames, counts=counts)
    else:
        a, b = fit_window  # type: ignore[misc]
        k0, k1 = int(round(a / dt)), int(round(b / dt))
        rule = "given"
        if not (1 <= k0 < k1 <= k):
            raise InputError(
                f"fit window ({a * ts:.4g}, {b * ts:.4g}) {u.time_unit} is outside the lags "
                f"computed ({dt * ts:.4g}, {k * dt * ts:.4g}] {u.time_unit}",
                expected="0 < start < end <= half the run",
                fix="choose another --fit-window",
            )
    time = np.arange(k + 1) * dt
    slope_lags, alpha, _sd = _local_slope(mean, frames, counts)
    curves = {
        "time": time * ts,
        "msd": mean * lf**2,
        "slope_time": slope_lags * dt * ts,
        "local_slope": alpha,
    }
    too_short = fit_window == "auto" and (k0 == 0 or k1 < 2 * k0)
    if too_short:
        kk0 = max(1, k1 // 4) if k0 == 0 else k0
        kk1 = max(k1, kk0 + 2)
        kk1 = min(kk1, k)
        partial = None
        if kk1 > kk0 + 1:
            fit = fit_msd(mean, dt, (kk0, kk1), frames=frames, counts=counts)
            partial = _msd_result(fit, mean, time, dt, name, diag, curves, rule, u, [
                *warn, "no diffusive regime was found; this fit is not trustworthy"], lf)
        if k0 == 0:
            a_end = float(alpha[slope_lags <= k1][-1]) if np.any(slope_lags <= k1) else \
                float("nan")
            msg = (f"{name}: the MSD does not become linear within the trusted lags (local "
                   f"slope {a_end:.3g} at {k1 * dt * ts:.3g} {u.time_unit}, expected 1)")
            need = None
        else:
            msg = (f"{name}: the diffusive regime starts at {k0 * dt * ts:.3g} {u.time_unit}"
                   f", too close to the longest trusted lag {k1 * dt * ts:.3g} "
                   f"{u.time_unit}")
            need = 2 * k0 * (ORIGINS_PER_LAG + 1) * dt
        have = (min(frames) - 1) * dt
        err = RunTooShortError(
            msg,
            partial=partial,
            needed_time=None if need is None else need * ts,
            extra_time=None if need is None else max(need - have, 0.0) * ts,
            time_unit=u.time_unit,
            path=members[0].source.path or None,
            fix=None if need is not None else "run at least several times longer, or check "
                                              "that the system is a liquid",
        )
        raise err
    fit = fit_msd(mean, dt, (k0, k1), frames=frames, counts=counts)
    block = _time_blocks(members, name, (k0, k1), dt, remove_drift, workers)
    return _msd_result(fit, mean, time, dt, name, diag, curves, rule, u, warn, lf, block)


@dataclass(frozen=True)
class _TimeBlocks:
    """The fit of the MSD of independent time blocks, and the scatter of the blocks."""

    fit: MSDFit  # fit of the particle-weighted mean of the block MSDs
    values: np.ndarray  # D of each block (internal units)
    stderrs: np.ndarray  # model (random-walk) standard error of each block
    weights: np.ndarray  # particles of each block (normalised to sum 1)
    block_frames: int

    @property
    def dof(self) -> int:
        return int(self.values.size - 1)

    @property
    def scatter_stderr(self) -> float:
        """Standard error of the weighted mean of the block values, from their scatter."""
        w, v = self.weights, self.values
        mu = float(w @ v)
        n = v.size
        return math.sqrt(float(np.sum(w**2 * (v - mu) ** 2)) * n / (n - 1))

    @property
    def pairs_stderr(self) -> float:
        """The same standard error from the means of consecutive pairs of blocks (the next
        blocking level of Flyvbjerg & Petersen): larger than `scatter_stderr` beyond its
        own noise when neighbouring blocks are correlated (blocks too short)."""
        n = self.values.size // 2
        if n < 2:
            return float("nan")
        w = self.weights[: 2 * n].reshape(n, 2)
        v = self.values[: 2 * n].reshape(n, 2)
        wp = w.sum(axis=1)
        vp = (w * v).sum(axis=1) / wp
        wp = wp / wp.sum()
        mu = float(wp @ vp)
        return math.sqrt(float(np.sum(wp**2 * (vp - mu) ** 2)) * n / (n - 1))

    @property
    def chi2_factor(self) -> float:
        """sqrt(chi^2/dof) of the block values about their weighted mean, model errors."""
        e = self.stderrs
        if not np.all(e > 0):
            return float("nan")
        w = 1.0 / e**2
        mu = float(np.sum(w * self.values) / np.sum(w))
        return math.sqrt(float(np.sum(w * (self.values - mu) ** 2)) / self.dof)


def _block_plan(nmin: int, replicas: int, window: tuple[int, int]) -> tuple[int, int] | None:
    """Frames per time block and the last lag of the fit in each block, or None.

    The most blocks (of BLOCK_COUNTS) that hold the window, cut at half a block (the
    default longest lag of a run) if need be, but not below BLOCK_WINDOW_MIN times its
    start and three fit points; None when fewer than BLOCKS_MIN blocks allow that.
    """
    k0, k1 = window
    for nb in BLOCK_COUNTS:
        per_rep = max(1, -(-nb // replicas))
        length = nmin // per_rep
        kb = min(k1, int((length - 1) // 2))
        if kb >= max(min(math.ceil(BLOCK_WINDOW_MIN * k0), k1), k0 + 2):
            return length, kb
    return None


def _time_blocks(members: list[PositionSeries], name: str, window: tuple[int, int],
                 dt: float, remove_drift: bool, workers: int | None) -> _TimeBlocks | None:
    """Fit the same window in independent time blocks and in their mean MSD.

    Each block is a stretch of consecutive frames of one replica; its MSD uses only its own
    frames, so blocks share no displacement and, once they are long compared with the
    window, are independent repeats: their scatter holds every correlation the data have
    (between MSD points, between particles moving collectively), which the random-walk
    model of one MSD curve cannot see [8]_. Returns None when the run is too short for
    BLOCKS_MIN blocks (see :func:`_block_plan`).
    """
    k0 = window[0]
    plan = _block_plan(min(s.n_frames for s in members), len(members), window)
    if plan is None:
        return None
    length, kb = plan
    # every block has the same lags and frames: one set of slope coefficients serves all
    # (the same numbers fit_msd gives, without its GLS and OLS diagnostics)
    lags, coef, var_shape = _wls_slope(k0, kb, length)
    curves, vals, ses, cnt = [], [], [], []
    for s in members:
        idx = np.unique(s.species_indices(name))
        for j in range(s.n_frames // length):
            sl = slice(j * length, (j + 1) * length)
            shift = s.drift[sl] if (remove_drift and s.drift is not None) else None
            m = _fft_msd(s.positions[sl], max_lag=kb, particles=idx, shift=shift,
                         workers=workers)
            dj = float(coef @ m[lags]) / (dt * 2 * _DIM)
            curves.append(m)
            vals.append(dj)
            # model error: d s^4 var_shape / P with s^2 = 2 |D| dt, slope -> D: / (2 d dt)
            ses.append(math.sqrt(_DIM * (2 * abs(dj) * dt) ** 2 * var_shape / idx.size)
                       / (dt * 2 * _DIM))
            cnt.append(float(idx.size))
    if len(vals) < BLOCKS_MIN:
        return None
    w = np.array(cnt) / float(np.sum(cnt))
    mean = w @ np.array(curves)
    fit = fit_msd(mean, dt, (k0, kb), frames=[length] * len(cnt), counts=cnt)
    return _TimeBlocks(fit, np.array(vals), np.array(ses), w, length)


def _msd_result(whole: MSDFit, mean: np.ndarray, time: np.ndarray, dt: float, name: str,
                diag: dict, curves: dict, rule: str, u: UnitSystem, warn: list[str], lf: float,
                block: _TimeBlocks | None = None) -> Estimate:
    """The Estimate: from the time blocks when the run holds them, else the whole run."""
    ds, ts = u.diffusion_scale, u.time_scale
    fit = block.fit if block is not None else whole
    k0, k1 = int(fit.lags[0]), int(fit.lags[-1])
    frames, counts = diag["frames"], [float(c) for c in diag["particles_per_replica"]]
    value = fit.diffusion
    model_se = fit.stderr / fit.scale_factor
    # model standard deviation of every MSD point of the whole run, and band of the line
    lags_all = np.arange(1, mean.size)
    s2 = 2.0 * abs(value) * dt
    shape_diag = sum(p * msd_variance(lags_all, n) for n, p in zip(frames, counts,
                                                                   strict=True))
    shape_diag = shape_diag / sum(counts) ** 2
    fit_line = 2 * _DIM * value * time + fit.intercept
    xb = np.column_stack([time, np.ones_like(time)])
    cov_params = fit.cov_params / fit.scale_factor**2
    warn = list(warn)
    p = fit.chi2_pvalue
    if block is not None:
        se = block.scatter_stderr
        if np.isfinite(p) and p < 1e-3:
            warn.append(
                f"{name}: the MSD scatters much more than the random-walk covariance allows "
                f"(chi^2 = {fit.chi2:.3g} for {fit.dof} degrees of freedom, p = {p:.2g}); the "
                "error bar comes from independent time blocks")
        if se > 1.5 * model_se:
            warn.append(
                f"{name}: {block.values.size} independent time blocks scatter "
                f"{se / model_se:.2g}x more than the random-walk model error allows (the model "
                "treats particles as independent); the error bar is from the blocks")
        q = float(special.stdtrit(block.dof, 0.975))
        lo, hi = value - q * se, value + q * se
        interval_rule = f"Student t with {block.dof} dof (time blocks): value +- {q:.4g} stderr"
        stderr_method = (
            f"scatter of {block.values.size} independent time blocks of "
            f"{block.block_frames * dt * ts:.4g} {u.time_unit}, each fitted over the same "
            "window, about their particle-weighted mean (standard error of the mean)")
    else:
        se = fit.stderr
        warn.append(
            f"{name}: the run is too short for {BLOCKS_MIN} independent time blocks that hold "
            "the fit window, so the error bar could not be checked against the data; it is "
            "the random-walk model error, which on real liquids (particles moving together) "
            "has been 1.5-4x too small: run longer or add replicas")
        if np.isfinite(p) and p < 1e-3:
            warn.append(
                f"{name}: the MSD scatters much more than the random-walk covariance allows "
                f"(chi^2 = {fit.chi2:.3g} for {fit.dof} degrees of freedom, p = {p:.2g}); the "
                f"error bar was scaled by sqrt(chi^2/dof) = {fit.scale_factor:.3g}, but the "
                "model may not hold (correlated particles or a non-diffusive window)")
        elif fit.scale_factor > 1:
            warn.append(
                f"{name}: error bar scaled by sqrt(chi^2/dof) = {fit.scale_factor:.3g}: the MSD "
                f"scatters more than the random-walk covariance allows (chi^2 = {fit.chi2:.3g} "
                f"for {fit.dof} degrees of freedom, p = {p:.2g})")
        (lo, hi), interval_rule = msd_interval(value, se)
        stderr_method = (
            "weighted least squares on the whole run, sandwich error with the model "
            "covariance at the fitted D" + (
                f", scaled by the Birge ratio sqrt(chi^2/dof) = {fit.scale_factor:.3g} "
                f"(chi^2 p-value below {CHI2_SCALE_P:g})" if fit.scale_factor > 1 else ""))
    if block is not None and rule == "given" and int(whole.lags[-1]) > k1:
        warn.append(
            f"{name}: the fit window was cut to {k0 * dt * ts:.4g}-{k1 * dt * ts:.4g} "
            f"{u.time_unit}, half of each of the {block.values.size} independent time blocks "
            f"that carry the error bar; the whole run over the window asked for gives "
            f"{whole.diffusion * ds:.4g} (diagnostics: whole_run_value)")
    if value <= 0:
        warn.append(f"{name}: the fitted slope is not positive")
    if interval_rule.startswith("symmetric"):
        warn.append(f"{name}: the error bar is too large for the scale-aware interval; the "
                    "symmetric normal interval is given")
    factor = se / model_se if model_se > 0 else float("nan")
    fit_sd = np.sqrt(np.einsum("ij,jk,ik->i", xb, cov_params, xb)) * factor
    curves = dict(curves)
    curves.update(fit=fit_line * lf**2, fit_sd=fit_sd * lf**2,
                  msd_sd=np.concatenate([[0.0], np.sqrt(_DIM * s2 * s2 * shape_diag)])
                  * lf**2)
    lu = diag["length_unit"]
    d = dict(diag)
    d.update(
        fit_window=(k0 * dt * ts, k1 * dt * ts),
        window_rule=rule,
        fit_points=int(fit.lags.size),
        weight_span=(fit.weight_span[0] * dt * ts, fit.weight_span[1] * dt * ts),
        alpha_outside_fraction=_alpha_outside(mean, (k0, k1), frames, counts),
        fit_method="least squares weighted by the inverse model variance of each MSD "
                   "point, evenly spaced lags" + (
                       ", on the mean MSD of independent time blocks" if block else
                       ", on the MSD of the whole run"),
        covariance_model="analytic random-walk covariance of the MSD points (Bullerjahn, "
                         "von Bülow & Hummer 2020), independent particles: weights and "
                         "model error",
        gls_value=fit.gls_diffusion * ds,
        gls_stderr_model=fit.gls_stderr * ds,
        ols_value=fit.ols_diffusion * ds,
        ols_stderr=fit.ols_stderr * ds,
        ols_stderr_naive=fit.ols_stderr_naive * ds,
        intercept=fit.intercept * lf**2,
        intercept_stderr=fit.intercept_stderr * lf**2,
        msd_unit=f"{lu}^2",
        chi2=fit.chi2,
        dof=fit.dof,
        chi2_pvalue=p,
        whole_run_value=whole.diffusion * ds,
        whole_run_stderr_model=whole.stderr / whole.scale_factor * ds,
        whole_run_window=(int(whole.lags[0]) * dt * ts, int(whole.lags[-1]) * dt * ts),
        stderr_model=model_se * ds,
        stderr_scale_factor=factor,
        fit_scale_factor=fit.scale_factor,
        block_scale_factor=float("nan") if block is None else block.chi2_factor,
        block_count=0 if block is None else int(block.values.size),
        block_length=float("nan") if block is None else block.block_frames * dt * ts,
        block_values=[] if block is None else [float(x) * ds for x in block.values],
        block_stderr_pairs=float("nan") if block is None else block.pairs_stderr * ds,
        block_stderrs=[] if block is None else [float(x) * ds for x in block.stderrs],
        stderr_method=stderr_method,
        interval_method=interval_rule,
    )
    return Estimate(
        "self_diffusion", "msd_wls", value * ds, se * ds,
        (lo * ds, hi * ds), u.diffusion_unit,
        window=(k0 * dt * ts, k1 * dt * ts), window_unit=u.time_unit, group=name,
        n_independent=float(d["n_particles"]), diagnostics=d, curves=curves,
        warnings=tuple(dict.fromkeys(warn)),
    )
