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
    x = np.arange(1.0, 12.0)
    res = bootstrap(x, np.median, n_resamples=500, rng=np.random.default_rng(3))
    assert res.value == 6.0
    assert 1.0 <= res.interval[0] <= 6.0 <= res.interval[1] <= 11.0


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
