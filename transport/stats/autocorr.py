"""Integrated autocorrelation time with Sokal's automatic window and Wolff's bias correction.

Convention (Sokal's): for a stationary series with autocovariance ``Gamma(k)`` and normalised
autocorrelation ``rho(k) = Gamma(k) / Gamma(0)``,

    tau_int = 1/2 + sum_{k>=1} rho(k)         (in samples),
    g       = 2 tau_int                        (statistical inefficiency),
    Var(mean of N samples) ~= g Gamma(0) / N,  N_eff = N / g.

Uncorrelated samples have ``tau_int = 1/2`` and ``g = 1``. An AR(1) series
``x_t = phi x_{t-1} + e_t`` has ``rho(k) = phi^k`` and ``tau_int = (1 + phi) / (2 (1 - phi))``.
(Some authors call ``g`` itself "the autocorrelation time"; here it is always
``tau_int = g / 2``.)

Window. The sum is truncated at a window ``M``: the estimated tail of ``rho`` is mostly noise
whose variance grows with ``M``, while stopping early biases ``tau`` low by
``sum_{k>M} rho(k)``. Sokal's rule takes the smallest ``M`` with ``M >= c tau_int(M)``,
``c ~ 5`` (truncation bias of order ``exp(-c)`` for an exponential decay). The statistical
error of the estimate is then ``Var(tau_int) ~= 2 (2M + 1) / N tau_int^2`` (Madras & Sokal).

Bias from the subtracted mean. With the sample mean removed, every ``Gamma(k)`` estimate is
low by about ``C / N``, where ``C = Gamma(0) + 2 sum_{k=1}^{M} Gamma(k) = g Gamma(0)``. Wolff's
correction ``C -> C (1 + (2M + 1) / N)`` and ``Gamma(0) -> Gamma(0) + C / N`` removes this
leading bias, which otherwise makes error bars too small for short runs (``N_eff`` of a few
tens).

Run length. A series shorter than about ``50 tau_int`` is flagged (``converged=False``):
its estimate of ``tau_int`` is itself unreliable (a rule of thumb like that of Foreman-Mackey
et al., who ask for chains longer than 50 autocorrelation times; quoted from memory).

Degrees of freedom. The estimated variance of the mean, ``C / N``, fluctuates with relative
variance ``~ 2 (2M + 1) / N``; matching a scaled ``chi^2`` (Satterthwaite) gives
``nu = N / (2M + 1)`` degrees of freedom, which :func:`~transport.stats.mean_with_error` uses
for its Student-t interval. With ``M ~ 5 tau_int`` this is about ``N_eff / 5``, far fewer
than ``N_eff - 1``: the error bar itself is uncertain, and the interval must say so.

Why the mean of the estimate over many short series is ~10% high (and why that is right).
Wolff's correction is derived for a fixed window, and there it works: for AR(1) with
``phi = 0.9`` and ``N = 600`` (``N_eff ~ 32``) at ``M = 48`` the expectation of the
corrected variance of the mean, computed exactly from the AR(1) covariance matrix (the
estimator is a quadratic form ``x' A x``, so its mean is ``tr(A Sigma)``), is 0.983 of the
truth (second-order and truncation terms), and 3,000 simulated series agree. Sokal's window
is not fixed: it is the first ``M`` with ``M >= c tau(M)``, so ``tau_hat ~= M / c`` and a
series whose partial sums run high also gets a long window. A long window means few degrees
of freedom ``nu = N / (2M + 1)``, so the large estimates are exactly those with the
heaviest-tailed sampling law. Each estimate is nevertheless distributed as the scaled
chi-square the Student-t interval assumes: over 1,600 such series the probability integral
transform ``chi2.cdf(nu v_hat / v, nu)`` with each series' own ``nu`` is uniform
(Kolmogorov-Smirnov p = 0.75, median 0.497), while the plain mean of ``v_hat / v`` is
1.11 +- 0.02 (its median 0.91, the chi-square median ``~ 1 - 2 / (3 nu)``). The mean of a
variance estimate is not what the interval uses; its law given ``nu`` is, and that is
tested (tests/test_stats_autocorr.py). The overshoot of the mean shrinks as ``1 / N`` with
the spread of the window: 1.11 +- 0.02, 1.029 +- 0.010 and 1.013 +- 0.007 at ``N_eff`` ~ 32,
126 and 505 (sd of ``M`` 20, 11 and 5 samples), so it only matters for runs the
``converged`` flag already calls short.

References
----------
.. [1] A. D. Sokal, "Monte Carlo methods in statistical mechanics: foundations and new
   algorithms", in *Functional Integration* (Cargese 1996), NATO ASI Series B 361, pp.
   131-192 (Plenum, 1997).
.. [2] N. Madras and A. D. Sokal, "The pivot algorithm: a highly efficient Monte Carlo
   method for the self-avoiding walk", J. Stat. Phys. 50, 109 (1988), Appendix C.
.. [3] U. Wolff, "Monte Carlo errors with less errors", Comput. Phys. Commun. 156, 143
   (2004) (bias correction of the windowed sum).
.. [4] F. E. Satterthwaite, "An approximate distribution of estimates of variance
   components", Biometrics Bull. 2, 110 (1946).
.. [5] D. Foreman-Mackey, D. W. Hogg, D. Lang and J. Goodman, "emcee: the MCMC hammer",
   Publ. Astron. Soc. Pac. 125, 306 (2013), and its documentation on autocorrelation
   analysis (rule of thumb: run length above 50 autocorrelation times).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .correlation import _finite_1d, autocorrelation

__all__ = ["AutocorrelationTime", "integrated_autocorrelation_time"]

#: A series shorter than this many tau_int is flagged as too short (module notes).
_MIN_LENGTH_TAU = 50.0


@dataclass(frozen=True)
class AutocorrelationTime:
    """Integrated autocorrelation time of one series (all times in samples).

    Attributes
    ----------
    value : float
        ``tau_int = C / (2 Gamma(0))`` in samples, bias-corrected (module notes).
    stderr : float
        Its statistical error ``tau_int sqrt(2 (2M + 1) / N)`` (Madras & Sokal).
    interval : tuple of float
        ``value -/+ 1.96 stderr`` (normal approximation), clipped below at 1/2.
    statistical_inefficiency : float
        ``g = 2 tau_int``; at least 1 (an estimate below 1, i.e. apparent
        anticorrelation, is clipped to 1, which never claims more independent samples than
        there are).
    n_effective : float
        ``N / g``, the number of effectively independent samples.
    variance_of_mean : float
        ``g Gamma(0) / N``: the estimated variance of the sample mean, in the series' unit
        squared.
    dof : float
        ``N / (2M + 1)``: degrees of freedom of `variance_of_mean` (module notes).
    window : int
        The summation window ``M`` chosen (samples).
    c : float
        The window constant used.
    converged : bool
        True if a window with ``M >= c tau_int(M)`` was found and the series is at least
        ``50 tau_int`` long. False means the series is too short for a reliable ``tau_int``:
        a short series cannot show correlations slower than itself (the subtracted mean
        absorbs them), so its estimate may be far too small. Without a window the largest
        estimate over windows up to ``N / 2`` is returned.
    n_samples : int
        ``N``.
    variance : float
        ``Gamma(0)``, the variance of the series (bias-corrected), in the unit squared.
    rho : ndarray
        The estimated normalised autocorrelation ``rho(k)`` (divisor ``N - k``, no bias
        correction) for ``k = 0 .. len(rho) - 1`` (at least up to the window), for plots.
    """

    value: float
    stderr: float
    interval: tuple[float, float]
    statistical_inefficiency: float
    n_effective: float
    variance_of_mean: float
    dof: float
    window: int
    c: float
    converged: bool
    n_samples: int
    variance: float
    rho: np.ndarray

    @property
    def tau(self) -> float:
        """Alias of :attr:`value`: ``tau_int`` in samples."""
        return self.value


def _first_window(rho: np.ndarray, c: float) -> tuple[int, np.ndarray]:
    """Smallest M >= 1 with M >= c * tau(M), or 0 if none; and tau(M) for M = 0 ..."""
    taus = 0.5 + np.concatenate([[0.0], np.cumsum(rho[1:])])
    m = np.arange(taus.size)
    ok = np.nonzero((m >= 1) & (m >= c * taus))[0]
    return (int(ok[0]) if ok.size else 0), taus


def integrated_autocorrelation_time(
    x: ArrayLike,
    *,
    c: float = 5.0,
    max_lag: int | None = None,
    window: int | None = None,
) -> AutocorrelationTime:
    """Integrated autocorrelation time ``tau_int`` of a series, with automatic windowing.

    Parameters
    ----------
    x : array_like, shape (N,)
        The series (any unit), at least 4 finite samples.
    c : float
        Window constant: the smallest window ``M`` with ``M >= c tau_int(M)`` is used
        (Sokal recommends 4-10; default 5).
    max_lag : int, optional
        Largest lag searched for the window (default ``N - 1``). The autocorrelation is
        computed up to growing lags (x4 each time) until a window is found, so short
        correlation times cost about one FFT of ``N`` points.
    window : int, optional
        A fixed summation window ``M`` (``1 <= M < N``) instead of Sokal's automatic rule;
        `c` and `max_lag` are then not used, and `converged` only reports the run length.
        The bias correction is exact to first order in ``(2M + 1) / N`` for a fixed window;
        with the automatic window the estimate is chosen with ``M`` (module notes).

    Returns
    -------
    AutocorrelationTime
        ``tau_int`` (samples), its error, ``g``, ``N_eff``, the window and ``rho``.

    Notes
    -----
    The window is chosen on ``rho(k) = Gamma(k) / Gamma(0)`` with ``Gamma(k)`` the
    mean-subtracted autocovariance divided by the number of pairs ``N - k``; the value then
    receives Wolff's bias correction (module notes).

    References
    ----------
    .. [1] A. D. Sokal, in *Functional Integration* (Plenum, 1997).
    .. [2] N. Madras and A. D. Sokal, J. Stat. Phys. 50, 109 (1988).
    .. [3] U. Wolff, Comput. Phys. Commun. 156, 143 (2004).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> res = integrated_autocorrelation_time(rng.standard_normal(100_000))
    >>> bool(abs(res.tau - 0.5) < 0.03)   # white noise: tau_int = 1/2
    True
    """
    a = _finite_1d(x, "x", 4)
    if not (np.isfinite(c) and c > 0):
        raise ValueError(f"`c` must be a positive number; got {c!r}")
    n = a.size
    if window is not None and not (isinstance(window, (int, np.integer))
                                   and 1 <= window < n):
        raise ValueError(f"`window` must be an integer from 1 to N - 1 = {n - 1}; "
                         f"got {window!r}")
    limit = n - 1 if max_lag is None else int(min(max(1, max_lag), n - 1))
    if window is not None:
        limit = int(window)
    lag = min(limit, max(64, n // 64))
    if a.min() == a.max():  # constant series: the mean is exact
        rho = np.zeros(min(n, 2))
        rho[0] = 1.0
        return AutocorrelationTime(0.5, 0.0, (0.5, 0.5), 1.0, float(n), 0.0, float(n),
                                   1, float(c), True, n, 0.0, rho)
    fixed = window
    while fixed is None:
        acov = autocorrelation(a, max_lag=lag, normalization="pairs")
        g0 = float(acov[0])
        rho = acov / g0
        window, taus = _first_window(rho, c)
        if window or lag >= limit:
            break
        lag = min(limit, 4 * lag)
    if fixed is not None:
        acov = autocorrelation(a, max_lag=int(fixed), normalization="pairs")
        g0 = float(acov[0])
        rho = acov / g0
        taus = 0.5 + np.concatenate([[0.0], np.cumsum(rho[1:])])
        window = int(fixed)
    found = window > 0
    if not found:
        window = int(np.argmax(taus[1 : max(2, n // 2 + 1)]) + 1)
    # Wolff's correction of the bias from the subtracted mean
    big_c = g0 * 2.0 * float(taus[window]) * (1.0 + (2 * window + 1) / n)
    var = g0 + big_c / n
    big_c = max(big_c, var)  # g >= 1
    g = big_c / var
    tau = 0.5 * g
    err = tau * float(np.sqrt(2.0 * (2 * window + 1) / n))
    converged = found and n >= _MIN_LENGTH_TAU * tau
    z = 1.959963984540054  # normal 97.5% quantile
    return AutocorrelationTime(
        value=tau,
        stderr=err,
        interval=(max(0.5, tau - z * err), tau + z * err),
        statistical_inefficiency=g,
        n_effective=n / g,
        variance_of_mean=big_c / n,
        dof=n / (2 * window + 1),
        window=window,
        c=float(c),
        converged=converged,
        n_samples=n,
        variance=var,
        rho=rho,
    )
