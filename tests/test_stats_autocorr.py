"""Integrated autocorrelation time against AR(1) and Ornstein–Uhlenbeck exact results."""

from __future__ import annotations

import numpy as np
import pytest

from transport.stats import ar1, integrated_autocorrelation_time, ornstein_uhlenbeck


def ar1_variance_of_mean(phi: float, n: int) -> float:
    """Exact variance of the mean of n samples of a stationary AR(1) with sigma_x^2 = 1.

    Var = (1/N) [ (1+phi)/(1-phi) - 2 phi (1 - phi^N) / (N (1-phi)^2) ], from
    Var = (1/N^2) sum_{i,j} phi^|i-j| (textbook result, e.g. Box, Jenkins & Reinsel,
    *Time Series Analysis*; derived from the AR(1) autocovariance).
    """
    return ((1 + phi) / (1 - phi) - 2 * phi * (1 - phi**n) / (n * (1 - phi) ** 2)) / n


def ar1_tau_int(phi: float) -> float:
    """tau_int = 1/2 + sum_{k>=1} phi^k = (1+phi) / (2 (1-phi)) (Sokal's convention)."""
    return (1 + phi) / (2 * (1 - phi))


@pytest.mark.parametrize(
    ("phi", "n", "expected", "rtol"),
    [
        (0.8, 1000, 0.008960, 1e-4),  # given as "0.008960 (approx)"
        (0.9, 100, 0.17200048, 1e-7),
        (0.5, 10, 0.26003906, 1e-7),
    ],
)
def test_exact_ar1_variance_formula(phi, n, expected, rtol):
    # values stated in the task brief, derived from the AR(1) autocovariance
    assert ar1_variance_of_mean(phi, n) == pytest.approx(expected, rel=rtol)
    # and the closed form equals the double sum it comes from
    i = np.arange(n)
    direct = np.sum(phi ** np.abs(i[:, None] - i[None, :])) / n**2
    assert ar1_variance_of_mean(phi, n) == pytest.approx(direct, rel=1e-12)


@pytest.mark.parametrize(("phi", "seed"), [(0.0, 1), (0.5, 2), (0.9, 3), (0.9, 4), (0.97, 5)])
def test_tau_int_of_long_ar1(phi, seed):
    # Exact: tau_int = (1+phi) / (2 (1-phi)). Statistical tolerance from Sokal's variance
    # of the windowed estimate, Var(tau) ~= 2 (2M + 1) / N tau^2 (Madras & Sokal 1988,
    # J. Stat. Phys. 50, 109): 4 standard deviations, plus the truncation bias
    # sum_{k>M} phi^k = phi^(M+1)/(1-phi) which the window leaves out.
    n = 200_000
    x = ar1(phi, n, rng=np.random.default_rng(seed))
    res = integrated_autocorrelation_time(x)
    exact = ar1_tau_int(phi)
    sigma = exact * np.sqrt(2 * (2 * res.window + 1) / n)
    truncation = phi ** (res.window + 1) / (1 - phi)
    assert res.converged
    assert abs(res.tau - exact) <= 4 * sigma + truncation
    assert res.stderr == pytest.approx(res.tau * np.sqrt(2 * (2 * res.window + 1) / n))
    assert res.statistical_inefficiency == pytest.approx(2 * res.tau)
    assert res.n_effective == pytest.approx(n / (2 * res.tau))
    # Sokal's window rule: smallest M with M >= c tau(M), c = 5
    assert res.window >= 5 * (0.5 + res.rho[1 : res.window + 1].sum()) - 1e-9


def test_variance_of_mean_is_unbiased_on_short_ar1():
    # The bias-corrected estimate (Wolff, Comput. Phys. Commun. 156, 143 (2004)) of the
    # variance of the mean, averaged over 400 short series (N_eff ~ 30), must match the
    # exact AR(1) formula; without the correction it is ~10% low here. Tolerance: 4
    # standard errors of the average of 400 estimates.
    phi, n = 0.9, 600
    xs = ar1(phi, (400, n), rng=np.random.default_rng(7))
    est = np.array([integrated_autocorrelation_time(x).variance_of_mean for x in xs])
    exact = ar1_variance_of_mean(phi, n)
    assert abs(est.mean() - exact) <= 4 * est.std(ddof=1) / np.sqrt(est.size)


def test_ornstein_uhlenbeck_correlation_time():
    # OU with correlation time tau sampled every dt: rho(k) = exp(-k dt / tau), so
    # tau_int dt = dt (1 + e^(-dt/tau)) / (2 (1 - e^(-dt/tau))) -> tau as dt/tau -> 0
    # (exactly tau (1 + (dt/tau)^2/12 + ...)). Tolerance as for AR(1): 4 Sokal sigmas.
    dt, tau = 0.05, 1.0
    n = 400_000
    x = ornstein_uhlenbeck(n, dt=dt, tau=tau, sigma=3.0, mean=-7.0,
                           rng=np.random.default_rng(8))
    res = integrated_autocorrelation_time(x)
    phi = np.exp(-dt / tau)
    exact_samples = ar1_tau_int(phi)
    sigma = exact_samples * np.sqrt(2 * (2 * res.window + 1) / n)
    assert abs(res.tau - exact_samples) <= 4 * sigma
    assert abs(res.tau * dt - tau) <= 4 * sigma * dt + tau * (dt / tau) ** 2 / 12 + 1e-12
    assert res.variance == pytest.approx(9.0, rel=0.05)  # sigma^2, 5% >> its ~1% error


def test_constant_series_has_exact_mean():
    res = integrated_autocorrelation_time(np.full(100, 2.5))
    assert res.tau == 0.5
    assert res.variance_of_mean == 0.0
    assert res.n_effective == 100


def test_too_short_series_is_flagged():
    # tau_int ~ 500 samples, only 400 samples: no window M >= 5 tau can exist
    x = ar1(0.999, 400, rng=np.random.default_rng(9))
    res = integrated_autocorrelation_time(x)
    assert not res.converged


@pytest.mark.parametrize(("x", "kwargs", "match"), [
    (np.ones(3), {}, "at least 4"),
    (np.ones((2, 10)), {}, "1-D"),
    (np.r_[np.ones(9), np.nan], {}, "non-finite"),
    (np.arange(10.0), {"c": 0}, "`c`"),
])
def test_bad_input(x, kwargs, match):
    with pytest.raises(ValueError, match=match):
        integrated_autocorrelation_time(x, **kwargs)
