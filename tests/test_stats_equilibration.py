"""Equilibration detection on series with a known exponential transient."""

from __future__ import annotations

import numpy as np
import pytest

from transport.stats import ar1, detect_equilibration


def _bias_over_stderr(amplitude, relax, phi, n, t0):
    """Remaining bias of the mean of x[t0:] (exact sum of the transient A exp(-t/relax))
    over its exact standard error sqrt(g / (n - t0)), g = (1+phi)/(1-phi) for AR(1) noise
    of unit variance (long-series limit of the exact AR(1) variance of the mean)."""
    t = np.arange(t0, n)
    bias = amplitude * np.exp(-t / relax).sum() / (n - t0)
    g = (1 + phi) / (1 - phi)
    return bias / np.sqrt(g / (n - t0))


@pytest.mark.parametrize("seed", range(6))
def test_start_lies_after_the_transient_and_not_much_later(seed):
    # x_t = 20 exp(-t / 500) + AR(1) noise (phi = 0.9, unit variance), N = 20000.
    # Chodera's rule (J. Chem. Theory Comput. 12, 1799 (2016)) should cut where the
    # transient no longer biases the mean beyond its error bar, and not waste data far
    # beyond that. Reference point t1: where the exact remaining bias equals the exact
    # standard error of the mean.
    amplitude, relax, phi, n = 20.0, 500.0, 0.9, 20_000
    rng = np.random.default_rng(100 + seed)
    x = ar1(phi, n, rng=rng) + amplitude * np.exp(-np.arange(n) / relax)
    res = detect_equilibration(x)
    grid = np.arange(0, n // 2)
    ratio = np.array([_bias_over_stderr(amplitude, relax, phi, n, t) for t in grid[::50]])
    t1 = grid[::50][np.argmax(ratio <= 1.0)]
    # after the transient decays: the remaining bias is at most 1.5 stderr. (The grid of
    # 50 candidates over N/2 has a step of 204 samples = 0.41 relax; one step earlier the
    # bias is e^0.41 = 1.5 times larger, so 1.5 allows the rule to land one step early.)
    assert _bias_over_stderr(amplitude, relax, phi, n, res.start) <= 1.5
    # before a few relaxation times further: at t1 + 4 relax the bias is 2% of the
    # stderr, cutting more only throws data away
    assert res.start <= t1 + 4 * relax
    assert res.start == res.max_start  # a real transient passes the significance guard
    assert not res.at_search_limit
    assert res.n_effective == pytest.approx(
        (n - res.start) / res.statistical_inefficiency)


def test_stationary_series_keeps_nearly_all_data():
    # No transient: the significance guard keeps all data in most runs. Over 40 runs,
    # the plain maximum of N_eff cuts ~40-50% of them (measured), the guarded rule ~5%;
    # at most 8 cuts (20%) leaves room for chance.
    xs = ar1(0.9, (40, 3000), rng=np.random.default_rng(7))
    starts = np.array([detect_equilibration(x).start for x in xs])
    plain = np.array([detect_equilibration(x, significance=0).start for x in xs])
    assert np.count_nonzero(starts) <= 8
    assert np.count_nonzero(plain) > np.count_nonzero(starts)


def test_transient_longer_than_half_the_run_hits_the_search_limit():
    # a transient of amplitude 20 sigma decaying over 1000 of 5000 samples is still
    # 1.6 sigma at N/2: the best start is the last candidate, and that is flagged
    # (20 of 20 seeds tried flag it)
    rng = np.random.default_rng(8)
    x = ar1(0.5, 5000, rng=rng) + 20 * np.exp(-np.arange(5000) / 1000)
    res = detect_equilibration(x)
    assert res.at_search_limit
    assert res.start == res.candidates[-1] == 2500


def test_long_series_are_coarse_grained():
    # above 2^20 points the search runs on block means; the start is in original samples
    rng = np.random.default_rng(9)
    n = 2**20 + 5000
    x = rng.normal(size=n)
    # a transient of 5 sd (7 sd on block means of 2): below the 10 robust sd at which
    # leading rows are trimmed as outliers, so both searches see the same series
    x[:100_000] += 5 * np.exp(-np.arange(100_000) / 10_000)
    res = detect_equilibration(x, n_candidates=20)
    assert res.leading_outliers == 0
    assert res.n_samples == n
    assert res.candidates[1] % 2 == 0  # block of 2 samples
    # Reference: the same rule run by hand on the means of blocks of 2 samples (2^19 +
    # 2500 points, below the limit, so searched directly): the start is twice the block
    # start, N_eff is the same and g counts original samples (2 per block).
    blocks = x[: n // 2 * 2].reshape(-1, 2).mean(axis=1)
    ref = detect_equilibration(blocks, n_candidates=20)
    assert ref.leading_outliers == 0
    assert res.start == 2 * ref.start > 0
    assert res.n_effective == pytest.approx(ref.n_effective, rel=1e-12)
    assert res.statistical_inefficiency == pytest.approx(2 * ref.statistical_inefficiency,
                                                         rel=1e-12)


def test_bad_input():
    with pytest.raises(ValueError, match="at least 16"):
        detect_equilibration(np.ones(10))
    with pytest.raises(ValueError, match="max_fraction"):
        detect_equilibration(np.arange(100.0), max_fraction=1.0)
    with pytest.raises(ValueError, match="n_candidates"):
        detect_equilibration(np.arange(100.0), n_candidates=0)
