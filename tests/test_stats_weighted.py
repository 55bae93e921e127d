"""Weighted multi-component correlation and MSD against direct O(N K) sums (definitions)."""

from __future__ import annotations

import numpy as np
import pytest

from transport.stats import weighted_autocorrelation, weighted_msd


def _direct_acf(y: np.ndarray, w: np.ndarray, k_max: int) -> np.ndarray:
    n = y.shape[-1]
    return np.array([sum(w[c] * np.dot(y[c, : n - k], y[c, k:]) for c in range(len(w))) / (n - k)
                     for k in range(k_max + 1)])


@pytest.mark.parametrize("n", [50, 1_000, 140_001])  # shorter than, near and above a block
def test_weighted_acf_equals_direct_sum(n):
    rng = np.random.default_rng(n)
    x = rng.standard_normal((3, n))
    w = np.array([0.2, 0.0, 1.5])
    k = min(n - 1, 257)
    got = weighted_autocorrelation(x[None], w, max_lag=k)[0]
    # exact algebra, rounding only: 1e-12 relative to the zero-lag value
    np.testing.assert_allclose(got, _direct_acf(x, w, k), rtol=0, atol=1e-12 * abs(got[0]))


@pytest.mark.parametrize(("n", "k"), [(400_003, 3), (400_003, 16_000), (300_000, 40_000)])
def test_short_and_long_lag_schemes_equal_one_big_transform(n, k):
    """Both block schemes (one transform per block plus boundary windows for k up to a
    quarter of the block transform; block plus k-sample tail above) against one zero-padded
    FFT of the whole series (the Wiener-Khinchin identity, exact to rounding)."""
    rng = np.random.default_rng(k)
    x = rng.standard_normal((2, n)) + 0.5  # a mean: boundary pairs are not small
    w = np.array([1.0, 0.3])
    got = weighted_autocorrelation(x[None], w, max_lag=k)[0]
    size = 1 << int(np.ceil(np.log2(2 * n)))
    f = np.fft.rfft(x, size)
    ref = (w[:, None] * np.fft.irfft(f.real**2 + f.imag**2, size)).sum(0)[: k + 1]
    np.testing.assert_allclose(got, ref / (n - np.arange(k + 1)), rtol=0,
                               atol=1e-12 * abs(got[0]))


def test_mix_and_offset_equal_correlating_the_combinations():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((4, 140_000))  # more than one block: boundary pairs too
    mix = rng.standard_normal((2, 4))
    off = np.array([0.3, -1.1])
    w = np.array([0.7, 0.3])
    y = mix @ x - off[:, None]
    rows = [list(x)]  # rows as separate arrays: the no-copy path
    got = weighted_autocorrelation(rows, w, max_lag=100, mix=mix, offset=off)[0]
    np.testing.assert_allclose(got, _direct_acf(y, w, 100), rtol=0, atol=1e-12 * got[0])


def test_weighted_msd_equals_direct_sum():
    rng = np.random.default_rng(4)
    x = np.cumsum(rng.standard_normal((2, 20_000)), axis=1) + 1e3  # offset: cancellation
    w = np.array([1.0, 0.25])
    got = weighted_msd(x[None], w, max_lag=64)[0]
    n = x.shape[1]
    ref = [sum(w[c] * np.mean((x[c, k:] - x[c, : n - k]) ** 2) for c in range(2))
           for k in range(65)]
    assert got[0] == 0.0
    np.testing.assert_allclose(got[1:], ref[1:], rtol=1e-9)
