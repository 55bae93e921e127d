"""Einstein (MSD) fit on arrays: the random-walk covariance of MSD points, the diffusive
window and the generalized-least-squares fit of ``MSD(t) = 2 d D t + b``.

Pure functions of arrays (no trajectories, no files); :mod:`transport.diffusion` applies
them to species of a trajectory. The method, the covariance choice and the interval are
described in :mod:`transport.diffusion`.

References
----------
.. [1] J. T. Bullerjahn, S. von Bülow and G. Hummer, "Optimal estimates of self-diffusion
   coefficients from molecular dynamics simulations", J. Chem. Phys. 153, 024116 (2020).
.. [2] H. Qian, M. P. Sheetz and E. L. Elson, "Single particle tracking. Analysis of diffusion
   and flow in two-dimensional systems", Biophys. J. 60, 910 (1991).
.. [3] R. T. Birge, "The calculation of errors by the method of least squares", Phys. Rev.
   40, 207 (1932).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = [
    "MSDFit",
    "diffusive_window",
    "fit_msd",
    "msd_covariance",
    "msd_interval",
    "msd_variance",
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
