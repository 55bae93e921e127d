"""Self-diffusion of the Lennard-Jones fluid from real LAMMPS output against the literature.

Data: tests/data/lj_diffusion/ (see its README: LAMMPS used only as the MD engine; N = 1372,
T* = 0.722, rho* = 0.8442, NVE production of 100 tau, frames every 0.25 tau, a DCD with
unwrapped coordinates and a bzip2-compressed ``dump custom`` with wrapped coordinates, image
flags and velocities).

Reference: K. Meier, A. Laesecke and S. Kabelac, J. Chem. Phys. 121, 9526 (2004), "Transport
coefficients of the Lennard-Jones model fluid. II. Self-diffusion": D* = 0.0325 for N = 1372
in a periodic box at this state point (the value supplied with the task). The comparison is
at the same box size (N = 1372), so no finite-size correction is applied to either side.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from _diffusion_blocks import analyse_blocks, chi2_about_weighted_mean, chi2_band, error_dofs
from scipy import stats

from transport.diffusion import analyse_diffusion
from transport.io.trajectory import load_trajectory

DATA = Path(__file__).parent / "data" / "lj_diffusion"
TOPOLOGY = DATA / "lj.data"
DCD = DATA / "lj_diff.dcd"
DUMP = DATA / "lj_diff.lammpstrj.bz2"

#: Meier, Laesecke & Kabelac (2004), N = 1372 periodic box, T* = 0.722, rho* = 0.8442.
D_PUBLISHED = 0.0325
#: Uncertainty of the published value: about 1-2% (from memory, not checked against the
#: paper); the upper end is used. It also has to cover the cutoff difference noted in the
#: data README (rc = 4.0 sigma here; larger with long-range corrections in the reference),
#: expected to change D by a percent or two at most.
PUBLISHED_REL_UNCERTAINTY = 0.02

# Committed data: a missing file is a failure (the fixtures fail to read it), not a skip.


@pytest.fixture(scope="module")
def dcd_series():
    return load_trajectory(TOPOLOGY, DCD, units="lj", timestep=0.005)[0]


@pytest.fixture(scope="module")
def dump_series():
    return load_trajectory(TOPOLOGY, DUMP, units="lj", timestep=0.005)[0]


def test_reads_the_lammps_files(dcd_series, dump_series):
    for s in (dcd_series, dump_series):
        assert s.n_particles == 1372 and s.n_frames == 401
        assert s.dt == pytest.approx(0.25)  # 50 steps of 0.005 tau
        assert s.units.reduced
        np.testing.assert_allclose(s.box[0], 11.757173, rtol=1e-5)  # README: L
    # the DCD holds unwrapped coordinates (continuous, nothing to unwrap); the dump holds
    # wrapped coordinates with image flags
    assert dcd_series.unwrap == "none (coordinates are continuous)"
    assert dump_series.unwrap == "image flags"
    # the same trajectory: the dump writes 4 decimals, the DCD float32
    d0 = dcd_series.positions - dcd_series.positions[0]
    d1 = dump_series.positions - dump_series.positions[0]
    np.testing.assert_allclose(d0, d1, atol=2e-4)
    # kinetic temperature from the dump's velocities: NVE at the canonical energy of
    # T* = 0.722 (README); fluctuations of a 1372-atom system are about 1%
    assert dump_series.temperature == pytest.approx(0.722, rel=0.03)
    assert dcd_series.velocities is None


def test_self_diffusion_matches_meier_laesecke_kabelac(dcd_series, dump_series):
    res = analyse_diffusion(dcd_series)
    (e,) = res.msd
    assert e.unit == "reduced (lj)" and e.window_unit == "tau"
    lo, hi = e.interval
    widen = PUBLISHED_REL_UNCERTAINTY * D_PUBLISHED
    assert lo - widen <= D_PUBLISHED <= hi + widen, (e.value, e.interval)
    # the estimate rests on 8 independent time blocks of 12.5 tau, each fitted over the
    # same window (1-6 tau, cut at half a block): their scatter is the error bar, 3.2x the
    # random-walk model error (measured; block values 0.0303-0.0342). Direct check outside
    # the estimator: the standard error of the mean of the block values (plain numpy;
    # equal blocks, equal weights) is the reported error, and the value is their mean
    d = e.diagnostics
    assert d["block_count"] == 8 and d["block_length"] == pytest.approx(12.5)
    bv = np.array(d["block_values"])
    assert e.stderr == pytest.approx(bv.std(ddof=1) / np.sqrt(bv.size), rel=1e-9)
    assert e.value == pytest.approx(bv.mean(), rel=1e-9)
    assert e.stderr > 2.5 * d["stderr_model"]  # measured 3.22x
    # the fit of the blocks' mean MSD still rejects the independent-random-walk covariance
    # (a real liquid's particles are correlated): Birge ratio 1.38 (measured, 3 digits)
    assert d["fit_scale_factor"] == pytest.approx(1.38, abs=5e-3)
    assert lo <= D_PUBLISHED <= hi, (e.value, e.interval)
    # the window starts after the ballistic/caging regime (~0.5 tau at this density: common
    # practice for the LJ liquid near its triple point, from memory) and
    # ends at half a block; the whole-run fit over the automatic window (to (N+1)/4 frames
    # = 25 tau) is kept in the diagnostics and agrees (measured 0.03269)
    assert e.window[0] >= 0.5 and e.window[1] == pytest.approx(6.0)
    assert d["whole_run_window"][1] == pytest.approx(25.0)
    assert abs(d["whole_run_value"] - e.value) < e.stderr
    # the dump (image flags) gives the same estimate to within its 4-decimal rounding
    f = analyse_diffusion(dump_series, vacf="no").msd[0]
    assert f.value == pytest.approx(e.value, rel=2e-3)
    # velocities every 0.25 tau are too coarse for the VACF (README): no VACF estimate
    res_v = analyse_diffusion(dump_series)
    assert res_v.vacf == ()
    assert any("too far apart for the VACF" in n for n in res_v.notes)


def test_a_dcd_cut_inside_its_last_frame_is_read_with_a_warning(tmp_path, dcd_series):
    """An engine killed while writing leaves a partial last frame; MDAnalysis counts whole
    frames from the file size and skips it silently, the reader says so (the DCD record
    layout is the documented CHARMM/LAMMPS one; from memory)."""
    cut = tmp_path / "cut.dcd"
    cut.write_bytes(DCD.read_bytes()[:-5000])
    s = load_trajectory(TOPOLOGY, cut, units="lj", timestep=0.005)[0]
    assert s.n_frames == 400
    frame = 3 * (4 * 1372 + 8) + 56  # x, y, z records and the unit cell record
    assert any(f"ends {frame - 5000} bytes into a frame after frame 400" in w
               for w in s.warnings)
    assert not any("into a frame" in w for w in dcd_series.warnings)  # the complete file
    np.testing.assert_array_equal(s.positions, dcd_series.positions[:400])


def test_dcd_blocks_equal_mdanalysis_frame_by_frame(dcd_series, monkeypatch):
    """The engine's own DCD, read a block of frames at a time (the fixture) and through
    MDAnalysis's reader one Timestep per frame (the reference): the same series."""
    from transport.io import _collect, _dcd

    lay = _dcd._dcd_layout(DCD)
    assert lay is not None and lay.cell and lay.n_atoms == 1372  # the plain layout
    monkeypatch.setattr(_collect, "_bulk_dcd", lambda u, p: None)
    ref = load_trajectory(TOPOLOGY, DCD, units="lj", timestep=0.005)[0]
    np.testing.assert_array_equal(dcd_series.positions, ref.positions)
    np.testing.assert_array_equal(dcd_series.box, ref.box)
    np.testing.assert_array_equal(dcd_series.drift, ref.drift)
    assert (dcd_series.dt, dcd_series.t0) == (ref.dt, ref.t0)


def test_moving_the_window_start_by_two_changes_d_less_than_its_error(dcd_series):
    # same window end, twice the start: measured 0.032895 vs 0.032821 (0.14 stated errors).
    # (The previous GLS estimate gave the same value for windows 5:15 and 5:50 frames and
    # another for 10:1250: it was the slope between the first two points.)
    e = analyse_diffusion(dcd_series, vacf="no").msd[0]
    a, b = e.window
    g = analyse_diffusion(dcd_series, vacf="no", fit_window=(2 * a, b)).msd[0]
    assert g.window == pytest.approx((2 * a, b))
    assert abs(g.value - e.value) < e.stderr
    lo, hi = e.diagnostics["weight_span"]
    assert hi >= 3 * lo  # the weight is spread over the window (measured 1-5 tau)


#: K for which every block of this 100-tau run gets its own block-based error bar
#: (measured; at K = 6 and 8 most 12-17-tau blocks are too short and say so).
CALIBRATION_K = (2, 3, 4)


def test_error_bars_hold_in_independent_time_blocks(dcd_series):
    # The design note's check on real data (see tests/test_alkane_diffusion.py for the
    # molecular liquid and for why the band is simulated with each error's own dof): chi^2
    # of the block values about their weighted mean with their stated errors inside the
    # central 95% band. Measured chi^2 (simulated band): K = 2: 0.52 (0-6.6), 3: 1.73
    # (0.06-12.6), 4: 10.32 (0.25-21.6); chi^2(K - 1)'s own 95% band would reject K = 4
    # (9.35). With the previous error bar (model error times a block factor, whole-run
    # window) K = 4 gave chi^2 = 14.9 with 3 dof. Power: errors 2x too small multiply chi^2
    # by 4; on these data halving the stated errors fails K = 4 (asserted); the simulated
    # chance of passing all three checks with such errors is asserted below (measured
    # ~0.4: the molecular checks add most of the power).
    rng = np.random.default_rng(4242)
    full = analyse_diffusion(dcd_series, vacf="no").msd[0]
    pass_if_half, misses, n_int = 1.0, 0, 0
    for k in CALIBRATION_K:
        est = analyse_blocks(dcd_series, k)
        assert all(e.diagnostics["block_count"] >= 4 for e in est), k
        v = np.array([e.value for e in est])
        s = np.array([e.stderr for e in est])
        lo, hi, p_half = chi2_band(s, error_dofs(est), 0.95, rng)
        assert lo < chi2_about_weighted_mean(v, s) < hi, (k, v, s)
        if k == 4:
            assert chi2_about_weighted_mean(v, s / 2) > hi
        pass_if_half *= p_half
        misses += sum(not (e.interval[0] <= full.value <= e.interval[1]) for e in est)
        n_int += k
    assert pass_if_half < 0.6
    # coverage of the full-run value by the block intervals (measured: 9 of 9)
    assert misses <= stats.binom.ppf(0.99, n_int, 0.05)


def test_vacf_error_bar_holds_in_time_blocks(dump_series):
    # No committed real trajectory has velocities sampled finely enough for the VACF
    # integral: the LJ dump's frames are 0.25 tau apart (README) and the hexane DCD has no
    # velocities. What can be checked on real data is the VACF error bar: its pieces are
    # now independent time segments only (particle blocks share the collective motion of
    # the box), and their scatter must match the scatter of independent time blocks. The
    # value itself is biased by the coarse frames (measured 0.070 vs the MSD's 0.0328) and
    # is not checked. Measured chi^2 (simulated 95% band with each error's segments - 1
    # dof): K = 2: 1.43 (0-6.6), 3: 1.71 (0.05-10.9), 4: 3.98 (0.24-14.3); halving the
    # errors fails K = 4 (asserted: 15.9). At K = 8 (12.5-tau blocks, 3 segments each) the
    # particle blocks come back, and chi^2 = 50.6 lies far above its band (2.0-36.5): they
    # understate the error, as the warning says (asserted).
    full = analyse_diffusion(dump_series, vacf="yes").vacf[0]
    assert any("biased" in w for w in full.warnings)
    assert "independent time segment" in full.diagnostics["stderr_method"]
    assert "particles" not in full.diagnostics["stderr_method"]
    rng = np.random.default_rng(77)
    for k in (2, 3, 4):
        est = analyse_blocks(dump_series, k, method="vacf")
        for e in est:
            assert "particles" not in e.diagnostics["stderr_method"], k
        v = np.array([e.value for e in est])
        s = np.array([e.stderr for e in est])
        nu = np.array([e.diagnostics["pieces"] - 1 for e in est], dtype=float)
        lo, hi, _ = chi2_band(s, nu, 0.95, rng)
        assert lo < chi2_about_weighted_mean(v, s) < hi, (k, v, s)
        if k == 4:
            assert chi2_about_weighted_mean(v, s / 2) > hi
    short = analyse_blocks(dump_series, 8, method="vacf")
    assert all(any("blocks of particles" in w for w in e.warnings) for e in short)
