"""Integrated autocorrelation time against AR(1) and Ornstein–Uhlenbeck exact results."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

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


def _exact_fixed_window_expectation(phi: float, n: int, m: int, *,
                                    corrected: bool) -> float:
    """Exact mean of the fixed-window estimate of Var(mean) for a unit-variance AR(1).

    The estimate is a quadratic form in the data (sample mean subtracted, autocovariance
    with divisor N - k, summed over |k| <= M), so its expectation is the trace of the form
    with the exact covariance Sigma_ij = phi^|i-j| (textbook identity E[x'Ax] = tr(A Sigma)
    for zero-mean x). With the centring matrix P, the lag-k term is the mean of the k-th
    diagonal of P Sigma P.
    """
    i = np.arange(n)
    sigma = phi ** np.abs(i[:, None] - i[None, :])
    centred = sigma - sigma.mean(axis=0) - sigma.mean(axis=1)[:, None] + sigma.mean()
    gam = np.array([np.diagonal(centred, k).mean() for k in range(m + 1)])
    big_c = gam[0] + 2 * gam[1:].sum()
    return big_c * ((1 + (2 * m + 1) / n) if corrected else 1.0) / n


def test_wolff_correction_at_a_fixed_window_matches_its_exact_expectation():
    # Wolff (Comput. Phys. Commun. 156, 143 (2004)) corrects the bias of the subtracted
    # mean for a fixed window. Reference: the exact expectation of the estimator (trace
    # formula above; 0.983 of the true Var(mean) at N = 600, M = 48: the correction is first
    # order in (2M+1)/N = 0.16). 3000 series: the Monte Carlo sd of the mean is ~1.2%,
    # the test allows 4 of them (z from the sample sd, not a seed-tuned band).
    phi, n, m, count = 0.9, 600, 48, 3000
    xs = ar1(phi, (count, n), rng=np.random.default_rng(700))
    est = np.array([integrated_autocorrelation_time(x, window=m).variance_of_mean
                    for x in xs])
    se = est.std(ddof=1) / np.sqrt(count)
    expect = _exact_fixed_window_expectation(phi, n, m, corrected=True)
    assert expect / ar1_variance_of_mean(phi, n) == pytest.approx(0.983, abs=0.002)
    assert abs(est.mean() - expect) <= 4 * se, (est.mean() / expect, se / expect)
    # control (power): the uncorrected estimator's exact mean is 0.85 of the truth, 12 of
    # these standard errors below the corrected one, so a missing correction fails here
    plain = _exact_fixed_window_expectation(phi, n, m, corrected=False)
    assert (expect - plain) / se > 10


def test_automatic_window_estimate_follows_the_scaled_chi_square_of_its_interval():
    # The Student-t interval of mean_with_error assumes v_hat ~ v chi2(nu) / nu with
    # nu = N / (2M + 1) (Satterthwaite). Robust check of that law over 1600 short series
    # (N_eff ~ 32): the probability integral transform u = chi2.cdf(nu v_hat / v, nu), with
    # each series' own nu (scipy.stats.chi2), must be uniform. The mean of v_hat / v is
    # ~1.11 here, not 1: the automatic window is long exactly when the partial sums run
    # high (tau_hat ~= M / c), so large estimates come with few dof (module notes of
    # transport.stats.autocorr, with the fixed-window control above and the 1/N decay).
    phi, n, count = 0.9, 600, 1600
    xs = ar1(phi, (count, n), rng=np.random.default_rng(701))
    res = [integrated_autocorrelation_time(x) for x in xs]
    ratio = np.array([r.variance_of_mean for r in res]) / ar1_variance_of_mean(phi, n)
    nu = np.array([r.dof for r in res])
    u = stats.chi2.cdf(nu * ratio, nu)
    # Kolmogorov-Smirnov against the uniform law at the 0.1% level (measured p = 0.75 on
    # another seed), and the median of u within 4 binomial sd (0.05) of 1/2
    assert stats.kstest(u, "uniform").pvalue > 1e-3
    assert abs(np.median(u) - 0.5) < 4 * 0.5 / np.sqrt(count)
    # the measured overshoot of the plain mean, as explained (1.09-1.12 over seeds; 6 of
    # its ~0.018 standard errors around 1.10)
    assert 1.0 < ratio.mean() < 1.2
    # control (power): error bars 20% too small or too large in variance are rejected
    for scale in (0.8, 1.25):
        assert stats.kstest(stats.chi2.cdf(nu * ratio * scale, nu), "uniform").pvalue < 1e-3


def test_overshoot_of_the_mean_vanishes_for_longer_runs():
    # The selection effect scales with the spread of the window relative to N: at N = 9600
    # (N_eff ~ 500) the mean of v_hat / v was measured 1.013 +- 0.007 (400 series, another
    # seed). Band: that residual overshoot plus 3 standard errors of this mean (~0.007),
    # i.e. |mean - 1| <= ~0.034 (this seed: 1.023); an error bar 2x off (variance 4x) or a
    # window rule overshooting by 5% fails. (The correction itself, only -1% here, is
    # guarded by the fixed-window test above.)
    phi, n, count = 0.9, 9600, 400
    xs = ar1(phi, (count, n), rng=np.random.default_rng(702))
    ratio = np.array([integrated_autocorrelation_time(x).variance_of_mean for x in xs])
    ratio /= ar1_variance_of_mean(phi, n)
    se = ratio.std(ddof=1) / np.sqrt(count)
    assert se < 0.01
    assert abs(ratio.mean() - 1.0) <= 0.013 + 3 * se, (ratio.mean(), se)


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
