"""Block averaging against the exact AR(1) variance of the mean."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from transport.stats import ar1, block_average


def ar1_variance_of_mean(phi: float, n: int) -> float:
    """Exact variance of the mean of n consecutive samples of a stationary AR(1) with unit
    variance: (1/N)[(1+phi)/(1-phi) - 2 phi (1-phi^N) / (N (1-phi)^2)] (textbook result
    derived from the autocovariance phi^|k|; Box, Jenkins & Reinsel)."""
    return ((1 + phi) / (1 - phi) - 2 * phi * (1 - phi**n) / (n * (1 - phi) ** 2)) / n


def expected_blocking_variance(phi: float, b: int, n_blocks: int) -> float:
    """Exact expectation of the blocking estimate s^2/(n-1) at block size b.

    With block means y_i (each the mean of b consecutive samples) and their average ybar,
    E[(1/n) sum (y_i - ybar)^2] = E[y_i^2] - E[ybar^2] = V(b) - V(n b) for a zero-mean
    stationary series, where V(m) is the exact variance of a mean of m samples. So the
    blocking estimate has expectation (V(b) - V(n b)) / (n - 1) (follows from
    Flyvbjerg & Petersen, J. Chem. Phys. 91, 461 (1989), with the AR(1) V(m)).
    """
    return (ar1_variance_of_mean(phi, b) - ar1_variance_of_mean(phi, b * n_blocks)) / (
        n_blocks - 1
    )


@pytest.mark.parametrize(("phi", "seed"), [(0.5, 41), (0.9, 42), (0.9, 43), (0.97, 44)])
def test_blocking_curve_and_plateau_on_ar1(phi, seed):
    n = 2**18
    x = ar1(phi, n, rng=np.random.default_rng(seed))
    res = block_average(x)
    assert res.converged
    # 1) every level with >= 64 blocks matches its exact expectation within 4 of the
    #    level's own standard deviations (Flyvbjerg & Petersen: relative error of
    #    the stderr 1/sqrt(2(n-1))); 4 sigma because ~12 levels are checked
    for b, nb, se, dse in zip(res.curve_block_size, res.curve_n_blocks, res.curve_stderr,
                              res.curve_stderr_error, strict=True):
        if nb >= 64:
            assert abs(se - np.sqrt(expected_blocking_variance(phi, b, nb))) <= 4 * dse
    # 2) the plateau value agrees with the exact standard error of the mean within its
    #    stated uncertainty (3 sigma) ...
    exact = np.sqrt(ar1_variance_of_mean(phi, n))
    dse = res.curve_stderr_error[res.level]
    assert abs(res.stderr - exact) <= 3 * dse
    # 3) ... and the level chosen is on the plateau: the exact remaining bias of the
    #    blocking estimate there is at most ~1.3 of its statistical uncertainty. (Why 1.3:
    #    the M-test misses a lag-1 block correlation below ~2.6/sqrt(n), i.e. a relative
    #    stderr bias up to ~2.6/sqrt(n) = 3.6 sigma at the first passing level; one more
    #    blocking step halves the bias while sigma grows by sqrt(2): 1.3 sigma. 1.5 allows
    #    for the approximations.)
    bias = exact - np.sqrt(expected_blocking_variance(phi, res.block_size, res.n_blocks))
    assert 0 <= bias <= 1.5 * dse
    # interval: Student t with n_blocks - 1 degrees of freedom around the mean (quantile
    # from scipy.stats)
    q = stats.t.ppf(0.975, res.n_blocks - 1)
    assert res.interval == pytest.approx((res.value - q * res.stderr,
                                          res.value + q * res.stderr), rel=1e-12)


def test_white_noise_needs_no_blocking():
    # independent samples: stderr = sigma / sqrt(N) (exact); the plateau starts at once
    rng = np.random.default_rng(45)
    n = 2**16
    res = block_average(rng.normal(10.0, 2.0, n))
    assert res.block_size <= 2
    # the stderr from n/b block means has relative sd 1/sqrt(2(n/b - 1)) <= 1/sqrt(n - 2)
    # for b <= 2 (Flyvbjerg & Petersen): 4 of those (1.6%); 2x off fails by far
    assert res.stderr == pytest.approx(2.0 / np.sqrt(n), rel=4 / np.sqrt(n - 2))
    # g = N stderr^2 / variance: twice the relative sd of the stderr, 4 sd -> 0.032
    assert res.statistical_inefficiency == pytest.approx(1.0, abs=8 / np.sqrt(n - 2))


def test_constant_series():
    res = block_average(np.full(64, 3.0))
    assert res.value == 3.0
    assert res.stderr == 0.0
    assert res.interval == (3.0, 3.0)


def test_too_short_to_find_a_plateau():
    # tau_int ~ 500 samples in 256 samples: no level with enough blocks is uncorrelated,
    # and the stderr found is far below the exact one -- which is why it must be flagged
    x = ar1(0.998, 256, rng=np.random.default_rng(46))
    res = block_average(x)
    assert not res.converged
    assert res.stderr < 0.5 * np.sqrt(ar1_variance_of_mean(0.998, 256))


def test_bad_input():
    with pytest.raises(ValueError, match="at least 4"):
        block_average([1.0, 2.0])
    with pytest.raises(ValueError, match="alpha"):
        block_average(np.arange(10.0), alpha=1.5)
