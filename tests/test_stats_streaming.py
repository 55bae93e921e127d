"""Bounded-memory correlation over chunks equals the full FFT answer."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import examples
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from transport.stats import StreamingCorrelator, ar1, autocorrelation, streaming_autocorrelation


def _split(x, cuts):
    """Split along the last axis at the sorted positions `cuts`."""
    return np.split(x, sorted(set(cuts)), axis=-1)


@settings(max_examples=examples(60), deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(min_value=2, max_value=1500),
    max_lag_frac=st.floats(min_value=0.0, max_value=1.0),
    block=st.integers(min_value=1, max_value=300),
    cut_seed=st.integers(min_value=0, max_value=2**31),
    n_cuts=st.integers(min_value=0, max_value=12),
    normalization=st.sampled_from(["pairs", "length", "none"]),
    subtract_mean=st.booleans(),
    n_series=st.integers(min_value=1, max_value=3),
)
def test_streaming_equals_full_fft(n, max_lag_frac, block, cut_seed, n_cuts, normalization,
                                   subtract_mean, n_series):
    rng = np.random.default_rng(cut_seed)
    max_lag = min(int(max_lag_frac * 80), n - 1)
    x = ar1(0.7, (n_series, n), rng=rng) + rng.normal(0, 5, size=(n_series, 1))
    cuts = rng.integers(0, n + 1, size=n_cuts)
    sc = StreamingCorrelator(n_series, max_lag, normalization=normalization,
                             subtract_mean=subtract_mean, block_size=block)
    for piece in _split(x, cuts):
        sc.update(piece)
    got = sc.result()
    want = autocorrelation(x, max_lag=max_lag, normalization=normalization,
                           subtract_mean=subtract_mean)
    # Both are sums of the same products, rounded differently: a few ulps of the largest
    # raw sum sum x^2 (pairs/length divide it by >= 1 sample) -> 1e-11 of sum x^2 / norm
    scale = np.sum(x * x, axis=-1).max() / (1 if normalization == "none" else n - max_lag)
    assert_allclose(got, want, rtol=0, atol=1e-11 * scale)


def test_default_block_size_long_series_exact():
    # Default blocks (FFTs of ~2^17 points), several blocks per update and a partial
    # last block; a large mean (1e6 against unit fluctuations) tests the one-pass mean
    # correction with the first-chunk shift.
    rng = np.random.default_rng(31)
    x = ar1(0.99, (2, 400_000), rng=rng) + 1.0e6
    sc = StreamingCorrelator(2, 2000)
    assert 2**16 <= sc.fft_length <= 2**18
    for piece in _split(x, [1, 777, 150_000, 390_001]):
        sc.update(piece)
    got = sc.result()
    want = autocorrelation(x - 1.0e6, max_lag=2000)  # the mean shifts nothing
    # relative to the variance: rounding of sums of 4e5 O(1) products after the shift
    assert_allclose(got, want, rtol=0, atol=1e-10 * want[:, 0].max())


def test_result_can_be_taken_midway():
    rng = np.random.default_rng(32)
    x = rng.normal(size=5000)
    sc = StreamingCorrelator(1, 30, block_size=700)
    sc.update(x[:2500])
    mid = sc.result()
    assert_allclose(mid[0], autocorrelation(x[:2500], max_lag=30), atol=1e-12)
    sc.update(x[2500:])
    assert sc.n_samples == 5000
    assert_allclose(sc.result()[0], autocorrelation(x, max_lag=30), atol=1e-12)


def test_streaming_function_over_a_generator():
    rng = np.random.default_rng(33)
    x = rng.normal(size=(3, 3000))
    chunks = (x[:, i : i + 250] for i in range(0, 3000, 250))
    got = streaming_autocorrelation(chunks, max_lag=100, block_size=400)
    assert_allclose(got, autocorrelation(x, max_lag=100), atol=1e-12)


def test_streaming_errors():
    sc = StreamingCorrelator(2, 10)
    with pytest.raises(ValueError, match="shape"):
        sc.update(np.zeros(5))
    with pytest.raises(ValueError, match="non-finite"):
        sc.update(np.full((2, 3), np.nan))
    sc.update(np.zeros((2, 5)))
    with pytest.raises(ValueError, match="at least max_lag"):
        sc.result()
    with pytest.raises(ValueError, match="max_lag"):
        StreamingCorrelator(1, -1)
    with pytest.raises(ValueError, match="empty"):
        streaming_autocorrelation(iter(()), max_lag=3)
