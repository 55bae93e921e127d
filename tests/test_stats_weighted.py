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


def test_mix_and_offset_equal_correlating_the_combinations():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((4, 70_000))
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
