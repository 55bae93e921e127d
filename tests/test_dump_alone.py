"""A trajectory without a topology, and the run's settings from its own log.

Real files made by LAMMPS used only as the engine (tests/data/README.md):
* ``dump_only/argon.lammpstrj.gz`` + ``log.lammps``: a system built from a lattice, so no
  data file exists;
* ``alkane/hexane_mol.lammpstrj.gz`` (``id mol type mass xu yu zu``) with ``hexane.data``;
* ``lj_diffusion/lj_diff.log.gz``, whose commands are checked by hand below.

References outside the project: MDAnalysis (reading the same dump, its molecule fragments
from the data file's bonds), plain numpy MSDs, and the engine's own thermo output.
"""

from __future__ import annotations

import json
import re
import shutil
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from transport.cli import main
from transport.diffusion import analyse_diffusion
from transport.errors import InputError
from transport.io._dump_atoms import parse_masses
from transport.io._run_log import log_settings
from transport.io.trajectory import load_trajectory, split_inputs

mda = pytest.importorskip("MDAnalysis")

DATA = Path(__file__).parent / "data"
ARGON = DATA / "dump_only" / "argon.lammpstrj.gz"
ARGON_LOG = DATA / "dump_only" / "log.lammps"
HEXANE_DUMP = DATA / "alkane" / "hexane_mol.lammpstrj.gz"
HEXANE_DATA = DATA / "alkane" / "hexane.data"


def run(args):
    return CliRunner().invoke(main, args)


def _one_line_error(res) -> str:
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1, res.output
    return lines[0]


# ---- the same D with and without the data file ---------------------------------------

def test_hexane_molecules_from_the_dump_alone_equal_those_from_the_data_file():
    alone = load_trajectory(None, HEXANE_DUMP, units="real", timestep=2.0,
                            group_by="molecule")
    with_top = load_trajectory(HEXANE_DATA, HEXANE_DUMP, units="real", timestep=2.0,
                               group_by="molecule")
    a, b = alone[0], with_top[0]
    # molecules from the dump's mol column and masses from its mass column, against
    # molecules from the data file's bonds (MDAnalysis fragments) and its Masses section
    assert a.positions.shape == b.positions.shape == (201, 100, 3)
    assert a.species_names == b.species_names == ("t1x2-t2x4",)
    np.testing.assert_array_equal(a.masses, b.masses)
    # same frames, same atoms, same masses: the same arithmetic, so equal to rounding
    np.testing.assert_allclose(a.positions, b.positions, rtol=0, atol=1e-15)
    da = analyse_diffusion(alone).estimates[0]
    db = analyse_diffusion(with_top).estimates[0]
    # same frames => the same D to float tolerance (not a statistical agreement)
    assert da.value == pytest.approx(db.value, rel=1e-12)
    assert da.stderr == pytest.approx(db.stderr, rel=1e-12)
    assert "masses from the dump's mass column" in alone[0].warnings


def test_hexane_molecule_centres_match_mdanalysis_fragments():
    """Frame 0 centres of mass against MDAnalysis's own, from the data file's bonds."""
    s = load_trajectory(None, HEXANE_DUMP, units="real", timestep=2.0,
                        group_by="molecule", velocities=False)[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = mda.Universe(str(HEXANE_DATA), str(HEXANE_DUMP), format="LAMMPSDUMP",
                         atom_style="id resid type charge x y z",
                         lammps_coordinate_convention="unwrapped")
        com = np.array([f.center_of_mass() for f in u.atoms.fragments])  # Angstrom
    # the series removes the system's centre-of-mass drift from frame 0 on: compare the
    # molecule centres relative to their own mean, in Angstrom; float32 storage of
    # ~30 A coordinates: ~1e-5 A
    got = np.asarray(s.positions[0], dtype=np.float64) / 1e-10
    np.testing.assert_allclose(got - got.mean(0), com - com.mean(0), atol=1e-4)


# ---- the argon dump made with no data file, with its log beside it ---------------------

@pytest.fixture
def argon_dir(tmp_path: Path) -> Path:
    (tmp_path / ARGON.name).symlink_to(ARGON)
    return tmp_path


def test_argon_dump_alone_takes_units_and_timestep_from_the_log_beside_it(argon_dir):
    shutil.copy(ARGON_LOG, argon_dir / "log.lammps")
    out = argon_dir / "d.json"
    res = run(["diffusion", str(argon_dir / ARGON.name), "--json", str(out)])
    assert res.exit_code == 0, res.output
    doc = json.loads(out.read_text())
    r = doc["results"][0]
    assert r["unit"] == "1e-9 m^2/s"
    # what was taken from the log is a note (not a warning), with the lines it came from
    assert any("run settings from" in w and "units real (line 5)" in w
               and "timestep 4 (line 23)" in w for w in r["notes"])
    assert not any("run settings" in w for w in r["warnings"])
    # dump every 50 steps of 4 fs: frames 0.2 ps apart
    assert r["diagnostics"]["frame_interval"] == pytest.approx(0.2, rel=1e-12)
    # masses from the log's `mass 1 39.948`: the kinetic temperature (3N - 3 dof, as the
    # engine's own `temp`) against the mean of the production thermo rows of the log;
    # 201 dump frames vs 41 thermo rows of a 256-atom system (T fluctuates ~6 K per row):
    # the means agree within about 1.5 K
    text = ARGON_LOG.read_text().split("reset_timestep")[1]
    rows = re.findall(r"^\s+\d+\s+([\d.]+)\s+\S+\s+\S+\s+\S+\s+\S+\s*$", text, re.M)
    t_log = np.mean([float(t) for t in rows])
    assert len(rows) == 41
    assert r["diagnostics"]["temperature"] == pytest.approx(t_log, abs=1.5)
    # an independent MSD: MDAnalysis reads the dump (x + n L with the image flags), plain
    # numpy averages over all origins, an unweighted line over the window transport chose.
    # Same data, different weights and origins: within 2 of the stated standard errors
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = mda.Universe(str(ARGON), format="LAMMPSDUMP",
                         additional_columns=["ix", "iy", "iz"])
        x = []
        for ts in u.trajectory:
            img = np.column_stack([ts.data["ix"], ts.data["iy"], ts.data["iz"]])
            x.append(ts.positions + img * ts.dimensions[:3])
    x = np.array(x, dtype=np.float64)
    x -= x.mean(axis=1, keepdims=True)  # equal masses: drift removed
    lags = np.arange(1, 60)
    msd = np.array([np.mean(np.sum((x[k:] - x[:-k]) ** 2, axis=2)) for k in lags])
    t = lags * 0.2  # ps
    w0, w1 = r["window"]
    m = (t >= w0 - 1e-9) & (t <= w1 + 1e-9)
    slope = np.polyfit(t[m], msd[m], 1)[0]  # A^2/ps
    d_np = slope / 6 * 1e-20 / 1e-12 / 1e-9  # 1e-9 m^2/s
    assert abs(d_np - r["value"]) < 2 * r["stderr"]
    # liquid argon near 95 K and 1.37 g/cm^3: about 2-3e-9 m^2/s (order of magnitude from
    # memory, not a reference for this model)
    assert 1.5 < r["value"] < 3.5


def test_missing_settings_are_asked_for_in_one_message(argon_dir):
    out = argon_dir / "d.json"
    line = _one_line_error(run(["diffusion", str(argon_dir / ARGON.name),
                                "--json", str(out)]))
    assert "--units" in line and "--timestep" in line and "--log" in line
    assert not out.exists()
    line = _one_line_error(run(["diffusion", str(argon_dir / ARGON.name), "--units", "real"]))
    assert "--timestep" in line and "--units STYLE" not in line


def test_given_log_and_options(argon_dir):
    # --log FILE from elsewhere; an option given wins over the log, with a note
    elsewhere = argon_dir / "sub"
    elsewhere.mkdir()
    shutil.copy(ARGON_LOG, elsewhere / "run.log")
    s = load_trajectory(None, argon_dir / ARGON.name, log=elsewhere / "run.log",
                        timestep=2.0, velocities=False)[0]
    assert s.dt == pytest.approx(50 * 2.0e-15, rel=1e-12)  # 50 steps x 2 fs (--timestep)
    assert s.units.name == "real"


def test_lone_coordinates_file_error_names_the_fix(tmp_path):
    pytest.importorskip("MDAnalysisTests")
    from MDAnalysisTests.datafiles import DCD

    line = _one_line_error(run(["diffusion", DCD]))
    assert "cannot describe its atoms" in line
    assert "give the topology first" in line


def test_data_file_alone_is_refused_with_one_frame():
    line = _one_line_error(run(["diffusion", str(HEXANE_DATA), "--units", "real"]))
    assert "one frame" in line and "topology" in line


# ---- masses ----------------------------------------------------------------------------

def _tiny_dump(path: Path, cols: str = "id mol type x y z", frames: int = 3) -> None:
    rows = [(1, 1, 1, 0.5, 0.5, 0.5), (2, 1, 2, 1.5, 0.5, 0.5),
            (3, 2, 1, 5.5, 5.5, 5.5), (4, 2, 2, 6.5, 5.5, 5.5)]
    text = []
    for f in range(frames):
        text += ["ITEM: TIMESTEP", str(10 * f), "ITEM: NUMBER OF ATOMS", "4",
                 "ITEM: BOX BOUNDS pp pp pp", "0 10", "0 10", "0 10", f"ITEM: ATOMS {cols}"]
        text += [" ".join(str(v) for v in r) for r in rows[::-1]]  # ids out of order
    path.write_text("\n".join(text) + "\n")


def test_molecule_centres_need_masses(tmp_path):
    p = tmp_path / "tiny.lammpstrj"
    _tiny_dump(p)
    with pytest.raises(InputError, match=r"--masses 1=MASS,2=MASS") as exc:
        load_trajectory(None, p, units="real", timestep=1.0, group_by="molecule")
    assert "no mass or element column" in str(exc.value)
    s = load_trajectory(None, p, units="real", timestep=1.0, group_by="molecule",
                        masses="1=12.0,2=4.0", velocities=False)[0]
    # centre of (12 at x=0.5, 4 at x=1.5) = 0.75; molecule masses 16 amu
    assert s.masses == pytest.approx(np.full(2, 16.0 * 1.66053906660e-27), rel=1e-12)
    with pytest.raises(InputError, match=r"type\(s\) 3"):
        load_trajectory(None, p, units="real", timestep=1.0, masses="3=1.0")


def test_parse_masses():
    assert parse_masses("1=12.011, 2=1.008") == {"1": 12.011, "2": 1.008}
    for bad in ("1:12", "1=-3", "=4", "1=x"):
        with pytest.raises(InputError):
            parse_masses(bad)


def test_split_inputs(tmp_path):
    d1, d2 = tmp_path / "a.lammpstrj", tmp_path / "b.lammpstrj"
    _tiny_dump(d1)
    _tiny_dump(d2)
    assert split_inputs([d1]) == (None, [d1])
    assert split_inputs([d1, d2]) == (None, [d1, d2])  # all dumps: no topology
    assert split_inputs([HEXANE_DATA, d1]) == (HEXANE_DATA, [d1])


def test_log_settings_of_the_lj_log():
    # checked by hand in the decompressed log: `units lj` on line 6, `timestep 0.005` on
    # line 26, `dump traj all custom 50 lj_diff.lammpstrj ...` on line 233
    rs = log_settings(DATA / "lj_diffusion" / "lj_diff.log.gz",
                      DATA / "lj_diffusion" / "lj_diff.lammpstrj.bz2")
    assert (rs.units, rs.units_line) == ("lj", 6)
    assert (rs.timestep, rs.timestep_line) == (0.005, 26)
    assert (rs.dump_every, rs.dump_line) == (50, 233)
    assert rs.masses == {"1": 1.0}


def test_log_that_is_not_a_log(tmp_path):
    p = tmp_path / "x.log"
    p.write_text("hello\n")
    with pytest.raises(InputError, match="not a LAMMPS log"):
        log_settings(p)


# ---- other self-describing formats, as MDAnalysis reads them ---------------------------

def test_multiframe_pdb_alone_equals_the_two_argument_form(tmp_path):
    from transport.synthetic import brownian_positions

    rng = np.random.default_rng(715)
    x = brownian_positions(40, 30, 1.0, 0.05, 30.0, rng)  # frames x atoms x 3, Angstrom
    p = tmp_path / "walk.pdb"
    lines = []
    for k, frame in enumerate(x):  # PDB fixed columns, a box (CRYST1) in every model
        lines += ["CRYST1   30.000   30.000   30.000  90.00  90.00  90.00 P 1           1",
                  f"MODEL     {k + 1:4d}"]
        lines += [f"ATOM  {i + 1:5d}  AR  ARG X   1    {a:8.3f}{b:8.3f}{c:8.3f}  1.00  0.00"
                  f"          AR" for i, (a, b, c) in enumerate(frame)]
        lines.append("ENDMDL")
    p.write_text("\n".join(lines) + "\nEND\n")
    alone = load_trajectory(None, p, frame_interval=1.0, velocities=False)[0]
    both = load_trajectory(p, p, frame_interval=1.0, velocities=False)[0]
    # the same file read the same way: identical arrays (not a statistical agreement)
    assert alone.positions.shape == (40, 30, 3)
    np.testing.assert_array_equal(alone.positions, both.positions)
    # against the written (wrapped) coordinates unwrapped here by minimum-image steps in
    # plain numpy (PDB keeps 3 decimals: 5e-4 A), drift removed on both sides with equal
    # masses
    xr = np.round(x, 3)
    step = np.diff(xr, axis=0)
    step -= 30.0 * np.round(step / 30.0)
    ref = np.concatenate([xr[:1], xr[:1] + np.cumsum(step, axis=0)])
    ref -= ref.mean(axis=1, keepdims=True)
    got = np.asarray(alone.positions, np.float64) / 1e-10
    got -= got.mean(axis=1, keepdims=True)
    np.testing.assert_allclose(got, ref, atol=1e-3)


def test_single_frame_gro_alone_is_refused():
    datafiles = pytest.importorskip("MDAnalysisTests.datafiles")
    line = _one_line_error(run(["diffusion", datafiles.GRO]))
    assert "one frame" in line and "give it first, as the topology" in line


def test_element_column_gives_masses_and_formula_names(tmp_path):
    p = tmp_path / "ch.lammpstrj"
    rows = [(1, 1, 1, "C", 0.5, 0.5, 0.5), (2, 1, 2, "H", 1.5, 0.5, 0.5),
            (3, 2, 1, "C", 5.5, 5.5, 5.5), (4, 2, 2, "H", 6.5, 5.5, 5.5)]
    text = []
    for f in range(3):
        text += ["ITEM: TIMESTEP", str(10 * f), "ITEM: NUMBER OF ATOMS", "4",
                 "ITEM: BOX BOUNDS pp pp pp", "0 10", "0 10", "0 10",
                 "ITEM: ATOMS id mol type element x y z"]
        text += [" ".join(str(v) for v in r) for r in rows]
    p.write_text("\n".join(text) + "\n")
    s = load_trajectory(None, p, units="real", timestep=1.0, group_by="molecule",
                        velocities=False)[0]
    # standard atomic weights of MDAnalysis's table (C 12.011, H 1.008) and the Hill
    # formula of the molecule (C first, then H; common practice)
    assert s.species_names == ("CH",)
    assert s.masses == pytest.approx(np.full(2, 13.019 * 1.66053906660e-27), rel=1e-12)
    assert "masses from the dump's element column" in s.warnings


def test_lammps_dcd_takes_its_units_from_the_run_log():
    # hexane.log.xz: `units real` (line 5), `timestep 1.0` (line 52) while compressing, then
    # `timestep 2.0` (line 127), `dump traj all dcd 500 hexane_wrapped.dcd` (line 325),
    # checked by hand with xzcat | grep; the time step in force at the dump's run is 2 fs
    log = DATA / "alkane" / "hexane.log.xz"
    dcd = DATA / "alkane" / "hexane_wrapped.dcd"
    rs = log_settings(log, dcd)
    assert (rs.units, rs.units_line, rs.timestep, rs.timestep_line) == ("real", 5, 2.0, 127)
    assert (rs.dump_every, rs.dump_line) == (500, 325)
    s = load_trajectory(HEXANE_DATA, dcd, log=log, velocities=False, skip=1.9e-9)[0]
    # DCD header: 500 steps between frames x the header's 2 (fs, the log's units) = 1 ps
    assert s.units.name == "real"
    assert s.dt == pytest.approx(1e-12, rel=1e-9)


def test_log_of_another_run_is_flagged_by_its_dump_interval(argon_dir):
    # the same log with `dump ... custom 25` instead of 50: frames are 50 steps apart
    text = ARGON_LOG.read_text().replace("all custom 50 argon", "all custom 25 argon")
    (argon_dir / "other.log").write_text(text)
    s = load_trajectory(None, argon_dir / ARGON.name, log=argon_dir / "other.log",
                        velocities=False)[0]
    assert any("50 steps apart" in w and "every 25" in w for w in s.warnings)
    ok = load_trajectory(None, argon_dir / ARGON.name, log=ARGON_LOG, velocities=False)[0]
    assert not any("steps apart" in w for w in ok.warnings)
