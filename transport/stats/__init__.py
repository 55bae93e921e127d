"""Reusable statistics for correlated time series (knows nothing about the physics).

Correlation functions
    autocorrelation(x, *, max_lag, normalization, subtract_mean, workers)
    cross_correlation(x, y, *, max_lag, normalization, subtract_mean, workers)
    StreamingCorrelator(n_series, max_lag, *, ...)      bounded memory, exact, chunk by chunk
    streaming_autocorrelation(chunks, *, max_lag, ...)
    msd(positions, *, max_lag, chunk_size, workers)     FFT mean-squared displacement
    msd_per_particle(positions, *, ...)
    weighted_autocorrelation(x, weights, *, max_lag)   sum of component ACFs, blocked FFTs
    weighted_msd(x, weights, *, max_lag)               sum of component MSDs

Error bars of a mean
    integrated_autocorrelation_time(x, *, c)  -> AutocorrelationTime
    block_average(x)                          -> BlockingResult
    detect_equilibration(x, *, n_candidates)  -> Equilibration
    mean_with_error(x, *, dt, skip, ...)      -> transport.Estimate

Independent replicas
    replica_mean(values)                      -> ReplicaResult (Student t, n - 1 dof)
    bootstrap(data, statistic, *, rng)        -> BootstrapResult
    combine_replicas(estimates)               -> transport.Estimate

Synthetic series with known statistics
    ar1(phi, shape, *, rng), ornstein_uhlenbeck(shape, *, dt, tau, rng)

Conventions: series along the last axis; times in samples unless a ``dt`` is given;
``tau_int = 1/2 + sum_{k>=1} rho(k)`` and ``g = 2 tau_int``; every result is a frozen
dataclass with ``value``, ``stderr`` and a 95% ``interval``.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from .._lazy import lazy_names

#: Where each public name lives. The submodules are imported on first use, so that a
#: command needing one of them (the FFT MSD, say) does not pay for scipy.stats.
_WHERE = {
    "AutocorrelationTime": "autocorr", "integrated_autocorrelation_time": "autocorr",
    "BlockingResult": "blocking", "block_average": "blocking",
    "NORMALIZATIONS": "correlation", "Normalization": "correlation",
    "autocorrelation": "correlation", "cross_correlation": "correlation",
    "Equilibration": "equilibration", "detect_equilibration": "equilibration",
    "mean_with_error": "mean",
    "msd": "msd", "msd_per_particle": "msd",
    "BootstrapResult": "replicas", "ReplicaResult": "replicas", "bootstrap": "replicas",
    "combine_replicas": "replicas", "replica_mean": "replicas",
    "StreamingCorrelator": "streaming", "streaming_autocorrelation": "streaming",
    "ar1": "synthetic", "ornstein_uhlenbeck": "synthetic",
    "weighted_autocorrelation": "weighted", "weighted_msd": "weighted",
}

if TYPE_CHECKING:
    from .autocorr import AutocorrelationTime, integrated_autocorrelation_time
    from .blocking import BlockingResult, block_average
    from .correlation import NORMALIZATIONS, Normalization, autocorrelation, cross_correlation
    from .equilibration import Equilibration, detect_equilibration
    from .mean import mean_with_error
    from .msd import msd, msd_per_particle
    from .replicas import (
        BootstrapResult,
        ReplicaResult,
        bootstrap,
        combine_replicas,
        replica_mean,
    )
    from .streaming import StreamingCorrelator, streaming_autocorrelation
    from .synthetic import ar1, ornstein_uhlenbeck
    from .weighted import weighted_autocorrelation, weighted_msd




__all__ = [
    "NORMALIZATIONS",
    "AutocorrelationTime",
    "BlockingResult",
    "BootstrapResult",
    "Equilibration",
    "Normalization",
    "ReplicaResult",
    "StreamingCorrelator",
    "ar1",
    "autocorrelation",
    "block_average",
    "bootstrap",
    "combine_replicas",
    "cross_correlation",
    "detect_equilibration",
    "integrated_autocorrelation_time",
    "mean_with_error",
    "msd",
    "msd_per_particle",
    "ornstein_uhlenbeck",
    "replica_mean",
    "streaming_autocorrelation",
    "weighted_autocorrelation",
    "weighted_msd",
]

__getattr__, __dir__ = lazy_names(__name__, globals(), _WHERE, __all__)
