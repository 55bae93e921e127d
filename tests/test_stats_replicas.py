"""Replica statistics against scipy.stats and exact bootstrap results."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from transport.estimate import Estimate
from transport.stats import bootstrap, combine_replicas, replica_mean


@pytest.mark.parametrize("n", [2, 3, 5, 12])
def test_replica_interval_matches_scipy_t_interval(n):
    # Reference: scipy.stats.t.interval(0.95, df=n-1, loc=mean, scale=sem)
    rng = np.random.default_rng(50 + n)
    v = rng.normal(3.0, 0.7, n)
    res = replica_mean(v)
    lo, hi = stats.t.interval(0.95, n - 1, loc=v.mean(), scale=stats.sem(v))
    assert res.interval == pytest.approx((lo, hi), rel=1e-13)
    assert res.stderr == pytest.approx(stats.sem(v), rel=1e-13)
    assert res.dof == n - 1
    assert res.t_quantile == pytest.approx(stats.t.ppf(0.975, n - 1), rel=1e-13)


def test_replica_interval_other_confidence():
    v = [1.0, 2.0, 4.0, 7.0]
    res = replica_mean(v, confidence=0.9)
    lo, hi = stats.t.interval(0.9, 3, loc=np.mean(v), scale=stats.sem(v))
    assert res.interval == pytest.approx((lo, hi), rel=1e-13)


def test_bootstrap_is_seeded_and_matches_the_ideal_standard_error():
    # The ideal (infinitely many resamples) bootstrap standard error of the mean is
    # sqrt(sum (x - xbar)^2) / n (Efron & Tibshirani, An Introduction to the Bootstrap,
    # 1993, Ch. 5, from memory). With B resamples the relative Monte Carlo error of the SD is
    # ~1/sqrt(2B) = 0.5% for B = 20000; 2.5% is 5 of those.
    rng = np.random.default_rng(60)
    x = rng.exponential(2.0, 40)
    a = bootstrap(x, n_resamples=20_000, rng=np.random.default_rng(1))
    b = bootstrap(x, n_resamples=20_000, rng=np.random.default_rng(1))
    c = bootstrap(x, n_resamples=20_000, rng=2)
    assert np.array_equal(a.distribution, b.distribution)  # same seed, same answer
    assert not np.array_equal(a.distribution, c.distribution)
    ideal = np.sqrt(np.sum((x - x.mean()) ** 2)) / x.size
    assert a.stderr == pytest.approx(ideal, rel=0.025)
    assert a.value == pytest.approx(x.mean())
    # percentile interval: the 2.5% and 97.5% quantiles of the distribution
    assert a.interval == pytest.approx(tuple(np.quantile(a.distribution, [0.025, 0.975])))


def test_bootstrap_median_statistic():
    # Exact ideal bootstrap of the median of x = 1..11 (n = 11, median = 6th of 11 draws):
    # P(median* <= j) = P(at least 6 of 11 draws <= j) = binom.sf(5, 11, j/11) (order
    # statistics of a resample; Efron & Tibshirani 1993, from memory). Its 2.5% and 97.5%
    # quantiles are 3 (P(<= 2) = 0.007, P(<= 3) = 0.051) and 9 (P(<= 8) = 0.949,
    # P(<= 9) = 0.993): far enough from the cut points that 2000 resamples find them
    # (the count at or below 3 is ~100 +- 10 against the 50 needed).
    x = np.arange(1.0, 12.0)
    res = bootstrap(x, np.median, n_resamples=2000, rng=np.random.default_rng(3))
    assert res.value == 6.0
    assert res.interval == (3.0, 9.0)
    j = np.arange(1, 12)
    pmf = np.diff(np.r_[0.0, stats.binom.sf(5, 11, j / 11)])
    ideal_sd = np.sqrt(np.sum(pmf * (j - np.sum(pmf * j)) ** 2))
    # Monte Carlo error of an SD from B draws ~1/sqrt(2B) = 1.6%: 5% is 3 of those
    assert res.stderr == pytest.approx(ideal_sd, rel=0.05)


def _est(value, stderr):
    return Estimate(quantity="density", method="autocorrelation_time", value=value,
                    stderr=stderr, interval=(value - 2 * stderr, value + 2 * stderr),
                    unit="g/cm^3", window=(0.0, 100.0), window_unit="ps")


def test_combine_replicas_uses_the_spread_of_the_replicas():
    ests = [_est(v, 0.01) for v in (0.99, 1.01, 1.00, 1.02)]
    comb = combine_replicas(ests)
    ref = replica_mean([0.99, 1.01, 1.00, 1.02])
    assert comb.method == "replicas_student_t"
    assert comb.value == pytest.approx(ref.value)
    assert comb.interval == pytest.approx(ref.interval)
    assert comb.n_independent == 4
    assert comb.diagnostics["pooled_stderr"] == pytest.approx(0.01 / 2)
    assert comb.warnings == ()


def test_combine_replicas_warns_when_error_bars_are_too_small():
    # values 10 stderr apart: chi^2 = 50 with 1 dof, p ~ 1e-12
    comb = combine_replicas([_est(1.0, 0.01), _est(1.1, 0.01)])
    assert comb.diagnostics["chi2_p_value"] < 1e-6
    assert any("scatter" in w for w in comb.warnings)


def test_replica_errors():
    with pytest.raises(ValueError, match="at least 2"):
        replica_mean([1.0])
    with pytest.raises(ValueError, match="confidence"):
        replica_mean([1.0, 2.0], confidence=95)
    with pytest.raises(ValueError, match="n_resamples"):
        bootstrap([1.0, 2.0], n_resamples=1)
    with pytest.raises(ValueError, match="one unit"):
        combine_replicas([_est(1.0, 0.1), Estimate("density", "x", 1.0, 0.1, (0.8, 1.2),
                                                   unit="kg/m^3")])
