"""Statistics over independent replicas: Student-t interval and a seeded bootstrap.

Independent runs (different seeds or starting configurations) give independent estimates
``v_1 .. v_n``; their mean has standard error ``s / sqrt(n)`` (``s`` the sample standard
deviation with divisor ``n - 1``) and, for roughly normal ``v_i``, a confidence interval from
Student's t with ``n - 1`` degrees of freedom. This needs no model of the correlation within
a run, which makes it the most robust error bar when several runs exist.

References
----------
.. [1] "Student" (W. S. Gosset), "The probable error of a mean", Biometrika 6, 1 (1908).
.. [2] B. Efron and R. J. Tibshirani, *An Introduction to the Bootstrap* (Chapman & Hall,
   1993), Ch. 6 and 13 (standard error and percentile interval).
.. [3] A. Grossfield, P. N. Patrone, D. R. Roe, A. J. Schultz, D. W. Siderius and
   D. M. Zuckerman, "Best practices for quantification of uncertainty and sampling quality in
   molecular simulations", Living J. Comput. Mol. Sci. 1, 5067 (2019).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats as _st

from ..estimate import Estimate
from .correlation import _finite_1d

__all__ = [
    "BootstrapResult",
    "ReplicaResult",
    "bootstrap",
    "combine_replicas",
    "replica_mean",
]


@dataclass(frozen=True)
class ReplicaResult:
    """Mean of independent replica values with a Student-t interval.

    Attributes
    ----------
    value : float
        Mean of the replica values (unit ``u`` of the values).
    stderr : float
        ``s / sqrt(n)``, in ``u``.
    interval : tuple of float
        Confidence interval ``value -/+ t_{(1+confidence)/2, n-1} stderr``.
    confidence : float
        Confidence level of `interval` (0.95 by default).
    n_replicas : int
        ``n``.
    dof : int
        ``n - 1``.
    std : float
        Sample standard deviation ``s`` (divisor ``n - 1``), in ``u``.
    t_quantile : float
        The Student-t quantile used.
    """

    value: float
    stderr: float
    interval: tuple[float, float]
    confidence: float
    n_replicas: int
    dof: int
    std: float
    t_quantile: float


@dataclass(frozen=True)
class BootstrapResult:
    """Percentile bootstrap of a statistic.

    Attributes
    ----------
    value : float
        The statistic of the original data.
    stderr : float
        Standard deviation of the bootstrap distribution (divisor ``n_resamples - 1``).
    interval : tuple of float
        Percentile interval at `confidence`.
    confidence : float
        Confidence level of `interval`.
    n_resamples : int
        Number of resamples drawn.
    distribution : ndarray, shape (n_resamples,)
        The statistic of every resample.
    """

    value: float
    stderr: float
    interval: tuple[float, float]
    confidence: float
    n_resamples: int
    distribution: np.ndarray


def _check_confidence(confidence: float) -> float:
    if not 0 < confidence < 1:
        raise ValueError(f"`confidence` must be in (0, 1); got {confidence!r}")
    return float(confidence)


def replica_mean(values: ArrayLike, *, confidence: float = 0.95) -> ReplicaResult:
    """Mean, standard error and Student-t interval of independent replica values.

    Parameters
    ----------
    values : array_like, shape (n,)
        One value per independent replica (any unit ``u``), ``n >= 2``.
    confidence : float
        Confidence level of the interval (default 0.95).

    Returns
    -------
    ReplicaResult

    References
    ----------
    .. [1] "Student", Biometrika 6, 1 (1908).

    Examples
    --------
    >>> r = replica_mean([1.0, 2.0, 3.0])
    >>> r.value, round(r.stderr, 6), r.dof
    (2.0, 0.57735, 2)
    """
    conf = _check_confidence(confidence)
    v = _finite_1d(values, "values", 2, "values")
    n = v.size
    mean = float(v.mean())
    std = float(v.std(ddof=1))
    se = std / float(np.sqrt(n))
    t = float(_st.t.ppf(0.5 + conf / 2, n - 1))
    return ReplicaResult(mean, se, (mean - t * se, mean + t * se), conf, n, n - 1, std, t)


def bootstrap(
    data: ArrayLike,
    statistic: Callable[..., np.ndarray] = np.mean,
    *,
    n_resamples: int = 2000,
    confidence: float = 0.95,
    rng: np.random.Generator | int | None = None,
) -> BootstrapResult:
    """Percentile bootstrap of a statistic of independent values (e.g. replicas).

    Parameters
    ----------
    data : array_like, shape (n,)
        Independent values (``n >= 2``). Not for correlated samples of one series: resample
        replicas or blocks longer than the correlation time instead.
    statistic : callable
        ``statistic(samples, axis=-1)`` reducing the last axis (``np.mean``, ``np.median``
        ...); called on a batch of resamples at once.
    n_resamples : int
        Number of resamples (default 2000).
    confidence : float
        Confidence level of the percentile interval (default 0.95).
    rng : numpy.random.Generator or int, optional
        Random generator, or a seed for :func:`numpy.random.default_rng`. Pass one for
        reproducible results; None draws fresh entropy.

    Returns
    -------
    BootstrapResult

    References
    ----------
    .. [1] B. Efron and R. J. Tibshirani, *An Introduction to the Bootstrap* (1993), Ch. 13.

    Examples
    --------
    >>> res = bootstrap([1.0, 2.0, 3.0, 4.0], rng=np.random.default_rng(0))
    >>> res.value, 1.0 <= res.interval[0] < res.interval[1] <= 4.0
    (2.5, True)
    """
    conf = _check_confidence(confidence)
    v = _finite_1d(data, "data", 2, "values")
    if isinstance(n_resamples, bool) or int(n_resamples) != n_resamples or n_resamples < 2:
        raise ValueError(f"`n_resamples` must be an integer >= 2; got {n_resamples!r}")
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    n = v.size
    out = np.empty(int(n_resamples))
    per_batch = max(1, 2**22 // n)  # bound the index array to ~32 MB
    for first in range(0, out.size, per_batch):
        stop = min(first + per_batch, out.size)
        idx = gen.integers(0, n, size=(stop - first, n))
        out[first:stop] = statistic(v[idx], axis=-1)
    lo, hi = np.quantile(out, [0.5 - conf / 2, 0.5 + conf / 2])
    return BootstrapResult(
        value=float(statistic(v, axis=-1)),
        stderr=float(out.std(ddof=1)),
        interval=(float(lo), float(hi)),
        confidence=conf,
        n_resamples=out.size,
        distribution=out,
    )


def combine_replicas(estimates: Sequence[Estimate], *, quantity: str | None = None) -> Estimate:
    """Combine per-replica estimates of one quantity into a replica estimate.

    The value is the mean of the replica values; its error comes from their spread alone
    (Student t, ``n - 1`` degrees of freedom). As a cross-check the diagnostics give the
    error implied by the replicas' own error bars, ``sqrt(sum stderr_i^2) / n``, and the
    ``chi^2`` of the values about their mean with those error bars (p-value): a small
    p-value says the per-replica error bars are too small or the replicas differ.

    Parameters
    ----------
    estimates : sequence of Estimate
        At least two estimates of the same quantity, in the same unit.
    quantity : str, optional
        Name of the combined quantity (default: that of the first estimate).

    Returns
    -------
    Estimate
        ``method="replicas_student_t"``, ``n_independent`` = number of replicas.

    References
    ----------
    .. [1] "Student", Biometrika 6, 1 (1908).
    .. [2] A. Grossfield et al., Living J. Comput. Mol. Sci. 1, 5067 (2019).
    """
    if len(estimates) < 2:
        raise ValueError(f"need at least 2 replica estimates; got {len(estimates)}")
    units = {e.unit for e in estimates}
    if len(units) != 1:
        raise ValueError(f"replica estimates must share one unit; got {sorted(units)}")
    values = np.array([e.value for e in estimates])
    errs = np.array([e.stderr for e in estimates])
    res = replica_mean(values)
    pooled = float(np.sqrt(np.sum(errs**2)) / values.size)
    chi2 = float(np.sum(((values - res.value) / errs) ** 2)) if np.all(errs > 0) else np.nan
    p = float(_st.chi2.sf(chi2, values.size - 1)) if np.isfinite(chi2) else np.nan
    name = quantity or estimates[0].quantity
    warnings = []
    if np.isfinite(p) and p < 0.01:
        warnings.append(
            f"{name}: replica values scatter more than their error bars allow (chi^2 p = "
            f"{p:.2g}): the per-replica error bars may be too small or the replicas differ"
        )
    windows = [e.window for e in estimates if e.window is not None]
    return Estimate(
        quantity=name,
        method="replicas_student_t",
        value=res.value,
        stderr=res.stderr,
        interval=res.interval,
        unit=estimates[0].unit,
        window=None if not windows else (min(w[0] for w in windows),
                                          max(w[1] for w in windows)),
        window_unit=estimates[0].window_unit,
        group=estimates[0].group,
        n_independent=float(values.size),
        diagnostics={
            "n_replicas": values.size,
            "dof": res.dof,
            "t_quantile": res.t_quantile,
            "replica_std": res.std,
            "replica_values": values,
            "replica_stderrs": errs,
            "pooled_stderr": pooled,
            "chi2": chi2,
            "chi2_p_value": p,
        },
        warnings=tuple(warnings),
    )
