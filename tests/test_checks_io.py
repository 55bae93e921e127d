"""Readers refuse what would silently give wrong numbers (issue 11): DCD files written by
LAMMPS, whose header time step is in the run's own unit.

Sources: the engine's own DCD files in tests/data (LAMMPS 22 Jul 2025, see their README:
hexane every 500 steps of 2 fs, LJ every 50 steps of 0.005 tau) and MDAnalysisTests'
``ifabp_apo_100mM.dcd`` (header remark "Written by LAMMPS", time step 2.0, 250 steps between
frames; MDAnalysis reads its frame interval as 24.444 ps, i.e. 500 x 48.888 fs, the AKMA
time unit of CHARMM, 48.88821 fs: common practice, CHARMM documentation, from memory).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from transport.errors import InputError
from transport.io._dcd import _lammps_dcd
from transport.io.trajectory import load_trajectory

DATA = Path(__file__).parent / "data"
HEX_TOP, HEX_DCD = DATA / "alkane" / "hexane.data", DATA / "alkane" / "hexane_wrapped.dcd"
LJ_TOP, LJ_DCD = DATA / "lj_diffusion" / "lj.data", DATA / "lj_diffusion" / "lj_diff.dcd"

mdtests = pytest.importorskip("MDAnalysisTests.datafiles")


def test_lammps_header_is_recognised():
    assert _lammps_dcd(HEX_DCD) is not None
    h = _lammps_dcd(HEX_DCD)
    # make_alkane.py: `dump ... dcd 500` with `timestep 2.0` (fs) from step 0
    assert (h.delta, h.istart, h.nsavc) == (2.0, 0, 500)
    assert _lammps_dcd(Path(mdtests.LAMMPSdcd2)).nsavc == 250
    # a CHARMM DCD (adenylate kinase, MDAnalysisTests) is not taken for a LAMMPS one
    assert _lammps_dcd(Path(mdtests.DCD)) is None


@pytest.mark.parametrize("top,dcd", [(HEX_TOP, HEX_DCD), (LJ_TOP, LJ_DCD),
                                     ("LAMMPSdata2", "LAMMPSdcd2")])
def test_lammps_dcd_without_units_or_timestep_is_refused(top, dcd, tmp_path):
    if isinstance(top, str):
        top, dcd = getattr(mdtests, top), getattr(mdtests, dcd)
    before = sorted(p.name for p in Path(dcd).parent.iterdir())
    with pytest.raises(InputError) as exc:
        load_trajectory(top, dcd)
    msg = str(exc.value)
    assert "\n" not in msg
    for word in ("written by LAMMPS", "time step", "--units", "--timestep", str(dcd)):
        assert word in msg
    assert sorted(p.name for p in Path(dcd).parent.iterdir()) == before  # nothing written


def test_units_take_the_header_step_in_the_engine_unit():
    # hexane: 500 steps x 2 fs = 1 ps between frames (README), not 500 x 2 x 48.888 fs
    s = load_trajectory(HEX_TOP, HEX_DCD, units="real", group_by="atom")[0]
    assert s.dt == pytest.approx(1e-12, rel=1e-12)  # 2.0 is exact in float32
    given = load_trajectory(HEX_TOP, HEX_DCD, units="real", timestep=2.0, group_by="atom")[0]
    assert s.dt == given.dt and s.t0 == given.t0
    np.testing.assert_array_equal(s.positions, given.positions)
    # MDAnalysisTests' LAMMPS DCD: 250 steps x 2 fs = 0.5 ps (MDAnalysis says 24.444 ps)
    m = load_trajectory(mdtests.LAMMPSdata2, mdtests.LAMMPSdcd2, units="real")[0]
    assert m.dt == pytest.approx(0.5e-12, rel=1e-12)


def test_reduced_units_take_the_header_step():
    # LJ: 50 steps x 0.005 tau = 0.25 tau; the header stores 0.005 as float32 (rel 2e-8)
    s = load_trajectory(LJ_TOP, LJ_DCD, units="lj")[0]
    assert s.dt == pytest.approx(0.25, rel=1e-7)
    assert s.n_frames == 401


def _cut_dcd(tmp_path: Path, frames: int) -> Path:
    """The first `frames` frames of the engine's LJ DCD (header + whole frame records)."""
    from transport.io._dcd import _dcd_layout

    lay = _dcd_layout(LJ_DCD)
    p = tmp_path / f"first{frames}.dcd"
    p.write_bytes(LJ_DCD.read_bytes()[: lay.header + frames * lay.frame_bytes])
    return p


@pytest.mark.parametrize("frames", [1, 2])
def test_one_or_two_frames_are_refused_naming_the_count(tmp_path, frames):
    # issue 11: one frame was reported as "0 frame(s)", two ended in an internal error
    with pytest.raises(InputError) as exc:
        load_trajectory(LJ_TOP, _cut_dcd(tmp_path, frames), units="lj")
    assert f"has {frames} frame(s)" in str(exc.value)
    assert "at least 3 frames" in str(exc.value)


def test_a_fit_from_two_points_is_run_too_short(tmp_path):
    # issue 11: a 10-frame trajectory gave D from 2 fit points (0 dof) as a result
    from transport.diffusion import analyse_diffusion
    from transport.errors import RunTooShortError

    s = load_trajectory(LJ_TOP, _cut_dcd(tmp_path, 10), units="lj")[0]
    with pytest.raises(RunTooShortError) as exc:
        analyse_diffusion(s)
    err = exc.value
    assert err.partial is not None and err.partial.diagnostics["fit_points"] == 2
    assert err.extra_time > 0 and err.time_unit == "tau"
    for word in ("only 2 fit point(s)", "0 degrees of freedom", "extend the run by"):
        assert word in str(err)


def test_h5md_topology_without_h5py_asks_for_h5py():
    # issue 11: the message was the mock's "MockH5pyFile() takes no arguments"
    pytest.importorskip("MDAnalysis")
    try:
        import h5py  # noqa: F401
        pytest.skip("h5py is installed")
    except ImportError:
        pass
    for top in (mdtests.H5MD_xvf, mdtests.TPR_xvf):
        with pytest.raises(InputError) as exc:
            load_trajectory(top, mdtests.H5MD_xvf)
        assert "pip install h5py" in str(exc.value)
        assert "takes no arguments" not in str(exc.value)


def test_opening_a_trajectory_shows_a_bar_when_asked(tmp_path, capsys):
    # issue 11: a compressed dump took ~10 s to open (MDAnalysis indexes its frames) with
    # no bar; the bar now starts before the frames are indexed
    load_trajectory(LJ_TOP, _cut_dcd(tmp_path, 10), units="lj", progress=True)
    err = capsys.readouterr().err
    assert "opening (indexing frames)" in err and "reading frames" in err


def test_a_fit_window_too_narrow_asks_for_a_wider_window():
    # issue 11: a fit window shorter than two frames; here 1-1.5 tau of a 100 tau run
    # (frames every 0.25 tau): 2 points; the run is long enough, the window is not
    from transport.diffusion import analyse_diffusion
    from transport.errors import RunTooShortError

    s = load_trajectory(LJ_TOP, LJ_DCD, units="lj")[0]
    with pytest.raises(InputError) as exc:
        analyse_diffusion(s, fit_window=(1.0, 1.5), vacf="no")
    assert not isinstance(exc.value, RunTooShortError)
    assert "only 2 fit point(s)" in str(exc.value) and "wider --fit-window" in str(exc.value)


def test_an_implausible_temperature_for_a_trajectory_is_refused():
    with pytest.raises(InputError, match="not a plausible temperature"):
        load_trajectory(LJ_TOP, LJ_DCD, units="lj", temperature=1e30)
