"""Coverage of the 95% intervals of `mean_with_error` (and of alternatives), as a table.

For AR(1) and Ornstein–Uhlenbeck series with known mean, of several lengths and correlation
times, count how often the reported 95% interval contains the true mean. Columns:

* ``tau``       : Student t with N/(2M+1) dof, Wolff-corrected variance (skip=None) -- ours
* ``tau+auto``  : the same after automatic equilibration detection (skip="auto")
* ``t(neff-1)`` : the same variance but Student t with N_eff - 1 dof (a common choice)
* ``blocking``  : block averaging (plateau rule of stats.blocking), t with n_blocks - 1 dof
* ``naive``     : sigma / sqrt(N), correlation ignored
* ``se/exact``  : mean ratio of our stderr to the exact standard error of the mean

The exact standard error of an AR(1) mean is
sqrt((1/N)[(1+phi)/(1-phi) - 2 phi (1-phi^N) / (N (1-phi)^2)]) (unit variance; textbook
result from the autocovariance phi^|k|). A binomial count of n series has standard deviation
sqrt(0.95 * 0.05 / n) (0.007 for n = 1000).

Run: ``.venv/bin/python benchmarks/bench_coverage.py [--series 1000] [--auto-series 300]``.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import stats

from transport.stats import ar1, block_average, integrated_autocorrelation_time, mean_with_error

# (label, phi, N): OU with dt/tau = 0.1 is AR(1) with phi = exp(-0.1)
CONFIGS = [
    ("AR(1) phi=0.5", 0.5, 300),
    ("AR(1) phi=0.5", 0.5, 3000),
    ("AR(1) phi=0.9", 0.9, 300),
    ("AR(1) phi=0.9", 0.9, 1000),
    ("AR(1) phi=0.9", 0.9, 10000),
    ("OU dt/tau=0.1", float(np.exp(-0.1)), 1000),
    ("OU dt/tau=0.1", float(np.exp(-0.1)), 4000),
    ("AR(1) phi=0.99", 0.99, 3000),
    ("AR(1) phi=0.99", 0.99, 10000),
    ("AR(1) phi=0.99", 0.99, 30000),
]


def exact_se(phi: float, n: int) -> float:
    return float(np.sqrt(((1 + phi) / (1 - phi) - 2 * phi * (1 - phi**n)
                          / (n * (1 - phi) ** 2)) / n))


def run(n_series: int, n_auto: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    head = (f"{'series':15s} {'N':>6s} {'N/g':>6s} | {'tau':>6s} {'tau+auto':>8s} "
            f"{'t(neff-1)':>9s} {'blocking':>8s} {'naive':>6s} | {'se/exact':>8s}")
    print(head)
    print("-" * len(head))
    pooled = []
    for label, phi, n in CONFIGS:
        truth = 3.0
        xs = truth + ar1(phi, (n_series, n), rng=rng)
        ex = exact_se(phi, n)
        hit = {"tau": 0, "auto": 0, "neff": 0, "block": 0, "naive": 0}
        ratio = []
        for i, x in enumerate(xs):
            est = mean_with_error(x, skip=None)
            hit["tau"] += est.interval[0] <= truth <= est.interval[1]
            ratio.append(est.stderr / ex)
            tau = integrated_autocorrelation_time(x)
            q = stats.t.ppf(0.975, max(tau.n_effective - 1, 1))
            hit["neff"] += abs(x.mean() - truth) <= q * est.stderr
            blk = block_average(x)
            hit["block"] += blk.interval[0] <= truth <= blk.interval[1]
            hit["naive"] += abs(x.mean() - truth) <= 1.96 * x.std() / np.sqrt(n)
            if i < n_auto:
                auto = mean_with_error(x, skip="auto")
                hit["auto"] += auto.interval[0] <= truth <= auto.interval[1]
        m = xs.shape[0]
        g = (1 + phi) / (1 - phi)
        pooled.append(hit["tau"] / m)
        print(f"{label:15s} {n:6d} {n / g:6.0f} | {hit['tau'] / m:6.3f} "
              f"{hit['auto'] / min(m, n_auto):8.3f} {hit['neff'] / m:9.3f} "
              f"{hit['block'] / m:8.3f} {hit['naive'] / m:6.3f} | {np.mean(ratio):8.3f}",
              flush=True)
    print(f"\npooled coverage of our interval (skip=None): {np.mean(pooled):.3f} over "
          f"{len(CONFIGS) * n_series} series (binomial sd per row "
          f"{np.sqrt(0.95 * 0.05 / n_series):.3f}; tau+auto rows use {n_auto} series, sd "
          f"{np.sqrt(0.95 * 0.05 / n_auto):.3f})")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--series", type=int, default=1000, help="series per row")
    ap.add_argument("--auto-series", type=int, default=300,
                    help="series per row for the skip='auto' column (slower)")
    ap.add_argument("--seed", type=int, default=2026)
    args = ap.parse_args()
    t = time.perf_counter()
    run(args.series, args.auto_series, args.seed)
    print(f"({time.perf_counter() - t:.0f} s)")


if __name__ == "__main__":
    main()
