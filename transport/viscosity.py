"""Shear viscosity from the pressure tensor: Green–Kubo and Einstein (Helfand) estimators.

Both estimators use all independent components of the traceless symmetric pressure tensor
with the weights of Daivis & Evans [1]_ (or, on request, the three off-diagonal components
only), split the data into independent replicas (several files) and segments (pieces of a
long run, each much longer than the stress correlation time), and derive the error bar from
the spread between those independent pieces, so that it accounts for correlation.

The Green–Kubo cutoff follows the time-decomposition method of Zhang, Otani & Maginn [2]_:
the standard deviation of the running integral across replicas, sigma(t), is fitted by
A t^b; the mean running integral is fitted, with weights 1/t^b, by a double exponential up to
the time where sigma reaches a set fraction (0.4) of the mean; the plateau of the fit is the
viscosity. Its standard error is the jackknife over replicas of that whole fit.

The Einstein estimator fits the mean-squared time integral of the stress (Helfand moment
built from the pressure tensor, [3]_, [4]_) over its linear regime, one slope per replica.

References
----------
.. [1] P. J. Daivis and D. J. Evans, "Comparison of constant pressure and constant volume
   nonequilibrium simulations of sheared model decane", J. Chem. Phys. 100, 541 (1994).
.. [2] Y. Zhang, A. Otani and E. J. Maginn, "Reliable viscosity calculation from equilibrium
   molecular dynamics simulations: a time decomposition method", J. Chem. Theory Comput. 11,
   3537 (2015).
.. [3] E. Helfand, "Transport coefficients from dissipation in a canonical ensemble",
   Phys. Rev. 119, 1 (1960).
.. [4] B. Hess, "Determining the shear viscosity of model liquids from molecular dynamics
   simulations", J. Chem. Phys. 116, 209 (2002).
.. [5] D. Alfè and M. J. Gillan, "First-principles calculation of transport coefficients",
   Phys. Rev. Lett. 81, 5161 (1998).
"""

from __future__ import annotations

import math
import warnings as _warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import optimize, stats

from ._parallel import thread_map
from .checks import check_replicas, check_viscosity_result, stress_sampling
from .errors import InputError, RunTooShortError
from .estimate import Estimate
from .series import StressSeries
from .stats import block_average, detect_equilibration, weighted_autocorrelation, weighted_msd
from .stats.autocorr import _first_window

__all__ = [
    "ViscosityAnalysis",
    "analyse_viscosity",
    "einstein",
    "green_kubo",
    "traceless_stress",
]

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
#: The slow stress relaxation is "unresolved" when the decorrelation time on the first
#: eighth, quarter, half and the whole of the longest run grows as T^b with b at least this
#: (a time set by the liquid stays put, b ~ 0; one set by the run length has b ~ 1).
UNRESOLVED_EXPONENT = 0.5
#: Fewest samples in an eighth of the run for the growth check to be made.
GROWTH_MIN_SAMPLES = 4096
_EIN_K0 = 3.0
_EIN_K1 = 0.2


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


# ---------------------------------------------------------------------------------------
# preparation: equilibration, replicas and segments
# ---------------------------------------------------------------------------------------


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
    #: decorrelation time on the first eighth, quarter, half and all of the longest run
    #: (internal time units), or None when the run is too short for the check
    level_growth: tuple[float, ...] | None = None

    @property
    def growth_exponent(self) -> float | None:
        """b in t_block ~ T^b over the run (None without the check)."""
        return None if self.level_growth is None else _growth_exponent(self.level_growth)

    @property
    def resolved(self) -> bool:
        """False when the decorrelation time grows with the data (see `_growth_note`)."""
        b = self.growth_exponent
        return b is None or b < UNRESOLVED_EXPONENT


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


def _growth_exponent(times: Sequence[float]) -> float:
    """Exponent b of t ~ T^b fitted to the times on 1/8, 1/4, 1/2 and all of a run."""
    x = np.log(np.array([0.125, 0.25, 0.5, 1.0]))
    return float(np.polyfit(x, np.log(np.asarray(times)), 1)[0])


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
                notes.append(
                    f"{s.source.path or 'series'}: the volume fluctuates "
                    f"({np.std(v) / np.mean(v):.2%} rms); the mean volume is used "
                    "(Green–Kubo is exact at constant volume)"
                )

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
    n_long = trimmed[ilong][0].shape[0]
    growth = None
    if n_long // 8 >= GROWTH_MIN_SAMPLES:
        growth = (*(
            _level_off_time([row[: n_long // f] for row in trimmed[ilong]], offsets[ilong],
                            weights, dt)[0] for f in (8, 4, 2)), t_level)
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
        notes.append(
            f"{len(pieces)} independent pieces: {len(series)} replica(s) split into "
            f"segments of {seg_len} samples, {seg_len / lvl:.0f}x the time at which the "
            f"stress correlation has decayed ({t_level * tscale:.3g} {tunit}, from the "
            f"{level_rule})"
        )
    shortest = min((pc.stress[0].shape[0] for pc in pieces), default=0)
    if max_lag is None:
        lag = min(shortest // 2, 50 * lvl) if shortest else 0
    else:
        lag = int(round(max_lag / dt))
        if shortest and lag > shortest // 2:
            notes.append(
                f"max lag reduced from {lag} to {shortest // 2} samples (half a segment)"
            )
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
        level_growth=growth,
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


# ---------------------------------------------------------------------------------------
# Green–Kubo
# ---------------------------------------------------------------------------------------


def _double_exp(t: np.ndarray, a: float, alpha: float, tau1: float, tau2: float) -> np.ndarray:
    return a * (alpha * tau1 * (-np.expm1(-t / tau1)) + (1 - alpha) * tau2 * (-np.expm1(-t / tau2)))


def _double_exp_jac(
    t: np.ndarray, a: float, alpha: float, tau1: float, tau2: float
) -> np.ndarray:
    x1, x2 = t / tau1, t / tau2
    e1, e2 = np.exp(-x1), np.exp(-x2)
    m1, m2 = -np.expm1(-x1), -np.expm1(-x2)
    return np.stack(
        [
            alpha * tau1 * m1 + (1 - alpha) * tau2 * m2,
            a * (tau1 * m1 - tau2 * m2),
            a * alpha * (m1 - x1 * e1),
            a * (1 - alpha) * (m2 - x2 * e2),
        ],
        axis=-1,
    )


def _fit_power(t: np.ndarray, sigma: np.ndarray) -> tuple[float, float]:
    """Fit sigma(t) = A t^b by least squares in log space; returns (A, b)."""
    ok = (t > 0) & (sigma > 0) & np.isfinite(sigma)
    if ok.sum() < 3:
        return float("nan"), 0.5
    # log-spaced subsample so every decade weighs the same
    idx = np.unique(np.geomspace(1, ok.sum(), num=min(200, int(ok.sum()))).astype(int) - 1)
    x = np.log(t[ok][idx])
    y = np.log(sigma[ok][idx])
    b, loga = np.polyfit(x, y, 1)
    return float(np.exp(loga)), float(b)


def _fit_double_exp(
    t: np.ndarray, eta: np.ndarray, b: float, p0: Sequence[float] | None = None
) -> np.ndarray:
    """Weighted double-exponential fit of the mean running integral (Zhang et al. 2015).

    The fit runs on dimensionless time t/t_max and integral eta/max|eta| so that it behaves
    the same in SI and reduced units; parameters are returned in the input's units.
    """
    idx = _fit_points(t.size)
    tscale = float(t[-1])
    yscale = float(np.max(np.abs(eta))) or 1.0
    tt, yy = t[idx] / tscale, eta[idx] / yscale
    sig = np.maximum(tt, tt[0] if tt[0] > 0 else 1.0) ** b
    slope0 = yy[1] / tt[1] if tt.size > 1 and tt[1] > 0 else 1.0
    plateau = max(float(np.mean(yy[-max(1, yy.size // 5):])), 1e-12)
    if p0 is None:
        guesses = []
        for tau1 in (0.01, 0.05):
            for alpha in (0.5, 0.9):
                tau2 = max((plateau / max(slope0, 1e-12) - alpha * tau1) / (1 - alpha), tau1)
                guesses.append([max(slope0, 1e-12), alpha, tau1, min(tau2, 10.0)])
    else:
        a, alpha, tau1, tau2 = p0
        guesses = [[a * tscale / yscale, alpha, tau1 / tscale, tau2 / tscale]]
    lower = [0.0, 0.0, 1e-6, 1e-6]
    upper = [np.inf, 1.0, 100.0, 100.0]
    def _fit(g: Sequence[float], nfev: int) -> tuple[np.ndarray | None, float]:
        g = [float(np.clip(v, lo * 1.0001 if lo else 0.0, hi)) for v, lo, hi in
             zip(g, lower, upper, strict=True)]
        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                res = optimize.least_squares(
                    lambda q: (_double_exp(tt, *q) - yy) / sig, g,
                    jac=lambda q: _double_exp_jac(tt, *q) / sig[:, None],
                    bounds=(lower, upper), max_nfev=nfev, method="trf",
                )
        except (RuntimeError, ValueError):
            return None, np.inf
        if not np.all(np.isfinite(res.x)):
            return None, np.inf
        return res.x, float(2.0 * res.cost)

    # a short fit from each starting guess, then the best one polished
    best, best_cost = None, np.inf
    for g in guesses:
        popt, cost = _fit(g, 60 if len(guesses) > 1 else 400)
        if cost < best_cost:
            best, best_cost = popt, cost
    if best is not None and len(guesses) > 1:
        popt, cost = _fit(best, 400)
        if cost <= best_cost:
            best = popt
    if best is None:
        raise RuntimeError("double-exponential fit did not converge")
    a, alpha, tau1, tau2 = best
    return np.array([a * yscale / tscale, alpha, tau1 * tscale, tau2 * tscale])


def _fit_points(n: int) -> np.ndarray:
    """Indices of the (at most 400) points of the running integral used by the fit."""
    return np.unique(np.linspace(0, n - 1, num=min(n, 400)).astype(int))


def _plateau_sensitivity(
    t: np.ndarray, popt: np.ndarray, b: float
) -> tuple[np.ndarray, np.ndarray]:
    """Linear response of the fitted plateau to a change of the fitted curve.

    Returns the indices of the fitted points and h such that a change dy of the running
    integral at those points moves the plateau by ``h @ dy`` (weighted Gauss–Newton step of
    the same fit, pseudo-inverse for poorly determined directions).
    """
    idx = _fit_points(t.size)
    # work in the fit's dimensionless units (t / t_max, eta / plateau) so that the
    # pseudo-inverse's cut-off means the same in SI and reduced units
    tscale = float(t[-1])
    yscale = abs(_plateau(popt)) or 1.0
    tt = t[idx] / tscale
    a, alpha, tau1, tau2 = popt
    ps = (a * tscale / yscale, alpha, tau1 / tscale, tau2 / tscale)
    sig = np.maximum(tt, tt[0] if tt[0] > 0 else 1.0) ** b
    jac = _double_exp_jac(tt, *ps) / sig[:, None]
    a, alpha, tau1, tau2 = ps
    grad = np.array([alpha * tau1 + (1 - alpha) * tau2, a * (tau1 - tau2), a * alpha,
                     a * (1 - alpha)])
    h = (grad @ np.linalg.pinv(jac, rcond=1e-10)) / sig
    return idx, h


def _plateau(p: np.ndarray) -> float:
    a, alpha, tau1, tau2 = p
    return float(a * (alpha * tau1 + (1 - alpha) * tau2))


@dataclass(frozen=True)
class ViscosityAnalysis:
    """Green–Kubo and (optionally) Einstein estimates from one analysis.

    Attributes
    ----------
    green_kubo : Estimate or None
    einstein : Estimate or None
    """

    green_kubo: Estimate | None
    einstein: Estimate | None

    @property
    def estimates(self) -> tuple[Estimate, ...]:
        """The estimates that were made, Green–Kubo first."""
        return tuple(e for e in (self.green_kubo, self.einstein) if e is not None)


def _running_integrals(prep: _Prepared, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-piece weighted stress ACF (internal pressure^2) and running integral (viscosity)."""
    lag = prep.max_lag

    def acf(pc: _Piece) -> np.ndarray:
        return weighted_autocorrelation([pc.stress], weights, max_lag=lag, mix=_TRACELESS,
                                        offset=pc.offset, workers=1)[0]

    # one piece per thread: the FFTs, products and copies release the GIL
    acfs = np.array(thread_map(acf, prep.pieces)).reshape(len(prep.pieces), lag + 1)
    pref = np.array([pc.prefactor for pc in prep.pieces])
    integ = np.zeros_like(acfs)
    # trapezoid rule: running integral of the sampled ACF
    integ[:, 1:] = np.cumsum(0.5 * (acfs[:, 1:] + acfs[:, :-1]), axis=1) * prep.dt
    return acfs, integ * pref[:, None]


def green_kubo(
    series: StressSeries | Sequence[StressSeries],
    *,
    cutoff: float | Literal["auto"] = "auto",
    max_lag: float | None = None,
    skip: float | Literal["auto"] | None = "auto",
    components: Components = "all",
    sigma_fraction: float = 0.4,
    n_pieces: int | None = None,
) -> Estimate:
    """Green–Kubo shear viscosity with the time-decomposition cutoff and error bar.

    Parameters
    ----------
    series : StressSeries or sequence of StressSeries
        One run, or independent replicas of the same state point.
    cutoff : float or "auto"
        Upper limit of the integral in internal time units (s, or tau). ``"auto"`` uses the
        time-decomposition rule of [2]_: the double-exponential fit up to where the spread
        between replicas reaches `sigma_fraction` of the mean. A number integrates the mean
        running integral up to that time, without fit.
    max_lag : float, optional
        Longest lag of the autocorrelation (internal time units). Default: the smaller of
        half a segment and 50 decorrelation times.
    skip : float, "auto" or None
        Initial transient to drop from each replica: a time (internal units), ``"auto"``
        (equilibration detection, Chodera 2016), or None.
    components : {"all", "off_diagonal"}
        All six independent components of the traceless tensor with Daivis–Evans weights
        [1]_, or the three off-diagonal ones only.
    sigma_fraction : float
        Fraction of the mean at which the replica spread sets the cutoff (0.4 in [2]_).
    n_pieces : int, optional
        Target number of independent pieces (replicas times segments); default 20.

    Returns
    -------
    Estimate
        ``shear_viscosity`` by ``green_kubo``, in mPa s (or reduced units). ``window`` is
        (0, cutoff) in ps (or tau). ``curves`` hold ``time``, ``running_integral``,
        ``running_integral_std``, ``acf_normalised``, ``sigma``, ``sigma_fit`` and ``fit``.

    Raises
    ------
    RunTooShortError
        Fewer than four independent pieces; carries a partial estimate and the extra run
        length needed.

    References
    ----------
    .. [1] Daivis & Evans, J. Chem. Phys. 100, 541 (1994).
    .. [2] Zhang, Otani & Maginn, J. Chem. Theory Comput. 11, 3537 (2015).
    """
    return analyse_viscosity(
        series, method="green-kubo", cutoff=cutoff, max_lag=max_lag, skip=skip,
        components=components, sigma_fraction=sigma_fraction, n_pieces=n_pieces,
    ).green_kubo  # type: ignore[return-value]


def einstein(
    series: StressSeries | Sequence[StressSeries],
    *,
    fit_window: tuple[float, float] | Literal["auto"] = "auto",
    max_lag: float | None = None,
    skip: float | Literal["auto"] | None = "auto",
    components: Components = "all",
    n_pieces: int | None = None,
) -> Estimate:
    """Einstein (Helfand) shear viscosity from the mean-squared integrated stress.

    eta = lim V / (2 k_B T t) <(G(t0 + t) - G(t0))^2>, with G(t) the time integral of the
    traceless stress, averaged over components with Daivis–Evans weights. The slope is fitted
    per independent piece over the linear regime; the spread of those slopes gives the error.

    Parameters
    ----------
    series : StressSeries or sequence of StressSeries
        One run, or independent replicas.
    fit_window : (float, float) or "auto"
        Fit range of lag times (internal units). ``"auto"``: from the stress decorrelation
        time (Sokal window) to the longest lag.
    max_lag, skip, components, n_pieces
        As in :func:`green_kubo`.

    Returns
    -------
    Estimate
        ``shear_viscosity`` by ``einstein``; ``window`` is the fit range in ps (or tau).

    References
    ----------
    .. [1] Helfand, Phys. Rev. 119, 1 (1960).
    .. [2] Hess, J. Chem. Phys. 116, 209 (2002): the Einstein form is correct for the
       pressure-tensor (not the coordinate) Helfand moment under periodic boundaries.
    """
    return analyse_viscosity(
        series, method="einstein", fit_window=fit_window, max_lag=max_lag, skip=skip,
        components=components, n_pieces=n_pieces,
    ).einstein  # type: ignore[return-value]


def analyse_viscosity(
    series: StressSeries | Sequence[StressSeries],
    *,
    method: Literal["green-kubo", "einstein", "both"] = "green-kubo",
    cutoff: float | Literal["auto"] = "auto",
    fit_window: tuple[float, float] | Literal["auto"] = "auto",
    max_lag: float | None = None,
    skip: float | Literal["auto"] | None = "auto",
    components: Components = "all",
    sigma_fraction: float = 0.4,
    n_pieces: int | None = None,
) -> ViscosityAnalysis:
    """Green–Kubo and/or Einstein viscosity sharing one preparation of the data.

    Parameters are those of :func:`green_kubo` and :func:`einstein`; `method` chooses which
    estimates are made.

    Returns
    -------
    ViscosityAnalysis
    """
    if method not in ("green-kubo", "einstein", "both"):
        raise ValueError(f"method must be 'green-kubo', 'einstein' or 'both', got {method!r}")
    if not 0 < sigma_fraction < 1:
        raise ValueError(f"sigma_fraction must lie in (0, 1), got {sigma_fraction!r}")
    slist = _as_list(series)
    weights = _weights(components)
    check_replicas(slist)  # units before sampling intervals (checks.py)
    prep = _prepare(slist, components=components, skip=skip, max_lag=max_lag,
                    n_pieces=n_pieces)
    common_warn = tuple(w for s in slist for w in s.warnings) + prep.notes
    common_warn += stress_sampling(prep, slist, weights)  # refuses a too coarse sampling
    growth_note = _growth_note(prep, slist[0].units)
    common_warn += (growth_note,) if growth_note else ()
    for s in slist:
        if s.temperature_source and "mean" in s.temperature_source:
            common_warn += (
                f"{s.source.path or 'series'}: temperature is the {s.temperature_source}; "
                "pass --temperature with the set point to avoid its fluctuation bias",
            )
    gk = ei = None
    if method in ("green-kubo", "both"):
        gk = _green_kubo(prep, slist, weights, cutoff, sigma_fraction, components, common_warn)
    if method in ("einstein", "both"):
        ei = _einstein(prep, slist, weights, fit_window, components, common_warn)
    return check_viscosity_result(ViscosityAnalysis(gk, ei), slist)  # no interval <= 0


def _common_diag(prep: _Prepared, slist: list[StressSeries], components: str) -> dict:
    u = slist[0].units
    return {
        "components": components,
        "replicas": len(slist),
        "pieces": len(prep.pieces),
        "segment_length": prep.segment_length * prep.dt * u.time_scale,
        "decorrelation_time": prep.t_level * u.time_scale,
        "decorrelation_rule": prep.level_rule,
        "decorrelation_resolved": prep.resolved,
        "decorrelation_growth_times": (
            None if prep.level_growth is None
            else [x * u.time_scale for x in prep.level_growth]),
        "decorrelation_growth_exponent": prep.growth_exponent,
        "max_lag": prep.max_lag * prep.dt * u.time_scale,
        "skipped": [x * u.time_scale for x in prep.skipped],
        "temperature": [s.temperature for s in slist],
        "temperature_source": [s.temperature_source for s in slist],
        "volume_mean": [s.mean_volume for s in slist],
        "time_unit": u.time_unit,
    }


def _interval(value: float, stderr: float, n: int) -> tuple[float, float]:
    q = float(stats.t.ppf(0.975, max(n - 1, 1)))
    return value - q * stderr, value + q * stderr


def _growth_note(prep: _Prepared, u) -> str | None:
    """A warning when the stress decorrelation time is set by the run length.

    The decorrelation time in use (`_level_off_time`: Sokal's window, or the blocking
    time when a slow tail makes it 2x longer) is measured on the first eighth, quarter,
    half and the whole of the longest run and fitted as T^b. A time set by the liquid
    stays put as data are added (b ~ 0: Sokal's window on atomic liquids); when b reaches
    `UNRESOLVED_EXPONENT`, the time is set by the run length: block averaging keeps finding
    correlation at the longest blocks the data allow (a slow, small stress tail: molecular
    reorientation, structural relaxation), so the data cannot show where the running
    integral levels off and the value may be a truncated integral. Measured: Lennard-Jones
    logs b = 0.0-0.42 (one switch from Sokal to blocking); flexible n-hexane, 2 ns b = 0.82, 250 ps pieces b = 0.5-1.0.
    """
    if prep.resolved:
        return None
    times = ", ".join(f"{t * u.time_scale:.3g}" for t in prep.level_growth)  # type: ignore
    return (
        f"the stress decorrelation time grows with the data ({times} {u.time_unit} on "
        f"the first eighth, quarter, half and all of the run, ~T^{prep.growth_exponent:.2f})"
        ": the run does not resolve the slow stress "
        "relaxation, so it cannot show that the running integral has levelled off and the "
        "viscosity may be too small; run longer (or add replicas) until this time stops "
        "growing"
    )


def _rising_note(integ: np.ndarray, k: int, prep: _Prepared, u) -> str | None:
    """A warning when the running integral rises significantly from lag k to the last lag."""
    rising = _still_rising(integ, k)
    if rising is None:
        return None
    vs, ts = u.viscosity_scale, u.time_scale
    rise, rise_se = rising
    return (
        f"the running integral keeps rising after {k * prep.dt * ts:.3g} {u.time_unit}: it "
        f"grows by {rise * vs:.3g} +- {rise_se * vs:.2g} {u.viscosity_unit} up to the "
        f"maximum lag ({prep.max_lag * prep.dt * ts:.3g} {u.time_unit}), so the plateau is "
        "not reached and the viscosity is probably too small; run longer (or add replicas) "
        "so that segments hold the slow relaxation"
    )


def _still_rising(integ: np.ndarray, k: int) -> tuple[float, float] | None:
    """Rise of the running integral from lag k to the last lag, if significant.

    Paired across the independent pieces: the change I(t_max) - I(t_k) of each piece,
    its mean and standard error; significant when the mean exceeds 3 standard errors
    (one-sided, about 0.1% false alarms for a normal mean). Returns (rise, stderr) or None.
    """
    n, m = integ.shape
    k = min(k, m // 2)  # a cutoff at the maximum lag is checked over the second half
    if n < MIN_PIECES or m < 8:
        return None
    d = integ[:, -1] - integ[:, k]
    se = float(d.std(ddof=1) / math.sqrt(n))
    rise = float(d.mean())
    if se > 0 and rise > 3.0 * se:
        return rise, se
    return None


def _green_kubo(
    prep: _Prepared,
    slist: list[StressSeries],
    weights: np.ndarray,
    cutoff: float | str,
    sigma_fraction: float,
    components: str,
    common_warn: tuple[str, ...],
) -> Estimate:
    u = slist[0].units
    vs, ts = u.viscosity_scale, u.time_scale
    n = len(prep.pieces)
    if n == 0:
        raise _too_short(prep, slist, "Green–Kubo")
    acfs, integ = _running_integrals(prep, weights)
    t = np.arange(prep.max_lag + 1) * prep.dt
    mean = integ.mean(axis=0)
    std = integ.std(axis=0, ddof=1) if n > 1 else np.full_like(mean, np.nan)
    acf_mean = acfs.mean(axis=0)
    acf_norm = acf_mean / acf_mean[0] if acf_mean[0] > 0 else acf_mean
    curves = {
        "time": t * ts,
        "running_integral": mean * vs,
        "running_integral_std": std * vs,
        "acf_normalised": acf_norm,
    }
    warn = list(common_warn)
    diag = _common_diag(prep, slist, components)
    if n < MIN_PIECES:
        partial = Estimate(
            "shear_viscosity", "green_kubo", mean[-1] * vs, float("nan"),
            (float("nan"), float("nan")), u.viscosity_unit,
            window=(0.0, t[-1] * ts), window_unit=u.time_unit, n_independent=n,
            diagnostics=diag, curves=curves,
            warnings=(*warn, "no error bar: too few independent pieces"),
        )
        err = _too_short(prep, slist, "Green–Kubo")
        err.partial = partial
        raise err

    if cutoff != "auto":
        k = int(round(float(cutoff) / prep.dt))
        if not 1 <= k <= prep.max_lag:
            raise InputError(
                f"cutoff {float(cutoff) * ts:.4g} {u.time_unit} is outside the computed lags "
                f"(0, {prep.max_lag * prep.dt * ts:.4g}]",
                expected="a cutoff between one sample and the maximum lag",
                fix="choose a shorter --cutoff or a longer --max-lag",
            )
        vals = integ[:, k]
        value = float(vals.mean())
        stderr = float(vals.std(ddof=1) / math.sqrt(n))
        diag.update(cutoff=k * prep.dt * ts, cutoff_rule="given")
        note = _rising_note(integ, k, prep, u)
        diag.update(still_rising=note is not None)
        warn.extend([note] if note else [])
        return Estimate(
            "shear_viscosity", "green_kubo", value * vs, stderr * vs,
            tuple(x * vs for x in _interval(value, stderr, n)), u.viscosity_unit,
            window=(0.0, k * prep.dt * ts), window_unit=u.time_unit, n_independent=n,
            diagnostics=diag, curves=curves, warnings=tuple(warn),
        )

    # time decomposition (Zhang, Otani & Maginn 2015)
    amp, b = _fit_power(t[1:], std[1:])
    sigma_fit = np.where(t > 0, amp * np.power(np.maximum(t, 1e-300), b), 0.0)
    over = np.nonzero((t > 0) & (sigma_fit >= sigma_fraction * np.abs(mean)))[0]
    # ignore the first few lags, where the mean is still near zero
    over = over[over > max(3, int(0.5 * prep.t_level / prep.dt))]
    if over.size:
        kc = int(over[0])
        cut_rule = f"replica spread reaches {sigma_fraction:g} of the mean"
    else:
        kc = prep.max_lag
        cut_rule = "maximum lag (replica spread stayed below the threshold)"
    kc = max(kc, 8)
    tt, yy = t[1:kc + 1], mean[1:kc + 1]
    try:
        popt = _fit_double_exp(tt, yy, b)
    except RuntimeError:
        raise InputError(
            "the running Green–Kubo integral could not be fitted by a double exponential",
            path=slist[-1].source.path or None,
            expected="a running integral that rises and levels off",
            fix="check the pressure-tensor columns, or give --cutoff TIME",
        ) from None
    value = _plateau(popt)
    # jackknife over pieces of the whole fit (same cutoff and weights), linearised: the
    # leave-one-out curves differ from the mean by O(1/n), so each refit moves the plateau
    # by the fit's sensitivity h times the change of the curve (infinitesimal jackknife;
    # Efron, "The Jackknife, the Bootstrap and Other Resampling Plans", SIAM 1982).
    h_idx, h = _plateau_sensitivity(tt, popt, b)
    sub = integ[:, 1:kc + 1][:, h_idx]
    loo = (sub.sum(axis=0)[None, :] - sub) / (n - 1)  # leave-one-out mean curves
    jk = value + (loo - sub.mean(axis=0)[None, :]) @ h
    stderr = float(math.sqrt((jk.size - 1) / jk.size * np.sum((jk - jk.mean()) ** 2)))
    fit_curve = np.concatenate([[0.0], _double_exp(t[1:], *popt)])
    note = _rising_note(integ, kc, prep, u)
    diag.update(still_rising=note is not None)
    warn.extend([note] if note else [])
    curves.update(sigma=std * vs, sigma_fit=sigma_fit * vs, fit=fit_curve * vs)
    tc = kc * prep.dt
    diag.update(
        cutoff=tc * ts,
        cutoff_rule=cut_rule,
        sigma_fraction=sigma_fraction,
        sigma_fit_A=amp * vs,
        sigma_fit_b=b,
        fit_params={"A": popt[0], "alpha": popt[1], "tau1": popt[2] * ts,
                    "tau2": popt[3] * ts},
        running_integral_at_cutoff=mean[kc] * vs,
        stderr_method="jackknife over independent pieces",
    )
    slow = max(popt[2], popt[3])
    if slow > tc:
        warn.append(
            f"the fitted slow decay time ({slow * ts:.3g} {u.time_unit}) exceeds the cutoff "
            f"({tc * ts:.3g} {u.time_unit}): the plateau is an extrapolation; run longer or "
            "add replicas"
        )
    return Estimate(
        "shear_viscosity", "green_kubo", value * vs, stderr * vs,
        tuple(x * vs for x in _interval(value, stderr, n)), u.viscosity_unit,
        window=(0.0, tc * ts), window_unit=u.time_unit, n_independent=n,
        diagnostics=diag, curves=curves, warnings=tuple(warn),
    )


# ---------------------------------------------------------------------------------------
# Einstein (Helfand)
# ---------------------------------------------------------------------------------------


def _einstein(
    prep: _Prepared,
    slist: list[StressSeries],
    weights: np.ndarray,
    fit_window: tuple[float, float] | str,
    components: str,
    common_warn: tuple[str, ...],
) -> Estimate:
    u = slist[0].units
    vs, ts = u.viscosity_scale, u.time_scale
    n = len(prep.pieces)
    if n < MIN_PIECES:
        raise _too_short(prep, slist, "Einstein")
    lag = prep.max_lag
    t = np.arange(lag + 1) * prep.dt
    msd = np.empty((n, lag + 1))
    for i, pc in enumerate(prep.pieces):
        # Helfand moment: time integral of the stress (trapezoid), internal units
        st = _TRACELESS @ np.stack(pc.stress) - pc.offset[:, None]
        g = np.empty_like(st)
        g[:, 0] = 0.0
        np.cumsum(0.5 * (st[:, 1:] + st[:, :-1]) * prep.dt, axis=1, out=g[:, 1:])
        msd[i] = weighted_msd(g[None], weights, max_lag=lag)[0] * pc.prefactor / 2.0
    if fit_window == "auto":
        # linear regime: from 3 Sokal windows (the stress correlation has decayed, also its
        # slow tail) to a fifth of a segment (longer lags add noise faster than signal);
        # chosen so that the interval's coverage on OU data with known eta is 95%
        lvl = max(1, int(round(prep.t_level / prep.dt)))
        k0 = int(_EIN_K0 * lvl)
        k1 = min(lag, max(2 * k0, int(_EIN_K1 * prep.segment_length)))
        if k1 < 2 * k0:
            k0 = max(1, k1 // 2)
    else:
        k0 = int(round(fit_window[0] / prep.dt))
        k1 = int(round(fit_window[1] / prep.dt))
        if not 0 <= k0 < k1 <= lag:
            raise InputError(
                f"fit window ({fit_window[0] * ts:.4g}, {fit_window[1] * ts:.4g}) "
                f"{u.time_unit} is outside the computed lags (0, {lag * prep.dt * ts:.4g}]",
                expected="0 <= start < end <= maximum lag",
                fix="choose another --fit-window or a longer --max-lag",
            )
    tw = t[k0:k1 + 1]
    x = tw - tw.mean()
    slopes = (msd[:, k0:k1 + 1] - msd[:, k0:k1 + 1].mean(axis=1, keepdims=True)) @ x / (x @ x)
    value = float(slopes.mean())
    stderr = float(slopes.std(ddof=1) / math.sqrt(n))
    mean = msd.mean(axis=0)
    curves = {
        "time": t * ts,
        "helfand_msd": mean * vs,  # V/(2kT) <dG^2>, viscosity x time
        "helfand_msd_std": msd.std(axis=0, ddof=1) * vs,
        "local_slope": np.gradient(mean, prep.dt) * vs,
    }
    diag = _common_diag(prep, slist, components)
    diag.update(fit_window=(t[k0] * ts, t[k1] * ts),
                stderr_method="spread of per-piece slopes (Student t)")
    return Estimate(
        "shear_viscosity", "einstein", value * vs, stderr * vs,
        tuple(v * vs for v in _interval(value, stderr, n)), u.viscosity_unit,
        window=(t[k0] * ts, t[k1] * ts), window_unit=u.time_unit, n_independent=n,
        diagnostics=diag, curves=curves, warnings=tuple(common_warn),
    )
