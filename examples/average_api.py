"""An honest average of a correlated series (the job of ``transport average``).

Invented scenario: a density time series with an initial transient (compression during
equilibration) followed by correlated fluctuations (AR(1), phi = 0.95) around 0.8442.
The naive standard error sigma / sqrt(N) is printed beside the correlation-aware one.

Run: ``python examples/average_api.py``
"""

from __future__ import annotations

import numpy as np

from transport import mean_with_error
from transport.report.text import format_estimates
from transport.stats import ar1


def main(seed: int = 3, n: int = 20_000) -> None:
    rng = np.random.default_rng(seed)
    x = 0.8442 + 0.002 * ar1(0.95, n, rng=rng)
    x[:500] += 0.02 * np.exp(-np.arange(500) / 100.0)  # equilibration transient
    est = mean_with_error(x, dt=0.01, name="density", unit="sigma^-3", time_unit="tau")
    print(format_estimates([est], title="density of an invented run (true mean 0.8442)"))
    naive = x.std(ddof=1) / np.sqrt(n)
    print(f"\nnaive sigma/sqrt(N) = {naive:.2g}, correlation-aware stderr = {est.stderr:.2g}")


if __name__ == "__main__":
    main()
