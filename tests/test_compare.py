"""Comparison of candidates: pooling, deviations, pairwise tests with Holm, ranking.

Sources of the checks: statsmodels (WLS for the weighted mean, its chi-square and the
Birge-scaled error; ``multipletests(method="holm")`` for Holm, Scand. J. Statist. 6, 65
(1979)); scipy.stats (Student t quantiles, ``sem``, ``ttest_ind_from_stats`` for Welch's
test, the normal distribution, the binomial bands); numerical integration (scipy.integrate)
for the probability of being closest; synthetic candidates with known truth for the
calibration of every call (false-positive rates, coverage, probability of closest).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats
from statsmodels.regression.linear_model import WLS
from statsmodels.stats.multitest import multipletests

from transport.compare import (
    Reference,
    deviation_from_reference,
    estimate_dof,
    holm_adjust,
    pairwise_differences,
    pool_replicas,
    rank_candidates,
)
from transport.estimate import Estimate

UNIT = "mPa s"
Z = stats.norm.ppf(0.975)


def _est(value: float, stderr: float, *, n: float | None = None, unit: str = UNIT,
         quantity: str = "shear_viscosity") -> Estimate:
    """An estimate with a normal interval, or Student t with n - 1 dof when n is given."""
    q = Z if n is None else stats.t.ppf(0.975, n - 1)
    return Estimate(quantity, "synthetic", value, stderr,
                    (value - q * stderr, value + q * stderr), unit, n_independent=n)


def _binomial_band(n: int, p: float, level: float = 0.999) -> tuple[float, float]:
    """Exact binomial central interval of a count (scipy.stats.binom), as counts."""
    lo, hi = stats.binom.interval(level, n, p)
    return lo, hi


# ---------------------------------------------------------------------------------------
# degrees of freedom of an error bar


def test_estimate_dof_reads_the_interval_and_n_independent():
    # Student t quantiles from scipy.stats.t.ppf; the bisection is exact to ~1e-10 in log
    assert estimate_dof(_est(1.0, 0.1)) == math.inf
    assert estimate_dof(_est(1.0, 0.1, n=5)) == pytest.approx(4.0, rel=1e-6)
    assert estimate_dof(_est(1.0, 0.1, n=2)) == pytest.approx(1.0, rel=1e-6)
    # n_independent counts particles but the interval is t with 7 dof (time blocks): 7
    e = Estimate("self_diffusion", "msd_wls", 2.0, 0.1,
                 (2.0 - 0.1 * stats.t.ppf(0.975, 7), 2.0 + 0.1 * stats.t.ppf(0.975, 7)),
                 "1e-9 m^2/s", n_independent=1000.0)
    assert estimate_dof(e) == pytest.approx(7.0, rel=1e-6)
    # a normal interval with n_independent = 6 replicas: 5 dof
    e = Estimate("x", "m", 1.0, 0.1, (1.0 - Z * 0.1, 1.0 + Z * 0.1), UNIT, n_independent=6)
    assert estimate_dof(e) == 5.0


# ---------------------------------------------------------------------------------------
# pooling replicas


def test_pooled_mean_matches_statsmodels_wls_when_consistent():
    # Reference: statsmodels WLS of the values on a constant with weights 1/s^2; with the
    # scale fixed at 1 its bse is 1/sqrt(sum w), its ssr the chi-square about the mean.
    v = np.array([3.10, 3.02, 3.21, 3.05])
    s = np.array([0.08, 0.05, 0.12, 0.06])
    pooled = pool_replicas([_est(x, e) for x, e in zip(v, s, strict=True)])
    fit = WLS(v, np.ones_like(v), weights=1 / s**2).fit(
        cov_type="fixed scale", cov_kwds={"scale": 1.0})
    assert pooled.method == "inverse_variance_mean"
    assert pooled.value == pytest.approx(fit.params[0], rel=1e-13)
    assert pooled.stderr == pytest.approx(fit.bse[0], rel=1e-12)
    assert pooled.diagnostics["chi2"] == pytest.approx(fit.ssr, rel=1e-12)
    assert pooled.diagnostics["chi2_p_value"] == pytest.approx(stats.chi2.sf(fit.ssr, 3))
    assert pooled.diagnostics["chi2_p_value"] > 0.05
    assert not pooled.diagnostics["widened"]
    assert pooled.warnings == ()
    # normal replicas: a normal interval, and the pooled error bar reads back as normal
    assert pooled.interval == pytest.approx((pooled.value - Z * pooled.stderr,
                                             pooled.value + Z * pooled.stderr), rel=1e-12)
    assert estimate_dof(pooled) == math.inf


def test_pooled_error_is_widened_by_the_birge_ratio_when_replicas_disagree():
    # Reference: statsmodels WLS with its scale estimated (ssr / (n - 1)): bse is then the
    # Birge-scaled error sqrt(chi^2 / (n - 1)) / sqrt(sum w).
    v = np.array([3.10, 2.70, 3.45, 3.05])
    s = np.array([0.08, 0.05, 0.12, 0.06])
    pooled = pool_replicas([_est(x, e) for x, e in zip(v, s, strict=True)])
    fit = WLS(v, np.ones_like(v), weights=1 / s**2).fit()
    assert pooled.diagnostics["chi2_p_value"] < 0.05
    assert pooled.diagnostics["widened"]
    assert pooled.stderr == pytest.approx(fit.bse[0], rel=1e-12)
    assert pooled.diagnostics["birge_ratio"] == pytest.approx(math.sqrt(fit.scale), rel=1e-12)
    # the widened error comes from the scatter: Student t with n - 1 = 3 dof
    q = stats.t.ppf(0.975, 3)
    assert pooled.interval == pytest.approx((pooled.value - q * pooled.stderr,
                                             pooled.value + q * pooled.stderr), rel=1e-12)
    assert estimate_dof(pooled) == pytest.approx(3.0, rel=1e-6)
    assert len(pooled.warnings) == 1 and "Birge ratio" in pooled.warnings[0]


def test_pooled_dof_is_welch_satterthwaite_of_the_replicas():
    # two equal-weight replicas with 4 dof each: 1 / (2 (1/2)^2 / 4) = 8 dof (Satterthwaite)
    pooled = pool_replicas([_est(1.00, 0.1, n=5), _est(1.01, 0.1, n=5)])
    assert pooled.diagnostics["dof"] == pytest.approx(8.0, rel=1e-6)
    q = stats.t.ppf(0.975, 8)
    assert pooled.interval[1] - pooled.value == pytest.approx(q * pooled.stderr, rel=1e-6)
    assert estimate_dof(pooled) == pytest.approx(8.0, rel=1e-5)


def test_replicas_without_error_bars_are_pooled_by_their_spread():
    # Reference: scipy.stats.sem and a Student t interval with n - 1 dof
    v = [3.1, 2.9, 3.3, 3.0, 3.2]
    pooled = pool_replicas([_est(x, math.nan) for x in v])
    assert pooled.method == "replica_mean"
    assert pooled.value == pytest.approx(np.mean(v), rel=1e-14)
    assert pooled.stderr == pytest.approx(stats.sem(v), rel=1e-13)
    lo, hi = stats.t.interval(0.95, 4, loc=np.mean(v), scale=stats.sem(v))
    assert pooled.interval == pytest.approx((lo, hi), rel=1e-12)
    assert "spread" in pooled.diagnostics["pooling"]
    assert pooled.warnings == ()
    # only some lack an error bar: same rule, and a warning that the others were not used
    mixed = pool_replicas([_est(3.1, 0.1), _est(2.9, math.nan), _est(3.3, 0.1)])
    assert mixed.method == "replica_mean"
    assert mixed.value == pytest.approx(np.mean([3.1, 2.9, 3.3]))
    assert any("1 of 3 replicas have no error bar" in w for w in mixed.warnings)


def test_pooled_interval_covers_the_truth_95_percent():
    # Known truth 0; 4 replicas with known, unequal errors. The unwidened interval covers
    # exactly 95% under the model; the Birge widening (5% of cases) can only add. Over
    # 1500 seeds the count of covering intervals must be inside the 99.9% binomial band
    # of 0.95 (scipy.stats.binom).
    rng = np.random.default_rng(20261205)
    n = 1500
    covered = widened = 0
    for _ in range(n):
        s = rng.uniform(0.5, 2.0, 4)
        p = pool_replicas([_est(x, e) for x, e in zip(rng.normal(0.0, s), s, strict=True)])
        covered += p.interval[0] <= 0.0 <= p.interval[1]
        widened += p.diagnostics["widened"]
    lo, hi = _binomial_band(n, 0.95)
    assert lo <= covered <= hi, covered / n
    lo, hi = _binomial_band(n, 0.05)  # the consistency check rejects at its nominal 5%
    assert lo <= widened <= hi, widened / n


def test_a_single_replica_is_returned_as_is_and_units_must_agree():
    e = _est(1.0, 0.1)
    assert pool_replicas([e]) is e
    with pytest.raises(ValueError, match="mixed units"):
        pool_replicas([_est(1.0, 0.1), _est(1.0, 0.1, unit="cP")])
    with pytest.raises(ValueError, match="different quantities"):
        pool_replicas([_est(1.0, 0.1), _est(1.0, 0.1, quantity="self_diffusion")])
    with pytest.raises(ValueError, match="at least one"):
        pool_replicas([])


@settings(max_examples=40, deadline=None)
@given(values=st.lists(st.floats(-5, 5), min_size=2, max_size=6),
       errs=st.lists(st.floats(0.05, 2.0), min_size=6, max_size=6),
       factor=st.floats(0.01, 100.0), seed=st.integers(0, 2**32 - 1))
def test_pooling_is_invariant_to_order_and_scales_with_the_unit(values, errs, factor, seed):
    # invariants: replicas in any order give the same pooled estimate; changing the unit
    # (Estimate.scaled) scales value and stderr by the factor and leaves the chi-square
    reps = [_est(v, e) for v, e in zip(values, errs, strict=False)]
    base = pool_replicas(reps)
    perm = np.random.default_rng(seed).permutation(len(reps))
    shuffled = pool_replicas([reps[i] for i in perm])
    assert shuffled.value == pytest.approx(base.value, rel=1e-12, abs=1e-12)
    assert shuffled.stderr == pytest.approx(base.stderr, rel=1e-12)
    scaled = pool_replicas([e.scaled(factor, "cP x") for e in reps])
    assert scaled.value == pytest.approx(factor * base.value, rel=1e-10, abs=1e-12)
    assert scaled.stderr == pytest.approx(factor * base.stderr, rel=1e-10)
    assert scaled.diagnostics["chi2"] == pytest.approx(base.diagnostics["chi2"], rel=1e-9,
                                                       abs=1e-12)
    assert scaled.unit == "cP x"


# ---------------------------------------------------------------------------------------
# deviation from the reference


def test_deviation_in_percent_and_in_combined_standard_errors():
    d = deviation_from_reference(_est(1.1, 0.03), Reference(1.0, 0.04, UNIT, "invented"))
    assert d.difference == pytest.approx(0.1)
    assert d.stderr == pytest.approx(0.05)  # sqrt(0.03^2 + 0.04^2)
    assert d.n_sigma == pytest.approx(2.0)
    assert d.percent == pytest.approx(10.0)
    # first order: 100/|r| sqrt(s_v^2 + (v/r)^2 s_r^2) = 100 sqrt(0.0009 + 1.21 * 0.0016)
    assert d.percent_stderr == pytest.approx(100 * math.sqrt(0.0009 + 1.21 * 0.0016))
    assert d.warnings == ()


def test_percent_error_agrees_with_monte_carlo_for_small_errors():
    # the first-order error of 100 (v/r - 1) against a direct simulation of the ratio; at 1%
    # relative errors the neglected second-order terms are ~1e-4 relative, and the Monte
    # Carlo standard deviation of 200,000 draws is uncertain by 1/sqrt(2 * 2e5) = 0.16%
    rng = np.random.default_rng(7)
    v, sv, r, sr = 2.3, 0.023, 2.0, 0.02
    d = deviation_from_reference(_est(v, sv), Reference(r, sr, UNIT))
    mc = 100 * (rng.normal(v, sv, 200_000) / rng.normal(r, sr, 200_000) - 1)
    assert d.percent_stderr == pytest.approx(mc.std(ddof=1), rel=0.01)


def test_deviation_refuses_other_units_and_warns_on_a_rough_reference():
    with pytest.raises(ValueError, match="stderr must be finite and >= 0"):
        Reference(1.0, -0.1, UNIT)
    with pytest.raises(ValueError, match=r"must be a transport\.compare\.Reference"):
        deviation_from_reference(_est(1.0, 0.1), (1.0, 0.1))
    with pytest.raises(ValueError, match="reference is in 'cP'"):
        deviation_from_reference(_est(1.0, 0.1), Reference(1.0, 0.1, "cP"))
    d = deviation_from_reference(_est(1.0, 0.1), Reference(0.5, 0.1, UNIT))
    assert any("uncertain by 20%" in w for w in d.warnings)
    d = deviation_from_reference(_est(0.1, 0.1), Reference(0.0, 0.1, UNIT))
    assert math.isnan(d.percent) and d.n_sigma == pytest.approx(0.1 / math.hypot(0.1, 0.1))


# ---------------------------------------------------------------------------------------
# Holm and the pairwise tests


@pytest.mark.parametrize("m", [1, 3, 6, 45])
def test_holm_matches_statsmodels(m):
    # Reference: statsmodels.stats.multitest.multipletests(method="holm"); p-values with
    # ties and some near the rejection boundaries. (multipletests runs gc.collect on every
    # call, ~0.1 s here, hence few calls.)
    rng = np.random.default_rng(100 + m)
    p = rng.uniform(0, 0.2, m) ** 2
    if m > 2:
        p[1] = p[0]  # a tie
    ours = holm_adjust(p)
    reject, p_sm, _, _ = multipletests(p, alpha=0.05, method="holm")
    np.testing.assert_allclose(ours, p_sm, rtol=1e-14, atol=0)
    np.testing.assert_array_equal(ours <= 0.05, reject)


def test_pairwise_z_test_against_scipy_normal():
    cands = {"fit-A": _est(1.30, 0.04), "ml-B": _est(1.20, 0.03), "ml-C": _est(1.18, 0.05)}
    rows = pairwise_differences(cands)
    assert [(r.first, r.second) for r in rows] == [("fit-A", "ml-B"), ("fit-A", "ml-C"),
                                                   ("ml-B", "ml-C")]
    p_raw = []
    for r in rows:
        a, b = cands[r.first], cands[r.second]
        se = math.hypot(a.stderr, b.stderr)
        zval = (a.value - b.value) / se
        assert r.test == "z" and r.dof == math.inf
        assert r.statistic == pytest.approx(zval, rel=1e-13)
        assert r.p_value == pytest.approx(2 * stats.norm.sf(abs(zval)), rel=1e-12)
        assert r.interval == pytest.approx((r.difference - Z * se, r.difference + Z * se))
        p_raw.append(r.p_value)
    _, p_holm, _, _ = multipletests(p_raw, method="holm")
    assert [r.p_adjusted for r in rows] == pytest.approx(list(p_holm), rel=1e-13)
    # A-B: 0.10 / 0.05 = 2 sigma, p = 0.0455 raw but 0.091 after Holm (3 pairs): not called
    assert rows[0].p_value < 0.05 and not rows[0].significant


def test_pairwise_welch_t_against_scipy():
    # Reference: scipy.stats.ttest_ind_from_stats(equal_var=False) with the same means,
    # standard deviations s_i sqrt(n_i) and sizes n_i (Welch, Biometrika 34, 28 (1947))
    m1, sd1, n1 = 2.50, 0.30, 5
    m2, sd2, n2 = 2.10, 0.60, 8
    cands = {"a": _est(m1, sd1 / math.sqrt(n1), n=n1), "b": _est(m2, sd2 / math.sqrt(n2), n=n2)}
    (row,) = pairwise_differences(cands)
    ref = stats.ttest_ind_from_stats(m1, sd1, n1, m2, sd2, n2, equal_var=False)
    assert row.test == "welch_t"
    assert row.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert row.p_value == pytest.approx(ref.pvalue, rel=1e-9)
    assert row.p_adjusted == row.p_value  # one pair: Holm changes nothing
    # one side normal, the other with 4 dof: Satterthwaite gives (s1^2+s2^2)^2 / (s2^4/4)
    (row,) = pairwise_differences({"a": _est(1.0, 0.1), "b": _est(1.2, 0.1, n=5)})
    assert row.dof == pytest.approx(16.0, rel=1e-6)


def test_swapping_two_candidates_flips_the_sign_only():
    a, b = _est(1.3, 0.05, n=6), _est(1.1, 0.04)
    (ab,) = pairwise_differences({"a": a, "b": b})
    (ba,) = pairwise_differences({"b": b, "a": a})
    assert ba.difference == -ab.difference and ba.p_value == ab.p_value
    assert ba.interval == pytest.approx((-ab.interval[1], -ab.interval[0]))


def test_pairwise_refuses_mixed_units_and_missing_errors():
    with pytest.raises(ValueError, match="mixed units"):
        pairwise_differences({"a": _est(1.0, 0.1), "b": _est(1.0, 0.1, unit="reduced")})
    with pytest.raises(ValueError, match="no usable error bar"):
        pairwise_differences({"a": _est(1.0, 0.1), "b": _est(1.0, math.nan)})
    with pytest.raises(ValueError, match="at least 2"):
        pairwise_differences({"a": _est(1.0, 0.1)})


def _pooled_candidate(rng: np.random.Generator, truth: float, n_rep: int) -> Estimate:
    s = rng.uniform(0.05, 0.15, n_rep)
    return pool_replicas([_est(x, e) for x, e in zip(rng.normal(truth, s), s, strict=True)])


def test_false_positive_rate_of_equal_candidates_is_nominal():
    # Two candidates with equal true viscosity 1.0, each pooled from 3 replicas with known
    # errors: "significantly different" at 5% must come out in ~5% of 1500 seeds. Band:
    # the central 99.9% of Binomial(1500, 0.05) = 49..104 calls (scipy.stats.binom). Also
    # Welch's t on replica-spread estimates (4 and 6 replicas, no error bars: Student t
    # with 3 and 5 dof), same band. Measured: 57 and 69 calls; the pooled test runs at
    # ~4.3% (8000 seeds), slightly conservative because pairs with a Birge-widened
    # candidate (~10%) are rarely called.
    rng = np.random.default_rng(314)
    n = 1500
    lo, hi = _binomial_band(n, 0.05)
    calls = sum(
        pairwise_differences({"a": _pooled_candidate(rng, 1.0, 3),
                              "b": _pooled_candidate(rng, 1.0, 3)})[0].significant
        for _ in range(n))
    assert lo <= calls <= hi, calls / n
    welch = 0
    for _ in range(n):
        a = pool_replicas([_est(x, math.nan) for x in rng.normal(1.0, 0.1, 4)])
        b = pool_replicas([_est(x, math.nan) for x in rng.normal(1.0, 0.3, 6)])
        (row,) = pairwise_differences({"a": a, "b": b})
        assert row.test == "welch_t"
        welch += row.significant
    assert lo <= welch <= hi, welch / n


def test_holm_keeps_the_family_wise_error_rate_with_four_equal_candidates():
    # 4 equal candidates, 6 correlated pairs. Holm guarantees P(any false call) <= 5%
    # (Holm 1979); without correction it is far higher (~20%: from simulation here, the
    # 6 tests are correlated). 1500 seeds: the family count must not exceed the upper
    # 99.9% binomial point of 5%, and the uncorrected count must exceed it.
    rng = np.random.default_rng(2718)
    n = 1500
    family = raw = 0
    for _ in range(n):
        cands = {k: _est(rng.normal(1.0, 0.1), 0.1) for k in "abcd"}
        rows = pairwise_differences(cands)
        family += any(r.significant for r in rows)
        raw += any(r.p_value <= 0.05 for r in rows)
    _, hi = _binomial_band(n, 0.05)
    assert family <= hi, family / n
    assert raw > hi, raw / n


# ---------------------------------------------------------------------------------------
# ranking and the probability of being closest


def _p_first_closest(a: tuple, b: tuple, r: float) -> float:
    """P(|A - r| < |B - r|) by quadrature; a, b = (value, stderr, scipy distribution)."""
    (va, sa, da), (vb, sb, db) = a, b

    def integrand(x: float) -> float:
        d = abs(x - r)
        p_b_farther = 1 - (db.cdf((r + d - vb) / sb) - db.cdf((r - d - vb) / sb))
        return da.pdf((x - va) / sa) / sa * p_b_farther

    return integrate.quad(integrand, va - 40 * sa, va + 40 * sa, limit=200, points=[r])[0]


@pytest.mark.parametrize("dof_a", [None, 4])
def test_probability_closest_matches_quadrature(dof_a):
    # Exact reference value (stderr 0), two candidates; candidate A normal or Student t with
    # 3 dof. 200,000 draws: Monte Carlo standard error <= 0.0011; tolerance 4 of those.
    a = _est(1.08, 0.05, n=dof_a)
    b = _est(0.95, 0.04)
    ref = Reference(1.0, 0.0, UNIT)
    rank = rank_candidates({"A": a, "B": b}, ref, rng=np.random.default_rng(5),
                           n_draws=200_000)
    da = stats.norm if dof_a is None else stats.t(dof_a - 1)
    exact = _p_first_closest((1.08, 0.05, da), (0.95, 0.04, stats.norm), 1.0)
    got = dict(zip(rank.names, rank.probability_closest, strict=True))
    assert got["A"] == pytest.approx(exact, abs=4 * math.sqrt(exact * (1 - exact) / 2e5))
    assert sum(rank.probability_closest) == pytest.approx(1.0)
    assert rank.names == ("B", "A")  # |0.95 - 1| < |1.08 - 1|
    # reproducible with the same generator seed
    again = rank_candidates({"A": a, "B": b}, ref, rng=np.random.default_rng(5),
                            n_draws=200_000)
    assert again == rank


def test_ranking_and_significance_calls_on_known_truth():
    # Invented candidates: true viscosities 1.00, 1.12, 1.35 mPa s against a reference of
    # 1.03 +- 0.02; 4 replicas each with 2% errors. The truth's order is fitted, learned,
    # learned-v2; every pair differs by >= 6 combined errors, so every call must be
    # "different". With learned-v2 never in contention, "fitted is closest" is exactly
    # "the reference lies below the midpoint of fitted and learned", whose probability
    # is a normal cdf (analytic); 50,000 draws: Monte Carlo error <= 0.0023, tolerance 4x.
    rng = np.random.default_rng(11)
    truths = {"fitted": 1.00, "learned": 1.12, "learned-v2": 1.35}
    cands = {}
    for name, t in truths.items():
        s = np.full(4, 0.02 * t)
        cands[name] = pool_replicas([_est(x, e) for x, e in zip(rng.normal(t, s), s,
                                                                strict=True)])
    ref = Reference(1.03, 0.02, UNIT, source="invented")
    rank = rank_candidates(cands, ref, rng=rng, n_draws=50_000)
    assert rank.names == ("fitted", "learned", "learned-v2")
    f, le = cands["fitted"], cands["learned"]
    exact = stats.norm.cdf(((f.value + le.value) / 2 - 1.03)
                           / math.sqrt(0.02**2 + (f.stderr**2 + le.stderr**2) / 4))
    assert rank.probability_closest[0] == pytest.approx(exact, abs=4 * 0.0023)
    assert rank.probability_closest[2] < 1e-3
    assert rank.warnings == ()
    assert all(r.significant for r in pairwise_differences(cands))
    dev = rank.deviations[2]
    assert dev.percent == pytest.approx(100 * (cands["learned-v2"].value - 1.03) / 1.03)


def test_probability_closest_is_calibrated():
    # Known truth: reference truth 0 measured with error 0.3; three candidates with true
    # values uniform in [-6, 6] and errors 0.5-1.5 (wide compared with the errors, so the
    # flat-prior reading of the sampling distributions holds near the reference).
    # Among cases where P(closest) falls in a bin, the candidate must truly be closest at
    # the bin's mean P: tolerance 3.5 binomial standard errors of the bin's count plus
    # 0.01 for the Monte Carlo error of 4,000 draws (<= 0.008) and the prior's edges.
    rng = np.random.default_rng(99)
    probs, hits = [], []
    for _ in range(1500):
        truth = rng.uniform(-6, 6, 3)
        s = rng.uniform(0.5, 1.5, 3)
        cands = {f"c{j}": _est(truth[j] + s[j] * rng.standard_normal(), s[j])
                 for j in range(3)}
        ref = Reference(0.3 * rng.standard_normal(), 0.3, UNIT)
        rank = rank_candidates(cands, ref, rng=rng, n_draws=4000)
        best = f"c{np.argmin(np.abs(truth))}"
        probs += rank.probability_closest
        hits += [name == best for name in rank.names]
    p, h = np.array(probs), np.array(hits, dtype=float)
    edges = [0.0, 0.1, 0.3, 0.5, 0.7, 0.9, 1.0 + 1e-12]
    for a, b in itertools.pairwise(edges):
        sel = (p >= a) & (p < b)
        assert sel.sum() >= 150, (a, b, sel.sum())  # enough cases for the band to mean much
        pm = p[sel].mean()
        tol = 3.5 * math.sqrt(pm * (1 - pm) / sel.sum()) + 0.01
        assert abs(h[sel].mean() - pm) <= tol, (a, b, pm, h[sel].mean(), tol)


def test_ranking_refuses_bad_inputs_and_flags_a_close_call():
    cands = {"a": _est(1.0, 0.1), "b": _est(1.02, 0.1)}
    with pytest.raises(ValueError, match="reference is in"):
        rank_candidates(cands, Reference(1.0, 0.1, "cP"), rng=np.random.default_rng(0))
    with pytest.raises(ValueError, match=r"numpy\.random\.Generator"):
        rank_candidates(cands, Reference(1.0, 0.1, UNIT), rng=0)
    with pytest.raises(ValueError, match="mixed units"):
        rank_candidates({"a": _est(1.0, 0.1), "b": _est(1.0, 0.1, unit="cP")},
                        Reference(1.0, 0.1, UNIT), rng=np.random.default_rng(0))
    rank = rank_candidates(cands, Reference(1.01, 0.05, UNIT), rng=np.random.default_rng(0),
                           n_draws=20_000)
    assert any("not decisive" in w for w in rank.warnings)


def test_docstring_examples_run():
    # the numbers in the docstrings' Examples (checked by hand there) stay true
    import doctest

    import transport.compare

    result = doctest.testmod(transport.compare)
    assert result.failed == 0 and result.attempted >= 8
