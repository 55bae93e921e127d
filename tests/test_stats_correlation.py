"""FFT auto- and cross-correlation against direct sums, statsmodels and the OU process."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from statsmodels.tsa.stattools import acf, acovf

from transport.stats import autocorrelation, cross_correlation, ornstein_uhlenbeck


def _direct(x, y, max_lag, normalization, subtract_mean):
    """The definition summed term by term: c_xy(k) = sum_t x(t) y(t+k) / norm(k)."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if subtract_mean:
        x = x - x.mean(axis=-1, keepdims=True)
        y = y - y.mean(axis=-1, keepdims=True)
    n = x.shape[-1]
    out = np.empty((*x.shape[:-1], max_lag + 1))
    for k in range(max_lag + 1):
        s = np.sum(x[..., : n - k] * y[..., k:], axis=-1)
        out[..., k] = s / {"pairs": n - k, "length": n, "none": 1}[normalization]
    return out


@pytest.mark.parametrize("normalization", ["pairs", "length", "none"])
@pytest.mark.parametrize("subtract_mean", [True, False])
@pytest.mark.parametrize("max_lag", [None, 0, 7])
def test_autocorrelation_equals_direct_sums(normalization, subtract_mean, max_lag):
    rng = np.random.default_rng(11)
    x = rng.normal(3.0, 2.0, size=(2, 3, 50))  # a batch of 6 series
    k = 49 if max_lag is None else max_lag
    got = autocorrelation(x, max_lag=max_lag, normalization=normalization,
                          subtract_mean=subtract_mean)
    want = _direct(x, x, k, normalization, subtract_mean)
    assert got.shape == (2, 3, k + 1)
    # FFT rounding: a few ulps of the largest term (sum of x^2 ~ 50 * 13) -> 1e-12 relative
    assert_allclose(got, want, rtol=0, atol=1e-12 * np.abs(want).max())


@pytest.mark.parametrize("normalization", ["pairs", "length", "none"])
def test_cross_correlation_equals_direct_sums(normalization):
    rng = np.random.default_rng(12)
    x = rng.normal(size=(4, 37))
    y = 0.5 * np.roll(x, 3, axis=-1) + rng.normal(size=(4, 37)) + 1.0
    got = cross_correlation(x, y, max_lag=20, normalization=normalization)
    want = _direct(x, y, 20, normalization, True)
    assert_allclose(got, want, rtol=0, atol=1e-12 * np.abs(want).max())
    # negative lags are the swapped call: c_xy(-k) = c_yx(k)
    back = cross_correlation(y, x, max_lag=20, normalization=normalization)
    assert_allclose(back, _direct(y, x, 20, normalization, True), rtol=0,
                    atol=1e-12 * np.abs(want).max())


def test_autocorrelation_of_float32_is_computed_in_float64():
    rng = np.random.default_rng(13)
    x = rng.normal(size=300).astype(np.float32)
    got = autocorrelation(x, max_lag=10)
    assert got.dtype == np.float64
    assert_allclose(got, _direct(x, x, 10, "pairs", True), rtol=0, atol=1e-13)


def test_statsmodels_acf_and_acovf_agree():
    # Reference: statsmodels.tsa.stattools. acf divides the 1/N ("length") autocovariance by
    # c(0); acovf(adjusted=True) divides lag k by N - k ("pairs"). DESIGN.md measured the
    # agreement at ~3e-16 relative to c(0); 1e-10 leaves room for other FFT builds.
    rng = np.random.default_rng(14)
    x = np.cumsum(rng.normal(size=4000)) * 0.01 + rng.normal(size=4000)  # correlated
    k = 500
    length = autocorrelation(x, max_lag=k, normalization="length")
    assert_allclose(length / length[0], acf(x, nlags=k, fft=True, adjusted=False),
                    rtol=0, atol=1e-10)
    pairs = autocorrelation(x, max_lag=k, normalization="pairs")
    ref = acovf(x, adjusted=True, demean=True, fft=True, nlag=k)
    assert_allclose(pairs, ref, rtol=0, atol=1e-10 * ref[0])
    ref_raw = acovf(x, adjusted=False, demean=False, fft=True, nlag=k)
    raw = autocorrelation(x, max_lag=k, normalization="length", subtract_mean=False)
    assert_allclose(raw, ref_raw, rtol=0, atol=1e-10 * ref_raw[0])


def test_ornstein_uhlenbeck_correlation_function_and_integral():
    # Exact: an OU process with variance sigma^2 and correlation time tau has
    # <x(0) x(t)> = sigma^2 exp(-t / tau) and int_0^inf = sigma^2 tau
    # (Uhlenbeck & Ornstein, Phys. Rev. 36, 823 (1930)). The exact discretisation
    # (Gillespie, Phys. Rev. E 54, 2084 (1996)) keeps these at every sampled lag.
    rng = np.random.default_rng(15)
    dt, tau, sigma = 0.1, 2.0, 1.5
    x = ornstein_uhlenbeck((64, 20_000), dt=dt, tau=tau, sigma=sigma, rng=rng)
    k = int(10 * tau / dt)
    c = autocorrelation(x, max_lag=k, normalization="pairs", workers=2)
    t = np.arange(k + 1) * dt
    mean_c = c.mean(axis=0)
    # tolerance from the data: 5 standard errors of the mean over 64 independent series,
    # plus the O(tau/T) bias of a covariance with the sample mean removed (~2 tau sigma^2/T)
    se = c.std(axis=0, ddof=1) / np.sqrt(c.shape[0])
    bias = 2 * tau / (x.shape[1] * dt) * sigma**2
    assert np.all(np.abs(mean_c - sigma**2 * np.exp(-t / tau)) <= 5 * se + bias)
    # integral by the trapezoid rule; its discretisation error for an exponential is
    # (dt/tau)^2 / 12 relative (2e-4 here), the truncation at 10 tau is e^-10
    integral = dt * (c.sum(axis=1) - 0.5 * (c[:, 0] + c[:, -1]))
    se_int = integral.std(ddof=1) / np.sqrt(integral.size)
    assert abs(integral.mean() - sigma**2 * tau) <= 5 * se_int + bias * 10 * tau


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"normalization": "unbiased"}, "normalization"),
        ({"max_lag": 50}, "max_lag"),
        ({"max_lag": -1}, "max_lag"),
        ({"max_lag": 2.5}, "max_lag"),
    ],
)
def test_bad_arguments_are_named(kwargs, match):
    with pytest.raises(ValueError, match=match):
        autocorrelation(np.ones(50), **kwargs)


def test_cross_correlation_needs_equal_lengths():
    with pytest.raises(ValueError, match="same length"):
        cross_correlation(np.ones(5), np.ones(6))
