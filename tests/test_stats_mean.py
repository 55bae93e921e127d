"""mean_with_error: the whole chain on series with known answers."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

from transport.report.jsonout import build_document, dumps
from transport.stats import ar1, mean_with_error, ornstein_uhlenbeck


def test_ou_mean_error_and_correlation_time_in_time_units():
    # OU (exact discretisation, Gillespie, Phys. Rev. E 54, 2084 (1996)) with mean 5,
    # sigma 2, tau 0.5 ps sampled every 0.01 ps: tau_int dt -> tau (1 + (dt/tau)^2/12),
    # Var(mean) -> 2 tau sigma^2 / T for T >> tau (exact AR(1) formula, long-run limit).
    dt, tau, sigma, n = 0.01, 0.5, 2.0, 200_000
    x = ornstein_uhlenbeck(n, dt=dt, tau=tau, sigma=sigma, mean=5.0,
                           rng=np.random.default_rng(70))
    est = mean_with_error(x, dt=dt, t0=10.0, name="pressure", unit="bar", time_unit="ps",
                          skip=None)
    d = est.diagnostics
    exact_se = sigma * np.sqrt(2 * tau / (n * dt))
    assert est.quantity == "pressure"
    assert est.unit == "bar"
    assert est.method == "autocorrelation_time"
    assert est.window == pytest.approx((10.0, 10.0 + (n - 1) * dt))
    assert est.window_unit == "ps"
    # the error bar itself is estimated: relative error sqrt(2(2M+1)/N)/2 (Madras-Sokal)
    rel = 0.5 * np.sqrt(2 * (2 * d["tau_window_samples"] + 1) / n)
    assert est.stderr == pytest.approx(exact_se, rel=4 * rel)
    assert abs(est.value - 5.0) <= 4 * exact_se
    assert d["tau_int"] == pytest.approx(tau, rel=8 * rel)  # tau's rel. error is 2 rel
    assert d["n_effective"] == pytest.approx(n * dt / (2 * tau), rel=8 * rel)
    assert est.n_independent == d["n_effective"]
    # blocking cross-check agrees within its own uncertainty (plus the tau bar's)
    assert abs(d["blocking_stderr"] - est.stderr) <= 3 * np.hypot(
        d["blocking_stderr_error"], rel * est.stderr)
    # interval: Student t with N / (2M + 1) degrees of freedom, quantile from scipy.stats
    assert d["dof"] == pytest.approx(n / (2 * d["tau_window_samples"] + 1), rel=1e-12)
    q = stats.t.ppf(0.975, n / (2 * d["tau_window_samples"] + 1))
    assert est.interval[1] - est.value == pytest.approx(q * est.stderr, rel=1e-12)
    assert est.value - est.interval[0] == pytest.approx(q * est.stderr, rel=1e-12)
    assert est.warnings == ()
    for key in ("acf", "acf_lag", "blocking_block_time", "blocking_stderr"):
        assert est.curves[key].ndim == 1
    assert est.curves["acf"][0] == 1.0


def test_auto_skip_removes_a_transient_and_reports_it():
    rng = np.random.default_rng(71)
    n = 20_000
    x = ar1(0.9, n, rng=rng) + 20 * np.exp(-np.arange(n) / 500)
    est = mean_with_error(x, dt=2.0, time_unit="fs")
    d = est.diagnostics
    assert d["skip_mode"] == "auto"
    assert 1000 <= d["skip_samples"] <= 4000  # see test_stats_equilibration for the bounds
    assert d["t_equil"] == 2.0 * d["skip_samples"]
    assert est.window[0] == d["t_equil"]
    assert d["n_used"] == n - d["skip_samples"]
    # the transient is gone from the mean: truth 0 inside the 95% interval
    assert est.interval[0] <= 0.0 <= est.interval[1]
    # without the skip the same data give a mean biased by the transient
    raw = mean_with_error(x, skip=None)
    assert raw.value > est.value
    assert "equilibration_n_effective" in est.curves


def test_given_skip_and_no_skip():
    x = np.arange(100.0) % 7
    assert mean_with_error(x, skip=30).diagnostics["skip_samples"] == 30
    assert mean_with_error(x, skip=0).diagnostics["skip_samples"] == 0
    assert mean_with_error(x, skip=None).value == pytest.approx(x.mean())


def test_constant_series_is_exact():
    est = mean_with_error(np.full(50, 0.8), skip=None)
    assert est.value == 0.8
    assert est.stderr == 0.0
    assert est.interval == (0.8, 0.8)


def test_short_or_drifting_series_is_warned_about():
    # tau_int ~ 500 samples in a run of 2000: far below 50 tau_int
    x = ar1(0.999, 2000, rng=np.random.default_rng(72))
    est = mean_with_error(x, skip=None, name="energy")
    assert any("too short" in w or "short compared" in w for w in est.warnings)
    assert all(w.startswith("energy: ") for w in est.warnings)
    # a steady drift looks like a huge correlation time: the same warning
    drift = np.linspace(0, 10, 3000) + np.random.default_rng(73).normal(size=3000)
    assert mean_with_error(drift, skip=None).warnings


def test_record_is_json_in_the_common_format():
    x = ar1(0.5, 3000, rng=np.random.default_rng(74))
    est = mean_with_error(x, dt=0.5, time_unit="ps", name="Density", unit="g/cm^3")
    doc = build_document("average", inputs=[], settings={"skip": "auto"}, results=[est])
    back = json.loads(dumps(doc))
    rec = back["results"][0]
    assert rec["quantity"] == "Density"
    assert rec["method"] == "autocorrelation_time"
    # the JSON round trip keeps the numbers exactly (floats written with repr)
    assert rec["value"] == est.value and rec["stderr"] == est.stderr
    assert rec["interval95"] == list(est.interval)
    assert rec["diagnostics"]["t_equil"] == est.diagnostics["t_equil"]
    assert rec["diagnostics"]["tau_int"] == est.diagnostics["tau_int"]


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"skip": "all"}, "skip"),
    ({"skip": -1}, "skip"),
    ({"skip": 95}, "remain"),
    ({"dt": 0.0}, "dt"),
])
def test_bad_arguments(kwargs, match):
    with pytest.raises(ValueError, match=match):
        mean_with_error(np.arange(100.0), **kwargs)


def test_non_finite_sample_is_named():
    x = np.arange(100.0)
    x[42] = np.nan
    with pytest.raises(ValueError, match="sample 42"):
        mean_with_error(x)


def _ar1_var_of_mean(phi: float, n: int, sigma: float = 1.0) -> float:
    """Exact variance of the mean of n samples of a stationary AR(1) (textbook result)."""
    return sigma**2 * ((1 + phi) / (1 - phi)
                       - 2 * phi * (1 - phi**n) / (n * (1 - phi) ** 2)) / n


@pytest.mark.parametrize("seed", range(4))
def test_slow_small_tail_is_caught_by_blocking(seed):
    # Fast large correlations (AR(1) phi = 0.5, sd 1) plus a small slow part (phi = 0.998,
    # sd 0.15): rho ~ 0.02 at long lags carries ~90% of the variance of the mean, which
    # Sokal's window (~10 samples) misses: the autocorrelation-time error is ~0.37 of the
    # exact one (sum of the two exact AR(1) variances of the mean). Block averaging sees
    # the whole integral, and mean_with_error then reports it (the n-hexane temperature
    # behaves like this, tests/test_average_calibration.py). Tolerance: 3 of the blocking
    # error's own standard deviations (~8% here), so an error 2x off fails.
    n = 2**18
    rng = np.random.default_rng(900 + seed)
    x = ar1(0.5, n, rng=rng) + ar1(0.998, n, rng=rng, sigma=0.15)
    exact = np.sqrt(_ar1_var_of_mean(0.5, n) + _ar1_var_of_mean(0.998, n, 0.15))
    est = mean_with_error(x, skip=None)
    d = est.diagnostics
    assert d["stderr_source"] == "blocking"
    assert abs(est.stderr - exact) <= 3 * d["blocking_stderr_error"], est.stderr / exact
    assert any("slow tail" in w for w in est.warnings)
    q = stats.t.ppf(0.975, d["blocking_n_blocks"] - 1)  # Student t, blocks - 1 dof
    assert est.interval == pytest.approx((est.value - q * est.stderr,
                                          est.value + q * est.stderr), rel=1e-12)
    # control: the autocorrelation-time error alone is far too small on these data
    assert d["stderr_autocorrelation_time"] < 0.5 * exact
