"""Preparation of stress data for the viscosity estimators: replicas and segments.

The pressure tensor of each replica is trimmed of its initial transient (Chodera 2016), its
traceless components are checked and, when their mean differs significantly from zero,
offset; the time at which the stress correlation has decayed is found (Sokal's window, or
Flyvbjerg–Petersen blocking when a slow tail lies under fast oscillations), and the data are
cut into independent pieces (replicas, and segments of long runs) for the time
decomposition of Zhang, Otani & Maginn (2015).

References
----------
.. [1] P. J. Daivis and D. J. Evans, J. Chem. Phys. 100, 541 (1994).
.. [2] Y. Zhang, A. Otani and E. J. Maginn, J. Chem. Theory Comput. 11, 3537 (2015).
.. [3] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
.. [4] M. Jonsson, Phys. Rev. E 98, 043304 (2018).
.. [5] A. D. Sokal, "Monte Carlo methods in statistical mechanics", lecture notes (1997).
.. [6] J. D. Chodera, J. Chem. Theory Comput. 12, 1799 (2016).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from .errors import InputError, Note, RunTooShortError
from .series import StressSeries
from .stats import block_average, detect_equilibration, weighted_autocorrelation
from .stats.autocorr import _first_window

Components = Literal["all", "off_diagonal"]

#: Daivis–Evans weights for (P°xx, P°yy, P°zz, Pxy, Pxz, Pyz): eta = V/(10 kT) * integral of
#: sum_ij <P°_ij(0) P°_ij(t)>; each off-diagonal pair appears twice in the double sum.
_WEIGHTS_ALL = np.array([1.0, 1.0, 1.0, 2.0, 2.0, 2.0]) / 10.0
#: Off-diagonal components only: eta = V/(3 kT) * integral of sum_{i<j} <P_ij(0) P_ij(t)>.
_WEIGHTS_OFF = np.array([0.0, 0.0, 0.0, 1.0, 1.0, 1.0]) / 3.0

#: Traceless symmetric components as linear combinations of (xx, yy, zz, xy, xz, yz):
#: P°_ii = P_ii - tr(P)/3; off-diagonals unchanged.
_TRACELESS = np.eye(6)
_TRACELESS[:3, :3] -= 1.0 / 3.0

#: Segments must be at least this many times the time at which the running integral levels
#: off (rule stated in the issue; makes neighbouring segments nearly independent).
SEGMENT_FACTOR = 10.0
#: Target number of replicas plus segments for the time decomposition.
TARGET_PIECES = 20
#: Fewest independent pieces for which an error bar is reported.
MIN_PIECES = 4
#: Sokal's window constant (window >= c * tau_int).
WINDOW_C = 5.0
#: The blocking level-off time replaces the autocorrelation window when it is this many
#: times longer (separated time scales: a slow tail under fast oscillations).
SLOW_TAIL_FACTOR = 2.0


def traceless_stress(pressure: np.ndarray) -> np.ndarray:
    """The six independent components of the traceless symmetric pressure tensor.

    Parameters
    ----------
    pressure : ndarray, shape (6, n)
        P_xx, P_yy, P_zz, P_xy, P_xz, P_yz (any pressure unit).

    Returns
    -------
    ndarray, shape (6, n)
        P°_xx, P°_yy, P°_zz (diagonal minus a third of the trace) and P_xy, P_xz, P_yz,
        in the input's unit. The input is not modified.

    References
    ----------
    .. [1] Daivis & Evans, J. Chem. Phys. 100, 541 (1994).
    """
    return _TRACELESS @ np.asarray(pressure, dtype=np.float64)


def _weights(components: Components) -> np.ndarray:
    if components == "all":
        return _WEIGHTS_ALL
    if components == "off_diagonal":
        return _WEIGHTS_OFF
    raise ValueError(f"components must be 'all' or 'off_diagonal', got {components!r}")




@dataclass(frozen=True)
class _Piece:
    """One independent piece of data: a replica or a segment of one."""

    stress: tuple[np.ndarray, ...]  # six raw pressure rows of L samples (views)
    offset: np.ndarray  # (6,) subtracted from the traceless components (usually zero)
    prefactor: float  # V / (k_B T) in internal units


@dataclass(frozen=True)
class _Prepared:
    pieces: tuple[_Piece, ...]
    dt: float
    t_level: float
    segment_length: int
    max_lag: int
    skipped: tuple[float, ...]
    notes: tuple[str, ...]
    level_rule: str = "stress autocorrelation window"
    # per-piece weighted stress ACF and Helfand MSD when computed chunk by chunk
    # (transport.viscosity_streaming); None: the estimators compute them from the pieces
    acfs: np.ndarray | None = None
    helfand_msd: np.ndarray | None = None


def _as_list(series: StressSeries | Sequence[StressSeries]) -> list[StressSeries]:
    if isinstance(series, StressSeries):
        return [series]
    out = list(series)
    if not out:
        raise ValueError("no stress series given")
    return out


def _level_off_time(
    p: Sequence[np.ndarray], offset: np.ndarray, weights: np.ndarray, dt: float
) -> tuple[float, str, bool]:
    """Time by which the running Green–Kubo integral has levelled off, and how it was found.

    Two measures are taken. (a) Sokal's automatic window on the weighted stress
    autocorrelation: the smallest lag M with M >= c * tau_int(M), c = 5. It is right for a
    single decay (atomic liquids), but in a flexible molecular liquid the autocorrelation at
    short lags is dominated by large, fast, oscillating intramolecular terms (bond stretching
    and bending, 10-30 fs) that make tau_int tiny, while a small slow tail (reorientation,
    structural relaxation, picoseconds and longer) carries most of the integral. (b) The block
    length at which block means of each traceless component stop being correlated
    (Flyvbjerg–Petersen blocking with Jonsson's M-test, [1]_, [2]_); block means of length b
    have variance proportional to the integral of the autocorrelation up to ~b, so they stop
    changing when the running integral has levelled off, including slow tails of small
    amplitude. A quarter of the median block length over the weighted components is the
    level-off time of (b) (on the Lennard-Jones data it is 1.0-1.5x (a)).

    The result is (a) unless (b) exceeds it by more than a factor of 2, the sign of
    separated time scales; then it is (b). Returns (time, rule, converged) where `converged`
    is False when the blocking test found no level free of correlation (the run is too short
    to show the plateau).

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
    .. [2] M. Jonsson, Phys. Rev. E 98, 043304 (2018).
    """
    n = p[0].shape[0]
    probe = min(n, 1 << 18)
    max_lag = max(8, probe // 4)
    acf = weighted_autocorrelation([[row[:probe] for row in p]], weights, max_lag=max_lag,
                                   mix=_TRACELESS, offset=offset)[0]
    if not acf[0] > 0:
        return dt, "stress autocorrelation window", True
    m, _ = _first_window(acf / acf[0], WINDOW_C)
    t_sokal = (m or max_lag) * dt
    t_block, converged = _block_time(p, offset, weights, dt)
    if t_block > SLOW_TAIL_FACTOR * t_sokal:
        return t_block, "block averaging of the stress (slow tail)", converged
    return t_sokal, "stress autocorrelation window", converged


def _block_time(
    p: Sequence[np.ndarray], offset: np.ndarray, weights: np.ndarray, dt: float
) -> tuple[float, bool]:
    """A quarter of the median blocking level-off length of the weighted traceless
    components (internal time units), and whether most components converged."""
    nb = min(p[0].shape[0], 1 << 22)
    sizes, conv = [], []
    for c in np.nonzero(weights > 0)[0]:
        # one traceless component from the rows it uses (three for a diagonal, one else),
        # without stacking all six rows for each component
        comp = sum(float(w) * p[j][:nb] for j, w in enumerate(_TRACELESS[c]) if w != 0.0)
        res = block_average(comp - offset[c])
        sizes.append(res.block_size)
        conv.append(res.converged)
    return 0.25 * float(np.median(sizes)) * dt, sum(conv) * 2 > len(conv)


def _equilibration_start(pressure: np.ndarray) -> int:
    """First sample after the initial transient of the hydrostatic pressure (Chodera 2016).

    The trace is block-averaged to at most 2^15 points first: the start is then resolved
    to 1/2^15 of the run, and the cost no longer grows with the run length.
    """
    n = pressure.shape[1]
    block = max(1, -(-n // (1 << 15)))
    m = n // block
    coarse = sum(pressure[c, : m * block].reshape(m, block).mean(axis=1) for c in range(3))
    coarse = coarse / 3.0
    if coarse.size < 16:
        return 0
    return int(detect_equilibration(coarse).start) * block


def _check_fluctuates(rows: Sequence[np.ndarray], weights: np.ndarray) -> bool:
    """True if some traceless component with nonzero weight varies (chunked, early exit)."""
    n = rows[0].shape[0]
    mix = _TRACELESS[weights > 0]
    step = 1 << 16
    for lo in range(0, n, step):
        y = mix @ np.stack([r[lo: lo + step + 1] for r in rows])
        if np.any(np.ptp(y, axis=1) > 0):
            return True
    return False


def _significant_mean(rows: Sequence[np.ndarray], weights: np.ndarray) -> tuple[np.ndarray, str]:
    """Mean of each traceless component, kept only where it differs significantly from 0.

    An isotropic liquid in equilibrium has zero mean traceless stress, so the Green–Kubo
    autocorrelation is computed without subtracting the sample mean: subtracting it biases
    the running integral low by about 2 eta t / T (t the lag, T the run length). A mean
    beyond 4 correlation-aware standard errors (from the spread of 20 block means) is
    removed and reported. Returns the offsets (zero where not significant) and the names of
    the shifted components. Block means are taken on views: nothing of size N is allocated.
    """
    names = ("xx", "yy", "zz", "xy", "xz", "yz")
    n = rows[0].shape[0]
    nb = 20
    offset = np.zeros(6)
    if n < 20 * nb:
        return offset, ""
    raw_blocks = np.stack([r[: (n // nb) * nb].reshape(nb, -1).mean(axis=1) for r in rows])
    raw_means = np.array([float(r.mean()) for r in rows])
    blocks = _TRACELESS @ raw_blocks
    means = _TRACELESS @ raw_means
    se = blocks.std(axis=1, ddof=1) / np.sqrt(nb)
    bad = (np.abs(means) > 4 * se) & (weights > 0)
    offset[bad] = means[bad]
    return offset, ", ".join(nm for nm, b in zip(names, bad, strict=True) if b)


def _prepare(
    series: list[StressSeries],
    *,
    components: Components,
    skip: float | Literal["auto"] | None,
    max_lag: float | None,
    n_pieces: int | None = None,
) -> _Prepared:
    weights = _weights(components)
    dts = {round(s.dt, 15) for s in series}
    dt = series[0].dt
    if any(not math.isclose(s.dt, dt, rel_tol=1e-9) for s in series):
        raise InputError(
            f"replicas have different sampling intervals {sorted(dts)}",
            path=series[-1].source.path or None,
            expected="the same time between samples in every replica",
            fix="analyse runs with different output intervals separately",
        )
    units = {s.units.name for s in series}
    if len(units) > 1:
        raise InputError(
            f"replicas use different unit systems {sorted(units)}",
            path=series[-1].source.path or None,
            expected="one unit system across replicas",
        )
    notes: list[str] = []
    skipped: list[float] = []
    trimmed: list[list[np.ndarray]] = []
    offsets: list[np.ndarray] = []
    prefactors: list[float] = []
    for s in series:
        if s.temperature is None:
            raise InputError(
                "temperature unknown",
                path=s.source.path or None,
                expected="a temperature column or a set point",
                fix="pass --temperature (the thermostat set point)",
            )
        start = 0
        if skip == "auto":
            start = _equilibration_start(s.pressure)
        elif skip:
            start = int(round(float(skip) / s.dt))
        if s.n < 16:
            raise InputError(
                f"only {s.n} samples of the pressure tensor",
                path=s.source.path or None,
                expected="a time series of at least a few hundred samples",
                fix="write the pressure tensor more often or run longer",
            )
        if start >= s.n - 16:
            raise InputError(
                f"skipping {start} of {s.n} samples leaves nothing to analyse",
                path=s.source.path or None,
                expected="a skip time shorter than the run",
                fix="use a shorter --skip",
            )
        skipped.append(start * s.dt)
        p = [s.pressure[c, start:] for c in range(6)]  # views
        if not _check_fluctuates(p, weights):
            raise InputError(
                "the traceless pressure tensor does not fluctuate (every component used is "
                "constant)", path=s.source.path or None,
                expected="pressure-tensor components that fluctuate in time",
                fix="check the pressure columns (printed with enough digits? the full "
                "pressure compute?)",
            )
        offset, shifted = _significant_mean(p, weights)
        offsets.append(offset)
        if shifted:
            notes.append(
                f"{s.source.path or 'series'}: mean traceless stress of {shifted} differs "
                "from zero beyond 4 standard errors; an isotropic liquid in equilibrium has "
                "zero mean (is the system solid-like, flowing or still equilibrating?); the "
                "mean was removed"
            )
        trimmed.append(p)
        vol = s.volume if np.ndim(s.volume) == 0 else float(np.mean(s.volume[start:]))
        prefactors.append(float(vol) / (s.units.boltzmann * s.temperature))
        if np.ndim(s.volume) != 0:
            v = s.volume[start:]
            if np.std(v) > 1e-3 * np.mean(v):
                notes.append(Note(
                    f"{s.source.path or 'series'}: the volume fluctuates "
                    f"({np.std(v) / np.mean(v):.2%} rms); the mean volume is used "
                    "(Green–Kubo is exact at constant volume)"))

    tscale, tunit = series[0].units.time_scale, series[0].units.time_unit
    ilong = max(range(len(trimmed)), key=lambda i: trimmed[i][0].shape[0])
    t_level, level_rule, level_converged = _level_off_time(trimmed[ilong], offsets[ilong],
                                                           weights, dt)
    if not level_converged:
        notes.append(
            "the stress stays correlated over the longest blocks the run allows (block "
            "averaging found no uncorrelated level): the running integral may not have "
            "levelled off and the viscosity may be too small; run longer"
        )
    lvl = max(1, int(round(t_level / dt)))
    min_len = int(math.ceil(SEGMENT_FACTOR * lvl))
    total = sum(a[0].shape[0] for a in trimmed)
    target = n_pieces or TARGET_PIECES
    # segment length: as long as possible while giving about `target` pieces in all,
    # and never shorter than SEGMENT_FACTOR level-off times.
    seg_len = max(min_len, total // target)
    seg_len = min(seg_len, max(a[0].shape[0] for a in trimmed))
    pieces: list[_Piece] = []
    for p, pref, off in zip(trimmed, prefactors, offsets, strict=True):
        length = p[0].shape[0]
        k = length // seg_len
        if k == 0:
            if length >= min_len:
                pieces.append(_Piece(tuple(p), off, pref))
            continue
        for j in range(k):
            pieces.append(_Piece(tuple(row[j * seg_len:(j + 1) * seg_len] for row in p),
                                 off, pref))
    if len(series) == 1 or any(a[0].shape[0] >= 2 * seg_len for a in trimmed):
        notes.append(Note(
            f"{len(pieces)} independent pieces: {len(series)} replica(s) split into "
            f"segments of {seg_len} samples, {seg_len / lvl:.0f}x the time at which the "
            f"stress correlation has decayed ({t_level * tscale:.3g} {tunit}, from the "
            f"{level_rule})"))
    shortest = min((pc.stress[0].shape[0] for pc in pieces), default=0)
    if max_lag is None:
        lag = min(shortest // 2, 50 * lvl) if shortest else 0
    else:
        lag = int(round(max_lag / dt))
        if shortest and lag > shortest // 2:
            notes.append(Note(
                f"max lag reduced from {lag} to {shortest // 2} samples (half a segment)"))
            lag = shortest // 2
    return _Prepared(
        pieces=tuple(pieces),
        dt=dt,
        t_level=t_level,
        segment_length=seg_len,
        max_lag=max(lag, 2),
        skipped=tuple(skipped),
        notes=tuple(notes),
        level_rule=level_rule,
    )


def _too_short(prep: _Prepared, series: list[StressSeries], what: str) -> RunTooShortError:
    have = sum(s.duration for s in series)
    need = MIN_PIECES * SEGMENT_FACTOR * prep.t_level
    u = series[0].units
    scale = u.time_scale
    return RunTooShortError(
        f"{what}: the data hold {len(prep.pieces)} independent piece(s) at least "
        f"{SEGMENT_FACTOR:.0f}x the stress decorrelation time ({prep.t_level * scale:.3g} "
        f"{u.time_unit}); at least {MIN_PIECES} are needed for an error bar",
        needed_time=need * scale,
        extra_time=max(need - have, 0.0) * scale,
        time_unit=u.time_unit,
        path=series[-1].source.path or None,
    )
