"""Green–Kubo self-diffusion from the velocity autocorrelation function (VACF).

``D = (1/3) integral <v(0) . v(t)> dt`` (trapezoid rule) up to a cutoff; used by
:mod:`transport.diffusion` as the cross-check of the MSD route (method ``vacf``). The rule
for the cutoff and the error bar are described in :mod:`transport.diffusion`.

References
----------
.. [1] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (Oxford,
   2017), Sec. 8.3 (correlation functions by FFT) and Sec. 2.7 (Green–Kubo form of D).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from .errors import InputError, RunTooShortError
from .estimate import Estimate
from .series import PositionSeries
from .stats import autocorrelation

#: VACF: normalised level below which the VACF counts as decayed.
VACF_LEVEL = 0.01
#: VACF: smallest normalised VACF one frame after the origin for a trustworthy integral.
VACF_MIN_FIRST = 0.7
#: VACF: segments are at least this many cutoffs long.
VACF_SEGMENT_FACTOR = 10
#: VACF: segments are shortened (to no less than two cutoffs) to give at least this many.
VACF_TARGET_SEGMENTS = 8
#: VACF: fewest independent time segments for the error bar (Student t, segments - 1 dof);
#: below this, blocks of particles are added, with a warning.
VACF_MIN_SEGMENTS = 4
#: Chunk of float64 values converted at a time (bounded memory for big trajectories).
_CHUNK_VALUES = 1 << 23
_DIM = 3


def _chunks(idx: np.ndarray, n_frames: int) -> list[np.ndarray]:
    size = max(1, _CHUNK_VALUES // (n_frames * _DIM))
    return [idx[i:i + size] for i in range(0, idx.size, size)]


def _species_vacf(series: PositionSeries, particles: np.ndarray, *, seg_len: int,
                  max_lag: int, remove_drift: bool, workers: int | None = None
                  ) -> np.ndarray:
    """Sum over the coordinates of <v(0).v(t)> per time segment, averaged over `particles`.

    Returns shape (n_frames // seg_len, max_lag + 1), internal velocity^2 units.
    """
    assert series.velocities is not None
    n = series.n_frames
    idx = np.sort(np.asarray(particles, dtype=np.intp))
    dv = series.drift_velocity if remove_drift else None
    n_seg = n // seg_len
    total = np.zeros((n_seg, max_lag + 1))
    for chunk in _chunks(idx, n):
        v = np.asarray(series.velocities[: n_seg * seg_len, chunk, :], dtype=np.float64)
        if dv is not None:
            v -= dv[: n_seg * seg_len, None, :]
        v = v.transpose(1, 2, 0).reshape(chunk.size, _DIM, n_seg, seg_len)
        acf = autocorrelation(v, max_lag=max_lag, normalization="pairs",
                              subtract_mean=False, workers=workers)
        total += acf.sum(axis=(0, 1))
    return total / idx.size


def _trapezoid_running(c: np.ndarray, dt: float) -> np.ndarray:
    out = np.zeros_like(c)
    out[..., 1:] = np.cumsum(0.5 * (c[..., 1:] + c[..., :-1]), axis=-1) * dt
    return out


def _vacf_cutoff(cn: np.ndarray) -> tuple[int, bool]:
    """Cutoff lag: twice the first k with |C(j)/C(0)| < level for every j in [k, 2k]."""
    big = np.flatnonzero(np.abs(cn) >= VACF_LEVEL)
    k_max = cn.size - 1
    ks = np.arange(1, k_max // 2 + 1)
    pos = np.searchsorted(big, ks)
    nxt = np.where(pos < big.size, big[np.minimum(pos, big.size - 1)], np.iinfo(np.intp).max)
    ok = np.flatnonzero(nxt > 2 * ks)
    if ok.size == 0:
        return k_max, False
    return int(min(2 * ks[ok[0]], k_max)), True


# ---------------------------------------------------------------------------------------
# public estimators
# ---------------------------------------------------------------------------------------


def vacf_estimate(slist: list[PositionSeries], name: str, cutoff: float | str,
                  remove_drift: bool, workers: int | None, *, force: bool,
                  common_warn: tuple[str, ...], diag: dict
                  ) -> tuple[Estimate | None, str]:
    """The VACF estimate of D for species `name`, or None and a note when it is not made.

    `diag` holds the shared diagnostics of the species (box, temperature, group sizes).
    """
    u = slist[0].units
    ds, ts = u.diffusion_scale, u.time_scale
    dt = slist[0].dt
    members = [s for s in slist if name in s.species_names]
    longest = max(members, key=lambda s: s.n_frames)
    idx = longest.species_indices(name)
    # probe: up to 256 particles of the longest replica, whole series
    probe_idx = idx[np.linspace(0, idx.size - 1, min(idx.size, 256)).astype(int)]
    kmax = max(2, longest.n_frames // 2)
    probe = _species_vacf(longest, probe_idx, seg_len=longest.n_frames, max_lag=kmax,
                          remove_drift=remove_drift, workers=workers)[0]
    if not probe[0] > 0:
        return None, f"{name}: velocities are all zero; VACF cross-check not made"
    cn = probe / probe[0]
    warn = list(common_warn)
    coarse = cn[1] < VACF_MIN_FIRST
    if coarse:
        text = (f"{name}: frames are too far apart for the VACF integral (the VACF falls to "
                f"{cn[1]:.2g} of its initial value within one frame, {dt * ts:.3g} "
                f"{u.time_unit})")
        if not force:
            return None, text + "; VACF cross-check not made"
        warn.append(text + "; the VACF estimate is biased")
    if cutoff == "auto":
        kc, decayed = _vacf_cutoff(cn)
        if not decayed:
            warn.append(f"{name}: the VACF has not decayed within half the run; the integral "
                        "is cut at the longest lag")
        rule = f"twice the lag after which |VACF|/VACF(0) < {VACF_LEVEL:g}"
    else:
        kc = int(round(float(cutoff) / dt))
        rule = "given"
        if not 1 <= kc <= kmax:
            raise InputError(
                f"VACF cutoff {float(cutoff) * ts:.4g} {u.time_unit} is outside the lags "
                f"(0, {kmax * dt * ts:.4g}]", expected="a cutoff shorter than half the run",
                fix="choose a shorter cutoff")
    kc = max(kc, 1)
    shortest = min(s.n_frames for s in members)
    total = sum(s.n_frames for s in members)
    # independent pieces are time segments: at least VACF_SEGMENT_FACTOR cutoffs long, or
    # shorter (down to two cutoffs) when that leaves fewer than VACF_TARGET_SEGMENTS.
    # Blocks of particles are not independent (they share the collective motion of the
    # box) and are used only when even that fails, with a warning.
    seg_len = min(max(VACF_SEGMENT_FACTOR * kc, 2 * kc + 2), shortest)
    if sum(s.n_frames // seg_len for s in members) < VACF_TARGET_SEGMENTS:
        seg_len = min(max(2 * kc + 2, total // VACF_TARGET_SEGMENTS), shortest)
    lag = min(2 * kc, seg_len - 1)
    if kc > lag:
        raise InputError(f"{name}: the VACF cutoff is longer than half the run",
                         path=members[0].source.path or None,
                         expected="a run several times longer than the VACF cutoff",
                         fix="choose a shorter VACF cutoff or run longer")
    n_seg = sum(s.n_frames // seg_len for s in members)
    n_part = [s.species_indices(name).size for s in members]
    blocks = 1
    if n_seg < VACF_MIN_SEGMENTS:
        blocks = max(1, min(min(n_part), math.ceil(VACF_MIN_SEGMENTS / max(n_seg, 1))))
        warn.append(f"{name}: the run holds only {n_seg} time segment(s) of two VACF cutoffs; "
                    f"the error bar uses {blocks} blocks of particles, which share the "
                    "collective motion of the box and may understate it: run longer")
    pieces, weights = [], []
    for s in members:
        if s.n_frames // seg_len == 0:
            continue
        for part in np.array_split(s.species_indices(name), blocks):
            pieces.append(_species_vacf(s, part, seg_len=seg_len, max_lag=lag,
                                        remove_drift=remove_drift, workers=workers))
            weights.extend([part.size] * (s.n_frames // seg_len))
    err_rule = (f"spread over {n_seg} independent time segment(s) of {seg_len} frames" + (
        f" x {blocks} block(s) of particles" if blocks > 1 else ""))
    if len(weights) < 4:
        text = f"{name}: too few particles and too short a run for a VACF error bar"
        if force:
            raise RunTooShortError(text, path=members[0].source.path or None,
                                   fix="run longer (at least 4 segments of 2 VACF cutoffs)")
        return None, text + "; VACF cross-check not made"
    c = np.concatenate(pieces, axis=0)  # (pieces, lag + 1), sum over dims
    run = _trapezoid_running(c, dt) / _DIM
    vals = run[:, kc]
    n = vals.size
    w = np.asarray(weights, dtype=np.float64) / float(np.sum(weights))
    value = float(w @ vals)
    # standard error of a weighted mean of independent pieces (weights ~ 1/variance)
    se = float(math.sqrt(np.sum(w**2 * (vals - value) ** 2) * n / (n - 1)))
    q = float(special.stdtrit(n - 1, 0.975))  # Student t quantile
    mean_c = w @ c
    time = np.arange(lag + 1) * dt
    diag = dict(diag)
    diag.update(cutoff=kc * dt * ts, cutoff_rule=rule, pieces=n, stderr_method=err_rule,
                vacf_first_lag=float(cn[1]),
                vacf_unit="normalised")
    curves = {
        "time": time * ts,
        "vacf": mean_c / mean_c[0] if mean_c[0] > 0 else mean_c,
        "running_integral": (w @ run) * ds,
        "running_integral_sd": np.sqrt(np.sum(w[:, None] ** 2 * (run - w @ run) ** 2, axis=0)
                                       * n / (n - 1)) * ds,
    }
    return Estimate(
        "self_diffusion", "vacf", value * ds, se * ds,
        ((value - q * se) * ds, (value + q * se) * ds), u.diffusion_unit,
        window=(0.0, kc * dt * ts), window_unit=u.time_unit, group=name,
        n_independent=float(n), diagnostics=diag, curves=curves,
        warnings=tuple(dict.fromkeys(warn)),
    ), ""
