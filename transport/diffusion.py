"""Self-diffusion from particle trajectories: Einstein (MSD) and Green–Kubo (VACF) estimators.

MSD route (method ``msd_gls``). The mean-squared displacement of each species is averaged over
particles and all time origins with FFTs (:func:`transport.stats.msd`), after the system's
centre-of-mass drift is removed. The diffusive window is found from the local slope
``alpha(t) = d log MSD / d log t``: it ends where fewer than three non-overlapping intervals of
the lag fit in the run (lag <= (N+1)/4 for N steps; the long-lag tail, few origins) and starts
at the first lag from which ``alpha`` stays within ``max(0.1, 3 sd)`` of 1 up to that end
(``sd`` the statistical spread of ``alpha`` for a random walk with as many particles and
frames), which excludes the ballistic start and the caging shoulder. ``MSD(t) = 6 D t + b`` is
fitted there by generalized least squares with the covariance matrix of the MSD points [1]_,
at lags spaced by half the window start (every lag for a random walk; for inertial motion
this keeps the frame-level smoothness of the trajectories, which a random walk lacks, out of
the fit).

Covariance choice (documented per the design note): the analytic covariance of the
time-averaged MSD of a Gaussian random walk without localisation noise [1]_, derived here in
closed form (see :func:`msd_covariance`), with particles (and replicas) taken as independent.
For a random walk the MSD points at lags n and m of one coordinate of one particle with
``N + 1`` frames and step variance ``s^2`` have

    Cov[M(n), M(m)] = 2 s^4 S(n, m) / ((N - n + 1)(N - m + 1)),
    S(n, m) = sum_{i,j} overlap(i, n; j, m)^2,

the sum running over the origins of both lags and ``overlap`` the number of steps the two
displacement windows share (Isserlis' theorem: Cov[A^2, B^2] = 2 Cov[A, B]^2 for zero-mean
Gaussians). Its shape does not depend on D, so the GLS estimate needs no iteration; its
scale ``s^2 = 2 D dt`` is evaluated at the fitted D. The fit's chi-square against this model
is reported. When it rejects the model at the 5% level (the MSD scatters more than the
random-walk covariance allows: particles that move together, non-Gaussian displacements, a
window not yet quite linear), the standard error is multiplied by the Birge ratio
``S = sqrt(chi^2 / dof)`` [6]_, the scale factor the Particle Data Group applies to
inconsistent data [7]_; the factor is recorded. (Applied only on rejection: scaling every fit
by ``max(1, S)`` would widen correct error bars by several per cent on average for short
windows and over-cover; the test at 5% leaves correct fits alone 95% of the time.) A p-value
far below 0.01 also attaches a warning. Estimating the covariance from particles instead
would need many more particles than fit points and ignores the correlation between particles
just the same.

The 95% interval (:func:`msd_interval`) uses the normal quantile, not Student's t: no scale is
estimated from the fit residuals (the covariance is a model whose scale is fixed by D), so the
residual degrees of freedom say nothing about the error bar's own uncertainty. Because the
standard error is proportional to D, the interval inverts ``|D_hat - D| <= z c D``
(``c = stderr / D_hat``), ``[D_hat / (1 + z c), D_hat / (1 - z c)]``, instead of plugging
``D_hat`` into the error bar: the symmetric ``D_hat +- z stderr`` is too short when ``D_hat``
is low and under-covers once ``c`` reaches ~0.1 (measured on single random walks with
``c = 0.19``: 0.929 symmetric, 0.945-0.950 inverted; with many particles, ``c`` of a few per
cent, both give 0.95).

The MSD of a species (:func:`species_msd`) sums the power spectra of all its particles and
coordinates before one inverse FFT (the transform is linear; only the particle average is
needed), working through blocks of particles in one reused zero-padded buffer.

VACF route (method ``vacf``): ``D = (1/3) integral <v(0) . v(t)> dt`` (trapezoid rule) up to a
cutoff twice the lag after which the normalised VACF stays below 0.01 for a further doubling of
the lag; the error bar is the spread of the integral over independent time segments (each
at least 10 cutoffs long), or over blocks of particles when the run holds fewer than four
segments. Frames more than a small fraction of the velocity decorrelation time apart make the
integral meaningless: when the VACF falls below 0.7 of its initial value within one frame the
estimate is skipped (``vacf="auto"``) or carries a warning.

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
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.fft as sfft
from scipy import special

from .errors import InputError, RunTooShortError
from .estimate import Estimate
from .series import PositionSeries
from .stats import autocorrelation
from .stats import msd as _fft_msd
from .units import UnitSystem

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

#: |alpha - 1| allowed in the diffusive window, beyond the statistical allowance.
ALPHA_TOL = 0.1
#: Statistical allowance for alpha, in standard deviations of the random-walk model.
ALPHA_Z = 3.0
#: The local slope must stay near 1 over at least this factor in lag where the window starts.
WINDOW_SPAN = 3.0
#: The fit window ends where the number of origins is at least this many times the lag.
ORIGINS_PER_LAG = 3.0
#: Most MSD points entering the GLS fit (log- and linearly spaced in the window).
MAX_FIT_POINTS = 120
#: The GLS standard error is scaled by sqrt(chi^2/dof) when the chi-square p-value is below this.
CHI2_SCALE_P = 0.05
#: Most time blocks for the block check of the diffusion error bar, and the fewest for
#: which it is made (dof = blocks - 1).
BLOCKS_MAX = 16
BLOCKS_MIN = 4
#: VACF: normalised level below which the VACF counts as decayed.
VACF_LEVEL = 0.01
#: VACF: smallest normalised VACF one frame after the origin for a trustworthy integral.
VACF_MIN_FIRST = 0.7
#: VACF: segments are at least this many cutoffs long.
VACF_SEGMENT_FACTOR = 10
#: VACF: target number of independent pieces (time segments x particle blocks).
VACF_TARGET_PIECES = 20
#: Chunk of float64 values converted at a time (bounded memory for big trajectories).
_CHUNK_VALUES = 1 << 23
#: Bytes of the zero-padded float64 buffer of one block of particles in :func:`species_msd`
#: (about 1 MB: stays in cache, no fresh memory per block; 4 MB measured 25% slower).
_MSD_BLOCK_BYTES = 1 << 20
_DIM = 3


# ---------------------------------------------------------------------------------------
# the random-walk covariance of MSD points
# ---------------------------------------------------------------------------------------


def _p2(k: np.ndarray) -> np.ndarray:
    return k * (k + 1.0) * (2.0 * k + 1.0) / 6.0


def _p3(k: np.ndarray) -> np.ndarray:
    return (k * (k + 1.0) / 2.0) ** 2


def msd_covariance(lags: np.ndarray, n_frames: int) -> np.ndarray:
    """Covariance of time-averaged MSD points of a Gaussian random walk (one coordinate).

    Parameters
    ----------
    lags : array_like of int, shape (K,)
        Lags in frames, each in ``1 .. n_frames - 1``.
    n_frames : int
        Number of frames ``N + 1`` (``N`` steps).

    Returns
    -------
    ndarray, shape (K, K)
        ``Cov[M(n), M(m)]`` for one coordinate of one particle with unit step variance
        (multiply by ``s^4``, ``s^2 = 2 D dt``); for ``d`` coordinates and ``P`` independent
        particles multiply by ``d / P``.

    Notes
    -----
    ``Cov = 2 S(n, m) / ((N - n + 1)(N - m + 1))`` with ``S`` the sum over pairs of origins of
    the squared number of shared steps. For ``n <= m`` and ``c = N - n - m + 1``,
    ``k0 = max(1, n + m - N - 1)``,

        S = 2 sum_{k=k0}^{n} k^2 (c + k) + n^2 (N - m + 1) max(m - n - 1, 0)
            - [n = m] n^2 (N - n + 1),

    evaluated with the power sums of k^2 and k^3. Its diagonal reproduces the variance of
    Qian, Sheetz & Elson [2]_ (their two-dimensional relative variance is half of the
    one-dimensional one).

    References
    ----------
    .. [1] Bullerjahn, von Bülow & Hummer, J. Chem. Phys. 153, 024116 (2020).
    .. [2] Qian, Sheetz & Elson, Biophys. J. 60, 910 (1991).

    Examples
    --------
    >>> float(msd_covariance([1], 3)[0, 0])  # two steps: M(1) = (a^2 + b^2)/2, var = 1
    1.0
    """
    k = np.asarray(lags, dtype=np.float64).ravel()
    n_steps = _check_lags(k, n_frames)
    cov = _cov_formula(np.minimum.outer(k, k), np.maximum.outer(k, k), n_steps)
    origins = n_steps - k + 1.0
    return cov / np.outer(origins, origins)


def _check_lags(k: np.ndarray, n_frames: int) -> float:
    n_steps = float(n_frames - 1)
    if k.size and (np.any(k < 1) or np.any(k > n_steps) or np.any(k != np.round(k))):
        raise ValueError(f"lags must be integers in [1, {int(n_steps)}]")
    return n_steps


def _cov_formula(lo: np.ndarray, hi: np.ndarray, n_steps: float) -> np.ndarray:
    """``2 S(lo, hi)`` elementwise (see :func:`msd_covariance`), lo <= hi."""
    c = n_steps - lo - hi + 1.0
    k0 = np.maximum(1.0, lo + hi - n_steps - 1.0)
    f = c * (_p2(lo) - _p2(k0 - 1.0)) + (_p3(lo) - _p3(k0 - 1.0))
    s = 2.0 * f + lo**2 * (n_steps - hi + 1.0) * np.maximum(hi - lo - 1.0, 0.0)
    s -= np.where(lo == hi, lo**2 * (n_steps - lo + 1.0), 0.0)
    return 2.0 * s


def msd_variance(lags: np.ndarray, n_frames: int) -> np.ndarray:
    """The diagonal of :func:`msd_covariance` (variances only, O(K))."""
    k = np.asarray(lags, dtype=np.float64).ravel()
    n_steps = _check_lags(k, n_frames)
    return _cov_formula(k, k, n_steps) / (n_steps - k + 1.0) ** 2


def _combined_shape(lags: np.ndarray, frames: Sequence[int], counts: Sequence[float]
                    ) -> np.ndarray:
    """Covariance shape of the particle-weighted mean MSD of several independent replicas.

    ``Cov[mean MSD] = d s^4 * shape`` with ``shape = sum_r P_r C_1(N_r) / (sum_r P_r)^2``.
    """
    total = float(sum(counts))
    out = np.zeros((lags.size, lags.size))
    for n, p in zip(frames, counts, strict=True):
        out += p * msd_covariance(lags, n)
    return out / total**2


# ---------------------------------------------------------------------------------------
# window and fit on arrays
# ---------------------------------------------------------------------------------------


def _slope_grid(k_max: int) -> np.ndarray:
    return np.unique(np.round(np.geomspace(1, max(k_max, 2), 16 * max(
        1, int(math.ceil(math.log10(max(k_max, 2))))) + 1)).astype(int))


def _local_slope(msd: np.ndarray, frames: Sequence[int], counts: Sequence[float]
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """alpha on a log grid of lags: (lags, alpha, standard deviation of alpha for a walk)."""
    k_max = msd.size - 1
    g = _slope_grid(k_max)
    g = g[(g >= 1) & (g <= k_max)]
    if g.size < 3:
        return g[:0], np.zeros(0), np.zeros(0)
    a, b = g[:-2], g[2:]
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = (np.log(msd[b]) - np.log(msd[a])) / (np.log(b) - np.log(a))
    shape = _combined_shape(g, frames, counts)
    ia, ib = np.arange(a.size), np.arange(2, g.size)
    # relative covariance of walk MSD points: d s^4 shape / (d s^2 n)(d s^2 m) = shape/(d n m)
    rel = shape / (_DIM * np.outer(g, g))
    var = rel[ia, ia] + rel[ib, ib] - 2.0 * rel[ia, ib]
    sd = np.sqrt(np.maximum(var, 0.0)) / (np.log(b) - np.log(a))
    return g[1:-1], alpha, sd


def diffusive_window(
    msd: np.ndarray,
    *,
    frames: Sequence[int],
    counts: Sequence[float],
) -> tuple[int, int, str]:
    """The diffusive window ``(k0, k1)`` in frames, from the local slope of log MSD.

    Parameters
    ----------
    msd : ndarray, shape (K + 1,)
        Mean MSD at lags 0..K (any length unit).
    frames : sequence of int
        Frames of each replica behind `msd`.
    counts : sequence of float
        Particles of each replica.

    Returns
    -------
    k0, k1 : int
        First and last lag of the window (frames); ``k0 = 0`` if no diffusive regime was
        found within the trusted lags.
    rule : str
        The rule, in words.
    """
    n_steps = min(frames) - 1
    k1 = int(min(msd.size - 1, math.floor((n_steps + 1) / (ORIGINS_PER_LAG + 1))))
    lags, alpha, sd = _local_slope(msd, frames, counts)
    rule = (f"from the first lag after which |alpha - 1| <= max({ALPHA_TOL:g}, {ALPHA_Z:g} sd) "
            f"over a factor {WINDOW_SPAN:g} in lag, to the lag with {ORIGINS_PER_LAG:g}x as "
            "many origins")
    if lags.size == 0:
        return 0, k1, rule
    left = np.concatenate([[1], lags[:-1]])  # alpha at lags[j] uses msd from left[j] on
    ok = np.isfinite(alpha) & (np.abs(alpha - 1.0) <= np.maximum(ALPHA_TOL, ALPHA_Z * sd))
    for j in np.flatnonzero(ok & (lags <= k1)):
        span_end = min(k1, WINDOW_SPAN * lags[j])
        inside = (lags >= lags[j]) & (lags <= span_end)
        if np.all(ok[inside]):
            return int(left[j]), k1, rule
    return 0, k1, rule


def _alpha_outside(msd: np.ndarray, window: tuple[int, int], frames: Sequence[int],
                   counts: Sequence[float]) -> float:
    """Fraction of slope-grid lags in the window where alpha leaves the diffusive band."""
    lags, alpha, sd = _local_slope(msd, frames, counts)
    inside = (lags >= window[0]) & (lags <= window[1])
    if not inside.any():
        return float("nan")
    bad = ~(np.abs(alpha - 1.0) <= np.maximum(ALPHA_TOL, ALPHA_Z * sd))
    return float(np.mean(bad[inside]))


def _fit_lags(k0: int, k1: int) -> np.ndarray:
    """Lags of the fit: spaced by half the window start, at most MAX_FIT_POINTS of them.

    Spacing the points by ``k0 / 2`` (where the motion is already diffusive) keeps the
    frame-level fine structure of smooth (inertial) trajectories, which a random walk does
    not have, out of the fit; for a random walk (``k0 = 1``) every lag is used.
    """
    step = max(1, k0 // 2)
    lags = np.arange(k0, k1 + 1, step)
    if lags[-1] != k1:
        lags = np.append(lags, k1)
    if lags.size > MAX_FIT_POINTS:
        half = MAX_FIT_POINTS // 2
        lg = np.round(np.geomspace(k0, k1, half) / step).astype(int) * step
        ln = np.round(np.linspace(k0, k1, half) / step).astype(int) * step
        lags = np.unique(np.clip(np.concatenate([lg, ln, [k0, k1]]), k0, k1))
    return lags


@dataclass(frozen=True)
class MSDFit:
    """A GLS fit ``MSD(t) = 2 d D t + b`` with the random-walk covariance.

    All quantities in internal units (length^2, time, length^2/time).

    Attributes
    ----------
    diffusion, stderr : float
        GLS estimate of D and its standard error (model covariance at the fitted D, times
        `scale_factor`).
    intercept, intercept_stderr : float
        b and its standard error (length^2).
    ols_diffusion, ols_stderr, ols_stderr_naive : float
        Ordinary least squares on the same points; its standard error with the model
        covariance (honest) and with independent residuals (what a naive fit reports).
    chi2 : float
        Chi-square of the GLS residuals against the model covariance.
    dof : int
        Fit points minus 2.
    scale_factor : float
        What `stderr`, `intercept_stderr` and `cov_params` were multiplied by:
        ``sqrt(chi2 / dof)`` when the chi-square rejects the model covariance at the
        :data:`CHI2_SCALE_P` level (Birge ratio), else 1.
    lags : ndarray
        The lags (frames) used.
    cov_params : ndarray, shape (2, 2)
        Covariance of (slope, intercept).
    """

    diffusion: float
    stderr: float
    intercept: float
    intercept_stderr: float
    ols_diffusion: float
    ols_stderr: float
    ols_stderr_naive: float
    chi2: float
    dof: int
    lags: np.ndarray
    cov_params: np.ndarray
    scale_factor: float = 1.0

    @property
    def chi2_pvalue(self) -> float:
        """Upper-tail probability of `chi2` with `dof` degrees of freedom."""
        # chi-square survival function (scipy.special: importing scipy.stats costs ~0.5 s)
        return float(special.chdtrc(self.dof, self.chi2)) if self.dof > 0 else float("nan")


def fit_msd(
    msd: np.ndarray,
    dt: float,
    window: tuple[int, int],
    *,
    frames: Sequence[int],
    counts: Sequence[float],
) -> MSDFit:
    """Generalized-least-squares fit of the MSD over a window of lags.

    Parameters
    ----------
    msd : ndarray, shape (K + 1,)
        Particle-averaged MSD (summed over the 3 coordinates) at lags 0..K, length^2.
    dt : float
        Time between frames.
    window : (int, int)
        First and last lag (frames), ``1 <= k0 < k1 <= K``.
    frames, counts : sequences
        Frames and particles of each independent replica behind `msd`.

    Returns
    -------
    MSDFit

    References
    ----------
    .. [1] Bullerjahn, von Bülow & Hummer, J. Chem. Phys. 153, 024116 (2020).
    """
    k0, k1 = window
    lags = _fit_lags(int(k0), int(k1))
    t = lags * dt
    y = np.asarray(msd, dtype=np.float64)[lags]
    shape = _combined_shape(lags, frames, counts)
    x = np.column_stack([t, np.ones_like(t)])
    # GLS on the correlation matrix (better conditioned than the covariance itself)
    d = np.sqrt(np.diag(shape))
    corr = shape / np.outer(d, d)
    xs, ys = x / d[:, None], y / d
    sol = np.linalg.solve(corr, np.column_stack([xs, ys]))
    info = xs.T @ sol[:, :2]  # X' C^-1 X (shape units)
    cov_shape = np.linalg.inv(info)
    beta = cov_shape @ (xs.T @ sol[:, 2])
    slope = float(beta[0])
    diff = slope / (2 * _DIM)
    s2 = 2.0 * abs(diff) * dt  # step variance of one coordinate
    scale = _DIM * s2 * s2  # Cov[mean MSD] = d s^4 shape
    cov_b = scale * cov_shape
    r = ys - xs @ beta
    chi2 = float(r @ np.linalg.solve(corr, r) / scale) if scale > 0 else float("nan")
    # OLS on the same points, with honest (model) and naive (iid) standard errors
    xtx_inv = np.linalg.inv(x.T @ x)
    b_ols = xtx_inv @ (x.T @ y)
    ols_cov = xtx_inv @ (x.T @ (scale * shape) @ x) @ xtx_inv
    r_ols = y - x @ b_ols
    dof = lags.size - 2
    naive = float(np.sqrt(max(r_ols @ r_ols / max(dof, 1), 0.0) * xtx_inv[0, 0]))
    factor = 1.0
    if dof > 0 and np.isfinite(chi2) and special.chdtrc(dof, chi2) < CHI2_SCALE_P:
        factor = math.sqrt(chi2 / dof)  # > 1 here: the Birge ratio
        cov_b = cov_b * factor**2
    return MSDFit(
        diffusion=diff,
        stderr=float(np.sqrt(cov_b[0, 0])) / (2 * _DIM),
        intercept=float(beta[1]),
        intercept_stderr=float(np.sqrt(cov_b[1, 1])),
        ols_diffusion=float(b_ols[0]) / (2 * _DIM),
        ols_stderr=float(np.sqrt(ols_cov[0, 0])) / (2 * _DIM),
        ols_stderr_naive=naive / (2 * _DIM),
        chi2=chi2,
        dof=dof,
        lags=lags,
        cov_params=cov_b,
        scale_factor=factor,
    )


def msd_interval(value: float, stderr: float, *, level: float = 0.95
                 ) -> tuple[tuple[float, float], str]:
    """Confidence interval of a GLS estimate of D whose standard error is proportional to D.

    The model covariance of the MSD points scales as ``s^4 = (2 D dt)^2``: the GLS estimate
    ``D_hat`` has standard deviation ``c D`` with ``c = stderr / D_hat`` fixed by the fit's
    shape alone. Inverting ``|D_hat - D| <= z c D`` (rather than plugging ``D_hat`` into
    the scale) gives ``[D_hat / (1 + z c), D_hat / (1 - z c)]``, exact for a normal
    ``D_hat``; ``z`` is the normal quantile, not Student's t, because no scale is estimated
    from the fit residuals (the covariance is a model, not a sample estimate).

    Parameters
    ----------
    value, stderr : float
        The estimate and its standard error (any unit).
    level : float
        Confidence level.

    Returns
    -------
    (low, high) : tuple of float
        The interval, same unit as `value`.
    rule : str
        How it was made. When ``z c >= 1/2`` (or the estimate is not positive) the inverted
        interval is unbounded or nearly so, and the symmetric ``value +- z stderr`` is given.

    Examples
    --------
    >>> (lo, hi), _ = msd_interval(1.0, 0.05)
    >>> round(lo, 4), round(hi, 4)  # 1/(1 + 1.96 x 0.05), 1/(1 - 1.96 x 0.05)
    (0.9107, 1.1086)
    """
    z = float(special.ndtri(0.5 + level / 2.0))
    if value > 0 and stderr >= 0 and z * stderr < 0.5 * value:
        c = stderr / value
        return (value / (1.0 + z * c), value / (1.0 - z * c)), (
            f"normal quantile {z:.4g}, inverted for a standard error proportional to D")
    return (value - z * stderr, value + z * stderr), f"symmetric: value +- {z:.4g} stderr"


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


@dataclass(frozen=True)
class DiffusionAnalysis:
    """MSD (GLS) and VACF estimates per species from one analysis.

    Attributes
    ----------
    msd : tuple of Estimate
        ``self_diffusion`` by ``msd_gls``, one per species.
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
    """Self-diffusion per species from the MSD, fitted by generalized least squares.

    Parameters
    ----------
    series : PositionSeries or sequence of PositionSeries
        One run, or independent replicas (same frame interval).
    fit_window : (float, float) or "auto"
        Fit range of lag times in internal units (s, or tau), or ``"auto"`` (local slope of
        log MSD; see the module notes).
    remove_drift : bool
        Subtract the system's centre-of-mass drift before computing the MSD.
    max_lag : int, optional
        Longest lag computed, in frames (default: half the shortest replica).
    workers : int, optional
        Threads for the FFTs.

    Returns
    -------
    tuple of Estimate
        ``self_diffusion`` by ``msd_gls`` for each species, in 1e-9 m^2/s (or reduced).
        ``window`` is the fit range in ps (or tau); ``n_independent`` the number of
        particles. ``diagnostics`` hold the OLS answer with honest and naive errors, the
        chi-square of the fit, the intercept, the box, temperature and group sizes.
        ``curves`` hold ``time``, ``msd``, ``msd_sd``, ``fit``, ``fit_sd``,
        ``slope_time`` and ``local_slope``.

    Raises
    ------
    RunTooShortError
        No diffusive regime within the trusted lags; carries a partial estimate.

    References
    ----------
    .. [1] Bullerjahn, von Bülow & Hummer, J. Chem. Phys. 153, 024116 (2020).
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
    """MSD (GLS) estimates per species and, where velocities allow, the VACF cross-check.

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
            notes.append("no velocities in the trajectory: VACF cross-check not made")
        else:
            for name in names:
                est, note = _vacf_estimate(slist, name, vacf_cutoff, remove_drift, workers,
                                           force=vacf == "yes", common_warn=common_warn)
                if est is not None:
                    vacf_est.append(est)
                if note:
                    notes.append(note)
    return DiffusionAnalysis(tuple(msd_est), tuple(vacf_est), tuple(dict.fromkeys(notes)))


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
    block = _block_check(members, name, (k0, k1), dt, remove_drift, workers)
    return _msd_result(fit, mean, time, dt, name, diag, curves, rule, u, warn, lf, block)


@dataclass(frozen=True)
class _BlockCheck:
    """Scatter of independent time blocks against their model error bars."""

    values: np.ndarray  # D of each block (internal units)
    stderrs: np.ndarray  # model (random-walk) standard error of each block
    block_frames: int
    factor: float  # sqrt(chi^2 / dof) of the block values about their weighted mean

    @property
    def dof(self) -> int:
        return int(self.values.size - 1)


def _block_check(members: list[PositionSeries], name: str, window: tuple[int, int],
                 dt: float, remove_drift: bool, workers: int | None) -> _BlockCheck | None:
    """Fit the same window in independent time blocks; compare their scatter with the model.

    The random-walk covariance treats particles as independent; in a periodic liquid their
    displacements are correlated by collective, momentum-conserving motion, which only
    independent repeats show. Returns None when fewer than BLOCKS_MIN blocks fit.
    """
    k0, k1 = window
    nmin = min(s.n_frames for s in members)
    # as many blocks as keep the window (or, in short runs, a window cut to a quarter of the
    # block, no shorter than twice its start) inside each block with ORIGINS_PER_LAG origins
    # per lag; the ratio of scatter to model error is what the blocks measure
    for nb in (BLOCKS_MAX, 8, BLOCKS_MIN):
        per_rep = max(1, -(-nb // len(members)))
        length = nmin // per_rep
        kb = min(k1, int((length - 1) // (ORIGINS_PER_LAG + 1)))
        if kb >= max(2 * k0, k0 + 4):
            break
    else:
        return None
    vals, ses = [], []
    for s in members:
        idx = np.unique(s.species_indices(name))
        for j in range(s.n_frames // length):
            sl = slice(j * length, (j + 1) * length)
            shift = s.drift[sl] if (remove_drift and s.drift is not None) else None
            m = _fft_msd(s.positions[sl], max_lag=kb, particles=idx, shift=shift,
                         workers=workers)
            f = fit_msd(m, dt, (k0, kb), frames=[length], counts=[float(idx.size)])
            vals.append(f.diffusion)
            ses.append(f.stderr / f.scale_factor)  # the model error, unscaled
    if len(vals) < BLOCKS_MIN:
        return None
    v, e = np.array(vals), np.array(ses)
    if not np.all(e > 0):
        return None
    w = 1.0 / e**2
    mu = float(np.sum(w * v) / np.sum(w))
    chi2 = float(np.sum(w * (v - mu) ** 2))
    return _BlockCheck(v, e, length, math.sqrt(chi2 / (v.size - 1)))


def _msd_result(fit: MSDFit, mean: np.ndarray, time: np.ndarray, dt: float, name: str,
                diag: dict, curves: dict, rule: str, u: UnitSystem, warn: list[str], lf: float,
                block: _BlockCheck | None = None) -> Estimate:
    ds, ts = u.diffusion_scale, u.time_scale
    k0, k1 = int(fit.lags[0]), int(fit.lags[-1])
    frames, counts = diag["frames"], [float(c) for c in diag["particles_per_replica"]]
    value, se = fit.diffusion, fit.stderr
    # model standard deviation of every MSD point and band of the fitted line
    lags_all = np.arange(1, mean.size)
    s2 = 2.0 * abs(value) * dt
    shape_diag = sum(p * msd_variance(lags_all, n) for n, p in zip(frames, counts,
                                                                   strict=True))
    shape_diag = shape_diag / sum(counts) ** 2
    fit_line = 2 * _DIM * value * time + fit.intercept
    xb = np.column_stack([time, np.ones_like(time)])
    fit_sd = np.sqrt(np.einsum("ij,jk,ik->i", xb, fit.cov_params, xb))
    curves = dict(curves)
    curves.update(fit=fit_line * lf**2, fit_sd=fit_sd * lf**2,
                  msd_sd=np.concatenate([[0.0], np.sqrt(_DIM * s2 * s2 * shape_diag)])
                  * lf**2)
    p = fit.chi2_pvalue
    warn = list(warn)
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
    if value <= 0:
        warn.append(f"{name}: the fitted slope is not positive")
    model_se = se / fit.scale_factor
    block_factor = block.factor if block is not None else float("nan")
    use_block = block is not None and block.factor > max(fit.scale_factor, 1.0)
    if use_block:
        se = model_se * block.factor
        warn.append(
            f"{name}: {block.values.size} independent time blocks scatter "
            f"{block.factor:.2g}x more than the random-walk model error allows; the error bar "
            "was widened by that factor (the model treats particles as independent)")
    (lo, hi), interval_rule = msd_interval(value, se)
    if use_block:
        q = float(special.stdtrit(block.dof, 0.975))
        lo, hi = min(lo, value - q * se), max(hi, value + q * se)
        interval_rule += f"; at least Student t with {block.dof} dof (time blocks)"
    if interval_rule.startswith("symmetric"):
        warn.append(f"{name}: the error bar is too large for the scale-aware interval; the "
                    "symmetric normal interval is given")
    lu = diag["length_unit"]
    d = dict(diag)
    d.update(
        fit_window=(k0 * dt * ts, k1 * dt * ts),
        window_rule=rule,
        fit_points=int(fit.lags.size),
        alpha_outside_fraction=_alpha_outside(mean, (k0, k1), frames, counts),
        ols_value=fit.ols_diffusion * ds,
        ols_stderr=fit.ols_stderr * ds,
        ols_stderr_naive=fit.ols_stderr_naive * ds,
        intercept=fit.intercept * lf**2,
        intercept_stderr=fit.intercept_stderr * lf**2,
        msd_unit=f"{lu}^2",
        chi2=fit.chi2,
        dof=fit.dof,
        chi2_pvalue=p,
        covariance_model="analytic random-walk covariance of the MSD points (Bullerjahn, "
                         "von Bülow & Hummer 2020), independent particles",
        stderr_scale_factor=(block.factor if use_block else fit.scale_factor),
        stderr_model=model_se * ds,
        fit_scale_factor=fit.scale_factor,
        block_scale_factor=block_factor,
        block_count=0 if block is None else int(block.values.size),
        block_length=float("nan") if block is None else block.block_frames * dt * ts,
        block_values=[] if block is None else [float(x) * ds for x in block.values],
        block_stderrs=[] if block is None else [float(x) * ds for x in block.stderrs],
        stderr_method=(
            f"model error times the scatter of {block.values.size} independent time blocks "
            f"about their weighted mean, sqrt(chi^2/dof) = {block.factor:.3g}" if use_block
            else "generalized least squares with the model covariance at the fitted D" + (
                f", scaled by the Birge ratio sqrt(chi^2/dof) = {fit.scale_factor:.3g} "
                f"(chi^2 p-value below {CHI2_SCALE_P:g})" if fit.scale_factor > 1 else "")),
        interval_method=interval_rule,
    )
    return Estimate(
        "self_diffusion", "msd_gls", value * ds, se * ds,
        (lo * ds, hi * ds), u.diffusion_unit,
        window=(k0 * dt * ts, k1 * dt * ts), window_unit=u.time_unit, group=name,
        n_independent=float(d["n_particles"]), diagnostics=d, curves=curves,
        warnings=tuple(dict.fromkeys(warn)),
    )


def _vacf_estimate(slist: list[PositionSeries], name: str, cutoff: float | str,
                   remove_drift: bool, workers: int | None, *, force: bool,
                   common_warn: tuple[str, ...]) -> tuple[Estimate | None, str]:
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
    seg_len = min(max(VACF_SEGMENT_FACTOR * kc, 2 * kc + 2), shortest)
    lag = min(2 * kc, seg_len - 1)
    if kc > lag:
        raise InputError(f"{name}: the VACF cutoff is longer than half the run",
                         path=members[0].source.path or None,
                         expected="a run several times longer than the VACF cutoff",
                         fix="choose a shorter VACF cutoff or run longer")
    n_seg = sum(s.n_frames // seg_len for s in members)
    # independent pieces: time segments, each split into blocks of particles (particles
    # are independent up to O(1/N) momentum-conservation correlations), about 20 in all
    n_part = [s.species_indices(name).size for s in members]
    blocks = max(1, min(min(n_part), math.ceil(VACF_TARGET_PIECES / max(n_seg, 1))))
    pieces, weights = [], []
    for s in members:
        if s.n_frames // seg_len == 0:
            continue
        for part in np.array_split(s.species_indices(name), blocks):
            pieces.append(_species_vacf(s, part, seg_len=seg_len, max_lag=lag,
                                        remove_drift=remove_drift, workers=workers))
            weights.extend([part.size] * (s.n_frames // seg_len))
    err_rule = (f"spread over {n_seg} time segment(s) of {seg_len} frames x {blocks} "
                "block(s) of particles")
    if len(weights) < 4:
        text = f"{name}: too few particles and too short a run for a VACF error bar"
        if force:
            raise RunTooShortError(text, path=members[0].source.path or None,
                                   fix="run longer (at least 4 segments of 10 VACF cutoffs)")
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
    diag = _common_diag(members, name, remove_drift)
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
