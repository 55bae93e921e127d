"""Self-diffusion of a flexible molecular liquid from real engine output: sites and molecules.

Data: tests/data/alkane/ (100 flexible united-atom n-hexane molecules, 600 sites, 2 ns NVE
at 298 K, frames every 1 ps; LAMMPS used only as the MD engine; see the README and script
there). The model is TraPPE-UA with flexible bonds and a 10 A cutoff, so no published D is
a reference for it (experiment, about 4.2e-9 m^2/s at 298 K from memory, is context only).
The checks are internal and outside the estimator: sites and molecule centres must share
the long-time D (a fact of any diffusing molecule: a site's distance from its molecule's
centre is bounded), the estimate must not hang on where its window starts, and the error
bars must hold when the run is split into independent time blocks (the design note's
"honest error bars" test, chi-square bands from scipy). "Measured" values were measured
on these files on 2026-12-05.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from _diffusion_blocks import analyse_blocks, chi2_about_weighted_mean, chi2_band, error_dofs
from scipy import stats

from transport.diffusion import analyse_diffusion
from transport.io.trajectory import load_trajectory

DATA = Path(__file__).parent / "data" / "alkane"
T = 298.15
#: MSD slope over 20-100 ps, sites and molecule centres alike (issue 18, plain numpy line
#: fit; measured again here: 5.346 and 5.342), 1e-9 m^2/s.
SLOPE_20_100 = 5.35


def _load(group_by: str):
    return load_trajectory(DATA / "hexane.data", DATA / "hexane_wrapped.dcd", units="real",
                           timestep=2.0, group_by=group_by, temperature=T)[0]


@pytest.fixture(scope="module")
def sites():
    return _load("atom")


@pytest.fixture(scope="module")
def molecules():
    return _load("molecule")


@pytest.fixture(scope="module")
def site_estimate(sites):
    return analyse_diffusion(sites, vacf="no").msd[0]


@pytest.fixture(scope="module")
def molecule_estimate(molecules):
    return analyse_diffusion(molecules, vacf="no").msd[0]


def test_diffusion_error_bar_carries_the_block_scatter(site_estimate):
    # sites of a molecular liquid move together (six per molecule, and collectively): 8
    # independent time blocks of 250 ps scatter 4.6x their random-walk errors (measured),
    # and the reported error bar is that scatter
    e = site_estimate
    d = e.diagnostics
    assert d["block_count"] == 8
    assert d["block_length"] == pytest.approx(250.0)
    # direct check outside the estimator: the standard error of the mean of the block
    # values (plain numpy; equal particle counts, so equal weights) is the reported error
    bv = np.array(d["block_values"])
    assert e.stderr == pytest.approx(bv.std(ddof=1) / math.sqrt(bv.size), rel=1e-9)
    assert e.stderr > 2.0 * d["stderr_model"]  # measured 4.6x
    # the next blocking level (Flyvbjerg & Petersen 1989): means of consecutive pairs of
    # blocks, plain numpy. Measured 1.22x the 8-block error here (molecules 1.34x, LJ 1.20x):
    # within the noise of a 3-dof error (+-40%) but larger on all three, so neighbouring
    # blocks may be slightly correlated (DEVELOPERS.md, caveats)
    pairs = bv.reshape(4, 2).mean(axis=1)
    assert d["block_stderr_pairs"] == pytest.approx(pairs.std(ddof=1) / 2, rel=1e-9)
    # 95% interval: Student t with 7 dof (scipy)
    q = stats.t.ppf(0.975, 7)
    assert e.interval == pytest.approx((e.value - q * e.stderr, e.value + q * e.stderr))
    # the value is the mean of the block values (the fit is linear in the MSD, the blocks
    # have equal frames and particles)
    assert e.value == pytest.approx(bv.mean(), rel=1e-9)
    # D of the sites, measured 5.43 +- 0.19 (1e-9 m^2/s); the MSD slope over 20-100 ps is
    # 5.35: within 2 stated errors
    assert abs(e.value - SLOPE_20_100) < 2 * e.stderr


def test_sites_and_molecule_centres_share_the_long_time_d(site_estimate, molecule_estimate):
    s, m = site_estimate, molecule_estimate
    # measured: sites 5.427 +- 0.192, molecule centres 5.363 +- 0.114 (last session:
    # 5.33 +- 0.12 and 5.64 +- 0.038, 2.4 combined errors apart). Both come from the same
    # trajectory, so their errors are positively correlated and the combined error
    # hypot(se_s, se_m) is conservative; 2 of it is the 95% level.
    assert abs(s.value - m.value) < 2 * math.hypot(s.stderr, m.stderr)
    for e in (s, m):
        assert e.method == "msd_wls" and e.unit == "1e-9 m^2/s"
        assert abs(e.value - SLOPE_20_100) < 2 * e.stderr
    # a check of the stated slope itself, outside the estimator: numpy's line fit of the
    # MSD curve over 20-100 ps
    for e in (s, m):
        t, msd = e.curves["time"], e.curves["msd"]  # ps, nm^2
        sel = (t >= 20.0) & (t <= 100.0)
        slope = np.polyfit(t[sel], msd[sel], 1)[0] / 6 * 1e3  # nm^2/ps -> 1e-9 m^2/s
        assert slope == pytest.approx(SLOPE_20_100, abs=0.01)


def test_molecule_window_waits_for_the_diffusive_regime(molecules, molecule_estimate):
    # The MSD of molecule centres bends up after the ballistic start: its local log-log
    # slope is within 0.1 of 1 from 2 ps on, but the slope of the MSD itself is still 5.6 at
    # 2 ps and 5.3 from 4 ps (measured). The window now starts at 3 ps (was 2 ps).
    e = molecule_estimate
    assert e.window[0] >= 3.0
    msd = e.curves["msd"]
    k = int(round(e.window[0]))  # frames are 1 ps apart
    c1 = (msd[2 * k] - msd[k]) / k
    c2 = (msd[4 * k] - msd[2 * k]) / (2 * k)
    # the rule: slopes over two consecutive doublings agree within 2% (or 3 model sd)
    assert abs(c1 / c2 - 1) < 0.02 + 3 * 0.01  # model sd of the ratio here ~0.005-0.01
    # at 2 ps they did not (measured 2.6%): the old start
    c1, c2 = (msd[4] - msd[2]) / 2, (msd[8] - msd[4]) / 4
    assert c1 / c2 - 1 > 0.02


@pytest.mark.parametrize("which", ["sites", "molecules"])
def test_moving_the_window_start_by_two_changes_d_less_than_its_error(which, request):
    series = request.getfixturevalue(which)
    e = request.getfixturevalue("site_estimate" if which == "sites" else "molecule_estimate")
    # the same window end, twice the start (inside the diffusive regime: the start was
    # chosen there). Measured shifts: sites +0.058 (0.30 stated errors), molecules -0.001.
    # (The previous GLS estimate moved by 0.28 = 7 stated errors for molecules between a
    # 2 ps and a 4 ps start.)
    a, b = e.window  # ps
    g = analyse_diffusion(series, vacf="no", fit_window=(2 * a * 1e-12, b * 1e-12)).msd[0]
    assert g.window == pytest.approx((2 * a, b))
    assert abs(g.value - e.value) < e.stderr
    # the slope's weight is spread over the window, not its first two points: the span
    # holding 90% of the coefficients' absolute sum reaches past 3x the start
    lo, hi = e.diagnostics["weight_span"]
    assert hi > 3 * lo


# ---------------------------------------------------------------------------------------
# calibration of the error bar on real data: independent time blocks
# ---------------------------------------------------------------------------------------

#: Block counts checked: every block of the molecule centres gets its own block-based error
#: bar up to K = 8 (250 ps); the sites up to K = 3, and at K = 4 one 500-ps block is too
#: short for it and carries the model error with a warning (included: it is what a user
#: gets). At K = 8 the sites' 250-ps blocks have no diffusive window that fits at all.
CALIBRATION_K = {"sites": (2, 3, 4), "molecules": (2, 3, 4, 6, 8)}


@pytest.fixture(scope="module")
def block_estimates(sites, molecules):
    return {(name, k): analyse_blocks(series, k)
            for name, series in (("sites", sites), ("molecules", molecules))
            for k in CALIBRATION_K[name]}


def test_error_bars_hold_in_independent_time_blocks(block_estimates, site_estimate,
                                                    molecule_estimate):
    # chi^2 of the K block values about their weighted mean, with their stated errors,
    # inside the central 95% band. Each block's error comes from 4-8 sub-blocks (3-7 dof),
    # so the band is simulated with those dof (tests/_diffusion_blocks.py); for exactly
    # known errors it would be chi^2(K - 1) (scipy), which the measured values mostly also
    # satisfy. Measured chi^2 (simulated 95% band): sites K = 2: 3.06 (0-6.4), 3: 2.24
    # (0.06-13.9), 4: 9.53 (0.24-14.8); molecules K = 2: 1.06, 3: 0.23, 4: 12.44 (0.23-13.9),
    # 6: 6.09, 8: 14.75 (1.8-26.0).
    # Power: an error bar 2x too small multiplies chi^2 by 4; the simulated chance that
    # such error bars pass all eight checks is asserted small, and on these data halving
    # the stated errors fails most of them (asserted).
    rng = np.random.default_rng(20261205)
    full = {"sites": site_estimate.value, "molecules": molecule_estimate.value}
    pass_if_half, failed_if_half, misses, n_int, checks = 1.0, 0, 0, 0, 0
    for name, ks in CALIBRATION_K.items():
        for k in ks:
            est = block_estimates[name, k]
            v = np.array([e.value for e in est])
            s = np.array([e.stderr for e in est])
            lo, hi, p_half = chi2_band(s, error_dofs(est), 0.95, rng)
            chi2 = chi2_about_weighted_mean(v, s)
            assert lo < chi2 < hi, (name, k, chi2, (lo, hi), v, s)
            pass_if_half *= p_half
            failed_if_half += not (lo < chi2_about_weighted_mean(v, s / 2) < hi)
            misses += sum(not (e.interval[0] <= full[name] <= e.interval[1]) for e in est)
            n_int += k
            checks += 1
    assert pass_if_half < 0.05  # simulated: ~0.02 (one check alone: 0.37-0.76)
    assert failed_if_half >= checks // 2  # measured: 5 of 8 fail with halved errors
    # Coverage: each block's 95% interval should hold the full-run value at least as often
    # as it holds the truth (the full-run value is nearer the truth and shares data with
    # the block). Misses up to the 99% point of binomial(n, 0.05) are allowed (measured:
    # 2 of 32). With 2x too small error bars the intervals would cover ~70%: ~10 misses.
    assert misses <= stats.binom.ppf(0.99, n_int, 0.05), (misses, n_int)


def test_blocks_too_short_for_their_own_block_check_say_so(block_estimates):
    # a 500-ps block of the sites (K = 4) is too short for four sub-blocks holding twice
    # its window start (~45 ps); its estimate carries the model error, which is too small
    # on this liquid, and must say so
    est = block_estimates["sites", 4]
    short = [e for e in est if e.diagnostics["block_count"] == 0]
    assert short  # measured: 1 of 4
    for e in short:
        assert any("could not be checked" in w for w in e.warnings)
