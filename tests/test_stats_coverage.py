"""Calibration: the reported 95% intervals contain the true mean ~95% of the time.

An error bar that ignores correlation, or is biased for short runs, fails this at once:
the naive sigma/sqrt(N) interval covers AR(1) phi = 0.9 means only ~35% of the time
(P(|Z| < 1.96 / sqrt(19))).
The larger version with a table is benchmarks/bench_coverage.py.
"""

from __future__ import annotations

import numpy as np

from transport.stats import ar1, mean_with_error, ornstein_uhlenbeck

# (kind, parameter, length, count): AR(1) phi, or OU dt/tau; lengths from N_eff ~ 25 to ~200
CONFIGS = [
    ("ar1", 0.9, 500, 200),
    ("ar1", 0.9, 2000, 200),
    ("ar1", 0.5, 300, 200),
    ("ou", 0.1, 1000, 200),
    ("ou", 0.1, 4000, 200),
]


def _series(kind, param, n, count, rng):
    if kind == "ar1":
        return ar1(param, (count, n), rng=rng), 0.0
    return ornstein_uhlenbeck((count, n), dt=param, tau=1.0, sigma=3.0, mean=-2.0,
                              rng=rng), -2.0


def _coverage(xs, truth, skip):
    hits = 0
    for x in xs:
        lo, hi = mean_with_error(x, skip=skip).interval
        hits += lo <= truth <= hi
    return hits / len(xs)


def test_coverage_of_95_percent_interval_without_skip():
    # 1000 series: the binomial standard deviation of the pooled coverage at 0.95 is
    # 0.007, so [0.92, 0.98] is a >4 sigma band; each config (200 series, sd 0.015) must
    # be above 0.90 (3 sigma below 0.95).
    rng = np.random.default_rng(80)
    per_config = []
    for kind, param, n, count in CONFIGS:
        xs, truth = _series(kind, param, n, count, rng)
        per_config.append(_coverage(xs, truth, skip=None))
    pooled = float(np.mean(per_config))
    assert 0.92 <= pooled <= 0.98, per_config
    assert min(per_config) >= 0.90, per_config


def test_coverage_with_automatic_equilibration_detection():
    # Stationary series with skip="auto": the detection must not cut legitimate
    # fluctuations so often that the interval stops covering (the plain maximum-N_eff
    # rule gives ~0.90-0.92 here, measured). 240 series: sd 0.014; 0.91 is ~3 sigma below
    # 0.95.
    rng = np.random.default_rng(81)
    xs = ar1(0.9, (240, 800), rng=rng)
    cov = _coverage(xs, 0.0, skip="auto")
    assert 0.91 <= cov <= 0.99


def test_naive_error_bar_would_fail_this_check():
    # The same check run on sigma/sqrt(N) must fail, or the test above could not fail.
    rng = np.random.default_rng(82)
    xs = ar1(0.9, (200, 2000), rng=rng)
    naive = np.abs(xs.mean(axis=1)) <= 1.96 * xs.std(axis=1) / np.sqrt(xs.shape[1])
    assert naive.mean() < 0.6
