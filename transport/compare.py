"""Comparing candidate potentials: pooling, deviations, significance, ranking (pure).

Every function here takes :class:`~transport.Estimate` results (one quantity, one unit) and
returns frozen results; nothing is read, written or printed.

* :func:`pool_replicas` - replicas of one candidate at one state point -> one Estimate:
  the inverse-variance weighted mean with a chi-square check of the replicas' consistency
  (widened by the Birge ratio when the check rejects at 5%), or the plain mean with the
  replicas' spread when a replica has no error bar.
* :func:`deviation_from_reference` - a candidate against a reference (experiment): the
  difference in the unit, in % and in combined standard errors.
* :func:`pairwise_differences` - every pair of candidates: difference, standard error, a
  two-sided z test (Welch t when both error bars have finite degrees of freedom), p-values
  adjusted for multiple comparisons by Holm's step-down method (:func:`holm_adjust`).
* :func:`rank_candidates` - candidates ordered by |deviation from the reference| and the
  probability that each is the closest, simulated from every candidate's sampling
  distribution and the reference's.

Degrees of freedom of an error bar (:func:`estimate_dof`): ``n_independent - 1`` when the
estimate states ``n_independent``, but never more than its 95% interval implies (the
interval's half-width over the stderr is a Student t quantile; the MSD estimate counts
particles in ``n_independent`` while its error bar rests on a few time blocks). No
``n_independent`` and a +-1.96 stderr interval mean a normal error bar (infinite dof).

Cautions (for anyone choosing a potential from these numbers): the tests assume each
error bar is honest and the estimates independent (separate runs); a systematic error
common to all candidates (same force-field family, same finite box, same cutoff) does not
show in them. "Not significantly different" is not "equal": look at the difference and its
interval. The probability of being closest treats each sampling distribution as the
distribution of the true value (a flat prior); it says how sure the order is given these
error bars, not how likely a potential is to be right elsewhere.

References
----------
.. [1] P. R. Bevington and D. K. Robinson, *Data Reduction and Error Analysis for the
   Physical Sciences*, 3rd ed. (McGraw-Hill, 2003), Ch. 4 (weighted mean, its error, and
   the chi-square of the values about it).
.. [2] R. T. Birge, "The calculation of errors by the method of least squares",
   Phys. Rev. 40, 207 (1932) (scaling an error by sqrt(chi^2/dof)).
.. [3] B. L. Welch, "The generalization of 'Student's' problem when several different
   population variances are involved", Biometrika 34, 28 (1947); F. E. Satterthwaite,
   "An approximate distribution of estimates of variance components", Biometrics Bull. 2,
   110 (1946).
.. [4] S. Holm, "A simple sequentially rejective multiple test procedure", Scand. J.
   Statist. 6, 65 (1979).
.. [5] H. H. Ku, "Notes on the use of propagation of error formulas", J. Res. Natl. Bur.
   Stand. 70C, 263 (1966) (first-order error of a ratio; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from itertools import combinations

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from .estimate import Estimate

__all__ = [
    "Deviation",
    "Difference",
    "Ranking",
    "Reference",
    "deviation_from_reference",
    "estimate_dof",
    "holm_adjust",
    "pairwise_differences",
    "pool_replicas",
    "rank_candidates",
]

#: Degrees of freedom above which an error bar counts as normal: the t quantile is then
#: within 0.1% of the normal one (t_{0.975, 1000} = 1.9623 vs 1.9600), below what any
#: interval here is known to.
DOF_MAX = 1000.0


@dataclass(frozen=True)
class Reference:
    """A reference value (experiment, or an accepted simulation) with its uncertainty.

    Attributes
    ----------
    value : float
        The reference value, in `unit`.
    stderr : float
        Its standard uncertainty (one standard deviation), in `unit`; 0 for an exact value.
    unit : str
        Unit of `value` and `stderr`, spelled as the candidates' estimates spell it.
    source : str
        Where the value comes from (paper, table, measurement), for the report.
    dof : float
        Degrees of freedom of `stderr` (``inf``: a normal uncertainty, the default).
    """

    value: float
    stderr: float
    unit: str
    source: str = ""
    dof: float = math.inf

    def __post_init__(self) -> None:
        object.__setattr__(self, "value", float(self.value))
        object.__setattr__(self, "stderr", float(self.stderr))
        object.__setattr__(self, "dof", float(self.dof))
        if not math.isfinite(self.value):
            raise ValueError(f"reference value must be finite; got {self.value!r}")
        if not (math.isfinite(self.stderr) and self.stderr >= 0):
            raise ValueError(
                f"reference stderr must be finite and >= 0; got {self.stderr!r} (use 0 for "
                "an exact reference)")
        if not self.dof > 0:
            raise ValueError(f"reference dof must be > 0; got {self.dof!r}")


@dataclass(frozen=True)
class Deviation:
    """A candidate's deviation from the reference.

    Attributes
    ----------
    value, reference : float
        The candidate's estimate and the reference value, in `unit`.
    difference : float
        ``value - reference``, in `unit`.
    stderr : float
        Combined standard error ``sqrt(s_value^2 + s_reference^2)``, in `unit`.
    percent : float
        ``100 (value - reference) / reference`` (NaN for a zero reference).
    percent_stderr : float
        First-order standard error of `percent`:
        ``100 / |r| sqrt(s_v^2 + (v / r)^2 s_r^2)`` (ref. [5] of the module).
    n_sigma : float
        ``difference / stderr``: the deviation in combined standard errors (signed).
    unit : str
    warnings : tuple of str
    """

    value: float
    reference: float
    difference: float
    stderr: float
    percent: float
    percent_stderr: float
    n_sigma: float
    unit: str
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class Difference:
    """The difference ``first - second`` of two candidates and its test.

    Attributes
    ----------
    first, second : str
        The candidates' names.
    difference : float
        ``value(first) - value(second)``, in `unit`.
    stderr : float
        ``sqrt(s_1^2 + s_2^2)`` (independent estimates), in `unit`.
    interval : tuple of float
        95% interval of the difference (Student t with `dof`, or normal), in `unit`.
    test : str
        ``"z"`` (both error bars normal) or ``"welch_t"``.
    statistic : float
        ``difference / stderr``.
    dof : float
        Welch–Satterthwaite degrees of freedom (``inf`` for the z test).
    p_value : float
        Two-sided p-value of "no difference", unadjusted.
    p_adjusted : float
        Holm-adjusted p-value over all pairs of the comparison.
    significant : bool
        ``p_adjusted <= alpha``: the family-wise error rate is at most `alpha`.
    alpha : float
    unit : str
    """

    first: str
    second: str
    difference: float
    stderr: float
    interval: tuple[float, float]
    test: str
    statistic: float
    dof: float
    p_value: float
    p_adjusted: float
    significant: bool
    alpha: float
    unit: str


@dataclass(frozen=True)
class Ranking:
    """Candidates ordered by agreement with a reference.

    Attributes
    ----------
    names : tuple of str
        Candidates, closest to the reference first (by ``|value - reference|``).
    deviations : tuple of Deviation
        Each candidate's deviation, in the order of `names`.
    probability_closest : tuple of float
        Fraction of simulated draws in which each candidate is the closest to the
        (simulated) reference, in the order of `names`; the values sum to 1.
    probability_stderr : tuple of float
        Monte Carlo standard error of each probability, ``sqrt(p (1 - p) / n_draws)``.
    n_draws : int
        Number of simulated draws.
    unit : str
    warnings : tuple of str
    """

    names: tuple[str, ...]
    deviations: tuple[Deviation, ...]
    probability_closest: tuple[float, ...]
    probability_stderr: tuple[float, ...]
    n_draws: int
    unit: str
    warnings: tuple[str, ...] = ()


# ---------------------------------------------------------------------------------------
# checks at the door


def _t_quantile(dof: float, q: float = 0.975) -> float:
    return float(special.ndtri(q)) if math.isinf(dof) else float(special.stdtrit(dof, q))


def _two_sided_p(statistic: float, dof: float) -> float:
    a = -abs(statistic)
    return float(2 * (special.ndtr(a) if math.isinf(dof) else special.stdtr(dof, a)))


_Q_DOF_MAX = float(special.stdtrit(DOF_MAX, 0.975))


def _check_estimates(estimates: Sequence[Estimate], what: str, names: Sequence[str]) -> None:
    """One unit and one quantity among `estimates`, finite values; else ValueError."""
    for name, e in zip(names, estimates, strict=True):
        if not isinstance(e, Estimate):
            raise ValueError(f"{what} {name!r} is a {type(e).__name__}, expected an Estimate")
        if not math.isfinite(e.value):
            raise ValueError(f"{what} {name!r} has a non-finite value ({e.value!r})")
    units = {e.unit for e in estimates}
    if len(units) > 1:
        listed = ", ".join(f"{n!r}: {e.unit!r}" for n, e in zip(names, estimates, strict=True))
        raise ValueError(
            f"{what}s are in mixed units ({listed}); convert them to one unit first "
            "(Estimate.scaled)")
    quantities = {e.quantity for e in estimates}
    if len(quantities) > 1:
        raise ValueError(
            f"{what}s are of different quantities ({sorted(quantities)}); compare one "
            "quantity at a time")


def _check_errors(estimates: Sequence[Estimate], what: str, names: Sequence[str]) -> None:
    for name, e in zip(names, estimates, strict=True):
        if not (math.isfinite(e.stderr) and e.stderr > 0):
            raise ValueError(
                f"{what} {name!r} has no usable error bar (stderr = {e.stderr!r}); a "
                "comparison needs a finite, positive stderr for every candidate")


def _check_candidates(candidates: Mapping[str, Estimate], minimum: int) -> tuple[
        list[str], list[Estimate]]:
    if not isinstance(candidates, Mapping):
        raise ValueError("`candidates` must be a mapping of name -> Estimate")
    names = [str(n) for n in candidates]
    ests = list(candidates.values())
    if len(ests) < minimum:
        raise ValueError(f"need at least {minimum} candidates; got {len(ests)}")
    _check_estimates(ests, "candidate", names)
    _check_errors(ests, "candidate", names)
    return names, ests


def _check_alpha(alpha: float) -> float:
    if not 0 < alpha < 1:
        raise ValueError(f"`alpha` must be in (0, 1); got {alpha!r}")
    return float(alpha)


def estimate_dof(estimate: Estimate) -> float:
    """Degrees of freedom of an estimate's standard error (``inf``: normal).

    The smaller of ``n_independent - 1`` (when stated and > 1) and the dof implied by the
    95% interval: its mean half-width over `stderr` is taken as a Student t quantile
    ``t_{0.975, dof}``. Either above ``DOF_MAX`` (1000) counts as ``inf`` (normal), so a
    +-1.96 stderr interval or an ``n_independent`` of 5,000 particles means a normal error
    bar. Why both: estimators state the dof they used in their interval (the MSD estimate
    counts particles in ``n_independent`` while its error bar rests on a few time blocks).

    Parameters
    ----------
    estimate : Estimate

    Returns
    -------
    float
        Degrees of freedom, ``>= 1`` or ``inf``.

    References
    ----------
    .. [1] "Student", "The probable error of a mean", Biometrika 6, 1 (1908).

    Examples
    --------
    >>> from transport.estimate import Estimate
    >>> e = Estimate("x", "m", 1.0, 0.1, (1 - 0.2776445, 1 + 0.2776445), "u")
    >>> round(estimate_dof(e), 3)  # t_{0.975, 4} = 2.776445
    4.0
    """
    dof = math.inf
    n = estimate.n_independent
    if n is not None and math.isfinite(n) and 1 < n <= DOF_MAX + 1:
        dof = float(n) - 1.0
    se = estimate.stderr
    lo, hi = estimate.interval
    if math.isfinite(se) and se > 0 and math.isfinite(lo) and math.isfinite(hi):
        q = 0.5 * (hi - lo) / se
        if q > _Q_DOF_MAX and (math.isinf(dof) or q > _t_quantile(dof) * (1 + 1e-9)):
            if q >= _t_quantile(1.0):
                implied = 1.0
            else:  # t quantile decreases with dof: bisect on log(dof) in [1, DOF_MAX]
                a, b = 0.0, math.log(DOF_MAX)
                for _ in range(40):
                    mid = 0.5 * (a + b)
                    if _t_quantile(math.exp(mid)) > q:
                        a = mid
                    else:
                        b = mid
                implied = math.exp(0.5 * (a + b))
            dof = min(dof, implied)
    return dof


# ---------------------------------------------------------------------------------------
# pooling replicas


def pool_replicas(estimates: Sequence[Estimate], *, alpha: float = 0.05) -> Estimate:
    """Pool replica estimates of one candidate at one state point into one estimate.

    When every replica has an error bar (finite stderr > 0) the result is the
    inverse-variance weighted mean ``m = sum w_i v_i / sum w_i``, ``w_i = 1 / s_i^2``, with
    standard error ``1 / sqrt(sum w_i)``. The replicas' consistency is checked by
    ``chi^2 = sum w_i (v_i - m)^2`` against chi-square with ``n - 1`` dof: when it rejects
    at level `alpha` (p < alpha) the error bars do not explain the scatter, the standard
    error is multiplied by the Birge ratio ``sqrt(chi^2 / (n - 1))``, the 95% interval
    becomes Student t with ``n - 1`` dof, and a warning says so. Otherwise the interval is
    Student t with the Welch–Satterthwaite dof of the weighted mean,
    ``1 / sum_i (w_i / W)^2 / dof_i`` (normal when every replica's error bar is).

    When any replica lacks an error bar (NaN, inf or <= 0), weights cannot be formed: the
    result is the plain mean with the standard error from the replicas' spread,
    ``s / sqrt(n)``, and a Student t interval with ``n - 1`` dof (needs ``n >= 2``); the
    error bars that some replicas do have are then ignored, with a warning.

    Parameters
    ----------
    estimates : sequence of Estimate
        Replica estimates of the same quantity in the same unit (independent runs). One
        estimate is returned unchanged.
    alpha : float
        Level of the consistency check (default 0.05).

    Returns
    -------
    Estimate
        ``method`` is ``"inverse_variance_mean"`` or ``"replica_mean"``; ``diagnostics``
        hold ``pooling`` (the rule used, in words), ``n_replicas``, ``replica_values``,
        ``replica_stderrs``, ``dof`` (of the interval), and for the weighted mean ``chi2``,
        ``chi2_dof``, ``chi2_p_value``, ``birge_ratio``, ``widened``, ``stderr_unscaled``.
        ``n_independent`` is ``dof + 1`` (None for a normal error bar), so that
        :func:`estimate_dof` reads the pooled dof back.

    Raises
    ------
    ValueError
        No estimates, mixed units or quantities, a non-finite value, or a single replica
        without an error bar among fewer than two.

    References
    ----------
    .. [1] P. R. Bevington and D. K. Robinson, *Data Reduction and Error Analysis for the
       Physical Sciences* (2003), Ch. 4.
    .. [2] R. T. Birge, Phys. Rev. 40, 207 (1932).
    .. [3] F. E. Satterthwaite, Biometrics Bull. 2, 110 (1946).

    Examples
    --------
    >>> from transport.estimate import Estimate
    >>> reps = [Estimate("x", "m", v, 0.1, (v - 0.196, v + 0.196), "u") for v in (1.0, 1.1)]
    >>> p = pool_replicas(reps)
    >>> round(p.value, 6), round(p.stderr, 6), p.method
    (1.05, 0.070711, 'inverse_variance_mean')
    """
    alpha = _check_alpha(alpha)
    ests = list(estimates)
    if not ests:
        raise ValueError("need at least one replica estimate; got none")
    names = [f"replica {i}" for i in range(len(ests))]
    _check_estimates(ests, "replica", names)
    if len(ests) == 1:
        return ests[0]
    n = len(ests)
    v = np.array([e.value for e in ests])
    s = np.array([e.stderr for e in ests])
    has_err = np.isfinite(s) & (s > 0)
    first = ests[0]
    windows = [e.window for e in ests if e.window is not None]
    common = dict(
        quantity=first.quantity, unit=first.unit, group=first.group,
        corrected=first.corrected if all(e.corrected == first.corrected for e in ests)
        else None,
        window=None if not windows else (min(w[0] for w in windows),
                                          max(w[1] for w in windows)),
        window_unit=first.window_unit,
    )
    warnings: list[str] = []
    for i, e in enumerate(ests):
        warnings.extend(f"replica {i}: {w}" for w in e.warnings)

    if not has_err.all():
        mean = float(v.mean())
        se = float(v.std(ddof=1) / math.sqrt(n))
        dof = float(n - 1)
        q = _t_quantile(dof)
        missing = int(n - has_err.sum())
        if has_err.any():
            warnings.append(
                f"{first.quantity}: {missing} of {n} replicas have no error bar, so the "
                "replicas were pooled by their plain mean and spread and the other error "
                "bars were not used")
        return Estimate(
            method="replica_mean", value=mean, stderr=se,
            interval=(mean - q * se, mean + q * se), n_independent=float(n),
            diagnostics={
                "pooling": f"plain mean, stderr from the spread of {n} replicas "
                           f"({missing} without an error bar), Student t with {n - 1} dof",
                "n_replicas": n, "replica_values": v, "replica_stderrs": s, "dof": dof,
                "t_quantile": q,
            },
            warnings=tuple(dict.fromkeys(warnings)), **common)

    w = 1.0 / s**2
    wsum = float(w.sum())
    mean = float(np.sum(w * v) / wsum)
    se0 = 1.0 / math.sqrt(wsum)
    chi2 = float(np.sum(w * (v - mean) ** 2))
    chi2_dof = n - 1
    p = float(special.chdtrc(chi2_dof, chi2))
    birge = math.sqrt(chi2 / chi2_dof)
    widened = p < alpha
    if widened:
        se = se0 * birge
        dof = float(chi2_dof)
        rule = (f"inverse-variance weighted mean; chi^2 = {chi2:.4g} for {chi2_dof} dof "
                f"(p = {p:.2g} < {alpha:g}): stderr x Birge ratio {birge:.4g}, Student t "
                f"with {chi2_dof} dof")
        warnings.append(
            f"{first.quantity}: the {n} replicas scatter more than their error bars allow "
            f"(chi^2 = {chi2:.3g} for {chi2_dof} dof, p = {p:.2g}); the pooled error bar was "
            f"widened by the Birge ratio sqrt(chi^2/dof) = {birge:.3g}. Check the replicas "
            "(equilibration, different settings) and their error bars")
    else:
        se = se0
        rep_dof = np.array([estimate_dof(e) for e in ests])
        frac = w / wsum
        inv = float(np.sum(frac**2 / rep_dof))  # 1/inf = 0: normal replicas add nothing
        dof = math.inf if inv == 0 else 1.0 / inv
        rule = (f"inverse-variance weighted mean; chi^2 = {chi2:.4g} for {chi2_dof} dof "
                f"(p = {p:.2g}): consistent, "
                + ("normal interval" if math.isinf(dof)
                   else f"Student t with {dof:.3g} Welch–Satterthwaite dof"))
    q = _t_quantile(dof)
    return Estimate(
        method="inverse_variance_mean", value=mean, stderr=se,
        interval=(mean - q * se, mean + q * se),
        n_independent=None if math.isinf(dof) else dof + 1.0,
        diagnostics={
            "pooling": rule, "n_replicas": n, "replica_values": v, "replica_stderrs": s,
            "dof": dof, "t_quantile": q, "chi2": chi2, "chi2_dof": chi2_dof,
            "chi2_p_value": p, "birge_ratio": birge, "widened": widened,
            "stderr_unscaled": se0,
        },
        warnings=tuple(dict.fromkeys(warnings)), **common)


# ---------------------------------------------------------------------------------------
# deviation from a reference


def _check_reference(reference: Reference, unit: str) -> Reference:
    if not isinstance(reference, Reference):
        raise ValueError(
            f"`reference` must be a transport.compare.Reference; got {type(reference).__name__}")
    if reference.unit != unit:
        raise ValueError(
            f"the reference is in {reference.unit!r} but the candidates in {unit!r}; convert "
            "one of them first")
    return reference


def deviation_from_reference(estimate: Estimate, reference: Reference) -> Deviation:
    """Deviation of an estimate from a reference value, in the unit, in % and in sigmas.

    ``difference = v - r`` with the combined standard error ``sqrt(s_v^2 + s_r^2)``
    (independent uncertainties); ``n_sigma = difference / stderr``; ``percent =
    100 (v - r) / r`` with the first-order error ``100 / |r| sqrt(s_v^2 + (v/r)^2 s_r^2)``.

    Parameters
    ----------
    estimate : Estimate
        The candidate's (pooled) estimate.
    reference : Reference
        The reference, in the estimate's unit.

    Returns
    -------
    Deviation
        Warnings: a zero reference (no percent), a reference uncertain by more than 10%
        (the first-order percent error is then rough), no error bar at all (n_sigma NaN).

    Raises
    ------
    ValueError
        Different units, a non-finite value.

    References
    ----------
    .. [1] H. H. Ku, J. Res. Natl. Bur. Stand. 70C, 263 (1966) (from memory).

    Examples
    --------
    >>> from transport.estimate import Estimate
    >>> e = Estimate("shear_viscosity", "green_kubo", 1.1, 0.03, (1.04, 1.16), "mPa s")
    >>> d = deviation_from_reference(e, Reference(1.0, 0.04, "mPa s"))
    >>> round(d.percent, 6), round(d.n_sigma, 6)
    (10.0, 2.0)
    """
    _check_estimates([estimate], "candidate", ["estimate"])
    ref = _check_reference(reference, estimate.unit)
    v, r = estimate.value, ref.value
    sv = estimate.stderr if math.isfinite(estimate.stderr) and estimate.stderr > 0 else math.nan
    diff = v - r
    se = math.hypot(sv, ref.stderr)
    warnings = []
    if math.isnan(sv):
        warnings.append(f"{estimate.quantity}: the estimate has no error bar; the deviation "
                        "cannot be expressed in standard errors")
    n_sigma = diff / se if se > 0 else math.nan
    if r == 0:
        pct = pct_se = math.nan
        warnings.append("the reference is zero: no deviation in percent")
    else:
        pct = 100.0 * diff / r
        pct_se = 100.0 / abs(r) * math.hypot(sv, v / r * ref.stderr)
        if ref.stderr > 0.1 * abs(r):
            warnings.append(
                f"the reference is uncertain by {100 * ref.stderr / abs(r):.0f}%: the "
                "first-order error of the deviation in percent is rough; use n_sigma")
    return Deviation(v, r, diff, se, pct, pct_se, n_sigma, estimate.unit, tuple(warnings))


# ---------------------------------------------------------------------------------------
# pairwise differences and Holm


def holm_adjust(p_values: ArrayLike) -> np.ndarray:
    """Holm's step-down adjusted p-values (family-wise error rate control).

    With the m p-values sorted ascending, ``p_(1) <= ... <= p_(m)``, the adjusted values
    are ``max_{j <= i} min(1, (m - j + 1) p_(j))``, returned in the input's order.
    Rejecting every hypothesis with an adjusted p-value ``<= alpha`` controls the
    probability of any false rejection at ``alpha`` for any dependence between the tests.

    Parameters
    ----------
    p_values : array_like, shape (m,)
        Unadjusted p-values in [0, 1].

    Returns
    -------
    ndarray, shape (m,)

    References
    ----------
    .. [1] S. Holm, Scand. J. Statist. 6, 65 (1979).

    Examples
    --------
    >>> holm_adjust([0.01, 0.04, 0.03]).round(4).tolist()
    [0.03, 0.06, 0.06]
    """
    p = np.asarray(p_values, dtype=float)
    if p.ndim != 1:
        raise ValueError(f"`p_values` must be 1-D; got shape {p.shape}")
    if p.size and not (np.all(np.isfinite(p)) and p.min() >= 0 and p.max() <= 1):
        raise ValueError("`p_values` must be finite and in [0, 1]")
    m = p.size
    order = np.argsort(p, kind="stable")
    stepped = np.maximum.accumulate((m - np.arange(m)) * p[order])
    out = np.empty(m)
    out[order] = np.minimum(stepped, 1.0)
    return out


def _welch_dof(s1: float, d1: float, s2: float, d2: float) -> float:
    inv = s1**4 / d1 + s2**4 / d2  # 1/inf = 0
    return math.inf if inv == 0 else (s1**2 + s2**2) ** 2 / inv


def pairwise_differences(candidates: Mapping[str, Estimate], *,
                         alpha: float = 0.05) -> tuple[Difference, ...]:
    """Differences between every pair of candidates, tested and corrected with Holm.

    For candidates 1 and 2 with estimates ``v_i +- s_i`` (independent runs), the difference
    ``v_1 - v_2`` has standard error ``sqrt(s_1^2 + s_2^2)``. The test of "no difference"
    is two-sided: a z test when both error bars are normal (:func:`estimate_dof` infinite),
    else Welch's t with the Welch–Satterthwaite dof
    ``(s_1^2 + s_2^2)^2 / (s_1^4/dof_1 + s_2^4/dof_2)``. Assumptions: each estimate is
    approximately normal (Student t) about its true value and its error bar honest, and
    the candidates' runs are independent. The p-values of all ``k (k - 1) / 2`` pairs are
    adjusted by Holm's method (:func:`holm_adjust`); a pair is called significantly
    different when its adjusted p-value is ``<= alpha``, so that the chance of calling any
    equal pair different is at most `alpha`.

    Parameters
    ----------
    candidates : mapping of str to Estimate
        Name -> (pooled) estimate, same quantity and unit, at least two.
    alpha : float
        Family-wise significance level (default 0.05).

    Returns
    -------
    tuple of Difference
        One per pair ``(first, second)`` in the order of `candidates`
        (``itertools.combinations``).

    Raises
    ------
    ValueError
        Fewer than two candidates, mixed units or quantities, a missing error bar.

    References
    ----------
    .. [1] B. L. Welch, Biometrika 34, 28 (1947).
    .. [2] S. Holm, Scand. J. Statist. 6, 65 (1979).
    """
    alpha = _check_alpha(alpha)
    names, ests = _check_candidates(candidates, 2)
    dofs = [estimate_dof(e) for e in ests]
    rows = []
    for i, j in combinations(range(len(ests)), 2):
        a, b = ests[i], ests[j]
        diff = a.value - b.value
        se = math.hypot(a.stderr, b.stderr)
        dof = _welch_dof(a.stderr, dofs[i], b.stderr, dofs[j])
        stat = diff / se
        q = _t_quantile(dof)
        rows.append((names[i], names[j], diff, se, (diff - q * se, diff + q * se),
                     "z" if math.isinf(dof) else "welch_t", stat, dof,
                     _two_sided_p(stat, dof)))
    adjusted = holm_adjust([r[-1] for r in rows])
    return tuple(
        Difference(*r, p_adjusted=float(pa), significant=bool(pa <= alpha), alpha=alpha,
                   unit=ests[0].unit)
        for r, pa in zip(rows, adjusted, strict=True))


# ---------------------------------------------------------------------------------------
# ranking


def _standard_draws(rng: np.random.Generator, dof: float, size: int) -> np.ndarray:
    return rng.standard_normal(size) if math.isinf(dof) else rng.standard_t(dof, size)


def rank_candidates(candidates: Mapping[str, Estimate], reference: Reference, *,
                    rng: np.random.Generator, n_draws: int = 100_000) -> Ranking:
    """Rank candidates by ``|value - reference|`` and simulate P(each is the closest).

    The order is that of the point estimates' absolute deviations. The probabilities come
    from `n_draws` joint draws: each candidate's value from its sampling distribution,
    ``v_i + s_i T_i`` (``T_i`` standard normal, or Student t with :func:`estimate_dof`
    dof), and the reference likewise from ``r + s_r T_r``; the candidate closest to the
    drawn reference in a draw scores it. The probabilities are calibrated when the
    sampling distributions are honest and no prior knowledge favours any value (a flat
    prior); they are the chance that the order of the true values' distances agrees, not a
    statement about the potentials beyond these state points.

    Parameters
    ----------
    candidates : mapping of str to Estimate
        Name -> (pooled) estimate, same quantity and unit, at least one.
    reference : Reference
        The reference value in the same unit.
    rng : numpy.random.Generator
        Source of the draws (required, so that results are reproducible).
    n_draws : int
        Number of simulated draws (default 100,000; Monte Carlo error of a probability p is
        ``sqrt(p (1 - p) / n_draws)`` <= 0.0016).

    Returns
    -------
    Ranking
        Warnings: the two best candidates are not distinguishable (the leader's probability
        is below 0.8), which keeps a close call from reading as a verdict.

    Raises
    ------
    ValueError
        Mixed units or quantities, a unit different from the reference's, a missing error
        bar, a bad `n_draws` or `rng`.

    References
    ----------
    .. [1] A. Gelman, J. B. Carlin, H. S. Stern, D. B. Dunson, A. Vehtari and D. B. Rubin,
       *Bayesian Data Analysis*, 3rd ed. (CRC, 2013), Ch. 2-3 (flat-prior posterior of a
       normal mean; probabilities of orderings by simulation; from memory).
    """
    if not isinstance(rng, np.random.Generator):
        raise ValueError(f"`rng` must be a numpy.random.Generator; got {type(rng).__name__}")
    if isinstance(n_draws, bool) or int(n_draws) != n_draws or n_draws < 1:
        raise ValueError(f"`n_draws` must be a positive integer; got {n_draws!r}")
    n_draws = int(n_draws)
    names, ests = _check_candidates(candidates, 1)
    ref = _check_reference(reference, ests[0].unit)
    devs = [deviation_from_reference(e, ref) for e in ests]
    order = sorted(range(len(ests)), key=lambda i: abs(devs[i].difference))
    k = len(ests)
    v = np.array([e.value for e in ests])
    s = np.array([e.stderr for e in ests])
    dofs = [estimate_dof(e) for e in ests]
    counts = np.zeros(k, dtype=np.int64)
    per_chunk = max(1, 2**20 // (k + 1))  # bound the draws held at once to ~8 MB
    for start in range(0, n_draws, per_chunk):
        m = min(per_chunk, n_draws - start)
        theta = np.empty((m, k))
        for c in range(k):  # over candidates (a handful), not over draws
            theta[:, c] = v[c] + s[c] * _standard_draws(rng, dofs[c], m)
        r = ref.value + ref.stderr * _standard_draws(rng, ref.dof, m)
        closest = np.argmin(np.abs(theta - r[:, None]), axis=1)
        counts += np.bincount(closest, minlength=k)
    prob = counts / n_draws
    warnings = []
    if k > 1 and prob[order[0]] < 0.8:
        warnings.append(
            f"the ranking is not decisive: {names[order[0]]!r} is the closest to the "
            f"reference in {100 * prob[order[0]]:.0f}% of the simulated draws only")
    return Ranking(
        names=tuple(names[i] for i in order),
        deviations=tuple(devs[i] for i in order),
        probability_closest=tuple(float(prob[i]) for i in order),
        probability_stderr=tuple(
            float(math.sqrt(prob[i] * (1 - prob[i]) / n_draws)) for i in order),
        n_draws=n_draws, unit=ests[0].unit, warnings=tuple(warnings))

