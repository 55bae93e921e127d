"""Einstein (MSD) fit on arrays: the random-walk covariance of MSD points, the diffusive
window and the weighted-least-squares fit of ``MSD(t) = 2 d D t + b``.

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
from typing import Literal

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
#: Most MSD points entering the fit (evenly spaced in the window).
MAX_FIT_POINTS = 120
#: The slope of the MSD over one doubling of the lag must agree with the slope over the next
#: doubling within this fraction (or 3 model standard deviations) where the window starts.
SLOPE_TOL = 0.02
#: Fraction of the slope's weight (sum of |coefficients|) left out at each end of the
#: reported span that carries the estimate.
WEIGHT_TAIL = 0.05
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
    rule += (f", where the MSD's slope over one doubling of the lag agrees with the next "
             f"within max({SLOPE_TOL:g}, {ALPHA_Z:g} sd)")
    if lags.size == 0:
        return 0, k1, rule
    left = np.concatenate([[1], lags[:-1]])  # alpha at lags[j] uses msd from left[j] on
    ok = np.isfinite(alpha) & (np.abs(alpha - 1.0) <= np.maximum(ALPHA_TOL, ALPHA_Z * sd))
    for j in np.flatnonzero(ok & (lags <= k1)):
        span_end = min(k1, WINDOW_SPAN * lags[j])
        inside = (lags >= lags[j]) & (lags <= span_end)
        if np.all(ok[inside]) and _slope_level(msd, int(left[j]), k1, frames, counts):
            return int(left[j]), k1, rule
    return 0, k1, rule


def _slope_level(msd: np.ndarray, k: int, k1: int, frames: Sequence[int],
                 counts: Sequence[float]) -> bool:
    """Whether the MSD's slope over [k, 2k] agrees with its slope over [2k, min(4k, k1)].

    A local slope alpha = d log MSD / d log t near 1 does not make the MSD linear: an MSD
    ``6 D t + b`` has ``alpha = 1 - b / MSD``, and the MSD of molecule centres (b < 0, the
    curve still bending up after the ballistic start) or of sites of a molecule (b > 0,
    motion inside the molecule) reaches alpha within 0.1 of 1 while its slope still
    changes by several per cent. The chords of two consecutive doublings of the lag must
    agree within SLOPE_TOL, or within ALPHA_Z random-walk standard deviations of their
    difference when the MSD is noisier than that.
    """
    k2, k4 = 2 * k, min(4 * k, k1)
    if k4 <= k2 or k4 >= msd.size:
        return True  # no room for a second doubling: the window is too short anyway
    c1 = (msd[k2] - msd[k]) / k
    c2 = (msd[k4] - msd[k2]) / (k4 - k2)
    if not (np.isfinite(c1) and np.isfinite(c2) and c2 > 0):
        return False
    g = np.array([k, k2, k4])
    shape = _combined_shape(g, frames, counts)
    a = np.array([-1.0 / k, 1.0 / k + 1.0 / (k4 - k2), -1.0 / (k4 - k2)])
    # chord of a walk: d s^2 per lag; variance of (c1 - c2): d s^4 a' shape a
    rel_sd = math.sqrt(max(float(a @ shape @ a), 0.0) / _DIM)
    return abs(c1 / c2 - 1.0) <= max(SLOPE_TOL, ALPHA_Z * rel_sd)


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
    """Lags of the fit: evenly spaced by at least half the window start, at most
    MAX_FIT_POINTS of them, always including both ends.

    Spacing the points by ``k0 / 2`` or more (where the motion is already diffusive) keeps
    the frame-level fine structure of smooth (inertial) trajectories, which a random walk
    does not have, out of the fit; for a random walk (``k0 = 1``) every lag is used. Even
    spacing makes the diagonal weights the only thing that favours some lags over others.
    """
    step = max(1, k0 // 2, -(-(k1 - k0) // (MAX_FIT_POINTS - 1)))
    lags = np.arange(k0, k1 + 1, step)
    if lags[-1] != k1:
        lags = np.append(lags, k1)
    return lags


def _weight_span(lags: np.ndarray, coef: np.ndarray) -> tuple[int, int]:
    """Lags between which the slope's coefficients hold all but WEIGHT_TAIL of their
    absolute sum at each end."""
    c = np.cumsum(np.abs(coef))
    c = c / c[-1]
    i0 = int(np.searchsorted(c, WEIGHT_TAIL))
    i1 = int(np.searchsorted(c, 1.0 - WEIGHT_TAIL))
    return int(lags[min(i0, lags.size - 1)]), int(lags[min(i1, lags.size - 1)])


@dataclass(frozen=True)
class MSDFit:
    """A fit ``MSD(t) = 2 d D t + b`` over a window of lags (weighted least squares).

    All quantities in internal units (length^2, time, length^2/time).

    Attributes
    ----------
    diffusion, stderr : float
        Estimate of D by least squares weighted with the inverse model variance of each
        MSD point (diagonal of the random-walk covariance; or the full covariance when
        ``weighting="model"``), and its standard error: the sandwich with the model
        covariance at the fitted D, times `scale_factor`.
    intercept, intercept_stderr : float
        b and its standard error (length^2).
    ols_diffusion, ols_stderr, ols_stderr_naive : float
        Ordinary least squares on the same points; its standard error with the model
        covariance (honest) and with independent residuals (what a naive fit reports).
    gls_diffusion, gls_stderr : float
        Generalized least squares with the full model covariance on the same points and
        its model standard error (unscaled): optimal if the random-walk model held [1]_, but
        on real liquids it rests on the first two lags of the window (kept as a diagnostic).
    chi2 : float
        Chi-square of the GLS residuals against the model covariance (the model check).
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
    weighting : str
        ``"diagonal"`` or ``"model"``.
    weight_span : (int, int)
        Lags (frames) between which the slope's coefficients hold 90% of their absolute sum:
        the part of the window that carries the estimate.
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
    gls_diffusion: float = float("nan")
    gls_stderr: float = float("nan")
    weighting: str = "diagonal"
    weight_span: tuple[int, int] = (0, 0)

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
    weighting: Literal["diagonal", "model"] = "diagonal",
) -> MSDFit:
    """Least-squares fit of the MSD over a window of lags, weighted by the model variance.

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
    weighting : {"diagonal", "model"}
        ``diagonal`` (default): weights ``1 / Var[MSD(k)]`` from the random-walk model
        (weighted least squares; the points' correlations enter the error bar, not the
        weights). ``model``: the full model covariance (generalized least squares [1]_).

    Returns
    -------
    MSDFit

    Notes
    -----
    Why diagonal weights: the random-walk covariance makes neighbouring MSD points almost
    perfectly correlated, so GLS with it becomes a fit to the increments of the MSD, and
    the increments of the first lags have by far the smallest variance: on real liquids
    the GLS slope equals ``(MSD(k0 + h) - MSD(k0)) / (2 d h dt)`` of the first two points
    to many digits, so it hangs on the window start, where the MSD of molecules is still
    bending. Diagonal weights use every point of the window; the estimate stays unbiased
    whatever the covariance, and its error bar is the sandwich
    ``(X'WX)^-1 X'W C W X (X'WX)^-1`` with the model covariance ``C`` (the time-block check
    of :mod:`transport.diffusion` then widens it when the data scatter more than ``C``).

    References
    ----------
    .. [1] Bullerjahn, von Bülow & Hummer, J. Chem. Phys. 153, 024116 (2020).
    """
    if weighting not in ("diagonal", "model"):
        raise ValueError(f"weighting must be 'diagonal' or 'model', got {weighting!r}")
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
    gls_shape = np.linalg.inv(info)
    beta_g = gls_shape @ (xs.T @ sol[:, 2])
    # weighted least squares with the inverse model variances: beta = A y
    a_w = np.linalg.solve(xs.T @ xs, xs.T) / d[None, :]
    beta_w = a_w @ y
    w_shape = a_w @ shape @ a_w.T
    if weighting == "model":
        beta, cov_shape, coef = beta_g, gls_shape, (gls_shape @ (xs.T @ np.linalg.solve(
            corr, np.eye(lags.size))))[0] / d
    else:
        beta, cov_shape, coef = beta_w, w_shape, a_w[0]
    diff = float(beta[0]) / (2 * _DIM)
    s2 = 2.0 * abs(diff) * dt  # step variance of one coordinate
    scale = _DIM * s2 * s2  # Cov[mean MSD] = d s^4 shape
    cov_b = scale * cov_shape
    # the model check: chi-square of the GLS residuals against the model covariance, with
    # the scale at the GLS slope
    dg = float(beta_g[0]) / (2 * _DIM)
    scale_g = _DIM * (2.0 * abs(dg) * dt) ** 2
    r = ys - xs @ beta_g
    chi2 = float(r @ np.linalg.solve(corr, r) / scale_g) if scale_g > 0 else float("nan")
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
        gls_diffusion=dg,
        gls_stderr=float(np.sqrt(scale_g * gls_shape[0, 0])) / (2 * _DIM),
        weighting=weighting,
        weight_span=_weight_span(lags, coef),
    )


def _wls_slope(k0: int, k1: int, n_frames: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Lags, slope coefficients and model variance shape of the default fit of one run.

    For an MSD of ``P`` independent particles over ``n_frames`` frames, the diagonal-
    weighted slope is ``coef @ msd[lags]`` (weights do not depend on ``P``) and its model
    variance is ``d s^4 var_shape / P`` with ``s^2 = 2 |D| dt``: what :func:`fit_msd`
    computes, without the GLS and OLS diagnostics (for many blocks of equal length).
    """
    lags = _fit_lags(int(k0), int(k1))
    shape = _combined_shape(lags, [n_frames], [1.0])
    d = np.sqrt(np.diag(shape))
    x = np.column_stack([lags.astype(np.float64), np.ones(lags.size)]) / d[:, None]
    coef = np.linalg.solve(x.T @ x, x.T)[0] / d  # slope per lag (frames)
    return lags, coef, float(coef @ shape @ coef)


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
