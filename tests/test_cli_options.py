"""Command-line options with valid values: each changes what it promises, and only that.

Every option is run through click's CliRunner on the command entry point
(`transport.cli.main`) and the value it changes is compared with the library called
directly with the same setting (the CLI only parses, calls the library and prints), or with
an exact property of the input (a window, a skip, a group count, a file's known mean).

Data: synthetic stress with a known Green–Kubo viscosity (transport.synthetic; reduced
units), Brownian particles with a known D (transport.synthetic.brownian_positions) written
with MDAnalysis, and the committed engine logs of tests/data.
"""

from __future__ import annotations

import json
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import DATA, committed

from transport.cli import main
from transport.diffusion import analyse_diffusion
from transport.io import load_stress
from transport.io.trajectory import load_trajectory
from transport.synthetic import OUStressModel, brownian_positions
from transport.viscosity import analyse_viscosity

mda = pytest.importorskip("MDAnalysis")

V, KT, ETA, DT = 1000.0, 1.0, 3.0, 0.01
MODEL = OUStressModel.for_viscosity(ETA, V, KT, times=[0.05, 0.5], fractions=[0.3, 0.7],
                                    mean_pressure=2.0, pressure_noise=0.5)


def run(args: list[str]):
    res = CliRunner().invoke(main, args, catch_exceptions=False)
    assert res.exit_code == 0, res.output
    return res


def run_json(args: list[str]) -> dict:
    return json.loads(run(["-q", *args, "--json", "-"]).stdout)


# ---- viscosity ---------------------------------------------------------------------------

@pytest.fixture(scope="module")
def stress_files(tmp_path_factory) -> list[Path]:
    """Two replicas of 40,000 rows (400 tau, 800 slow correlation times) as CSV tables:
    time (tau), the six components, volume (reduced units)."""
    folder = tmp_path_factory.mktemp("stress")
    rng = np.random.default_rng(2026)
    files = []
    for k in range(2):
        p = MODEL.sample(40_000, DT, rng)
        t = np.arange(p.shape[1]) * DT
        f = folder / f"rep{k}.csv"
        np.savetxt(f, np.c_[t, p.T, np.full(t.size, V)], delimiter=",", fmt="%.17g",
                   header="time,pxx,pyy,pzz,pxy,pxz,pyz,vol", comments="")
        files.append(f)
    return files


@pytest.fixture(scope="module")
def stress_series(stress_files):
    return [load_stress(f, units="lj", temperature=KT) for f in stress_files]


def _visc(files, *extra) -> list[dict]:
    return run_json(["viscosity", *map(str, files), "--units", "lj", "--temperature",
                     str(KT), *extra])["results"]


def test_viscosity_default_is_the_library_green_kubo(stress_files, stress_series):
    (rec,) = _visc(stress_files)
    ref = analyse_viscosity(stress_series, method="green-kubo").green_kubo
    assert rec["method"] == "green_kubo"
    assert rec["value"] == pytest.approx(ref.value, rel=1e-12)
    assert rec["stderr"] == pytest.approx(ref.stderr, rel=1e-12)
    assert abs(rec["value"] - ETA) < 4 * rec["stderr"]  # known truth (synthetic)


def test_method_einstein(stress_files, stress_series):
    (rec,) = _visc(stress_files, "--method", "einstein")
    ref = analyse_viscosity(stress_series, method="einstein").einstein
    assert rec["method"] == "einstein"
    assert rec["value"] == pytest.approx(ref.value, rel=1e-12)
    assert rec["window"] == pytest.approx(list(ref.window), rel=1e-12)
    assert abs(rec["value"] - ETA) < 4 * rec["stderr"]


def test_components_off_diagonal(stress_files, stress_series):
    (rec,) = _visc(stress_files, "--components", "off-diagonal")
    ref = analyse_viscosity(stress_series, components="off_diagonal").green_kubo
    full = analyse_viscosity(stress_series).green_kubo
    assert rec["value"] == pytest.approx(ref.value, rel=1e-12)
    assert rec["value"] != pytest.approx(full.value, rel=1e-6)  # it did change something
    # 3 of the 5 independent components: a larger error bar than with all of them
    assert rec["stderr"] > full.stderr


def test_cutoff_in_time_units(stress_files, stress_series):
    (rec,) = _visc(stress_files, "--cutoff", "5")
    assert rec["window"] == pytest.approx([0.0, 5.0], abs=DT / 2)
    ref = analyse_viscosity(stress_series, cutoff=5.0).green_kubo
    assert rec["value"] == pytest.approx(ref.value, rel=1e-12)
    # the running integral at 5 tau = 10 slow times has converged (truncation e^-10)
    assert abs(rec["value"] - ETA) < 4 * rec["stderr"]


def test_fit_window_for_einstein(stress_files):
    (rec,) = _visc(stress_files, "--method", "einstein", "--fit-window", "2:8")
    assert rec["window"] == pytest.approx([2.0, 8.0], abs=DT / 2)
    assert abs(rec["value"] - ETA) < 4 * rec["stderr"]


def test_skip_drops_that_time_from_every_replica(stress_files, stress_series):
    (rec,) = _visc(stress_files, "--skip", "10")
    assert rec["diagnostics"]["skipped"] == pytest.approx([10.0, 10.0], abs=DT / 2)
    ref = analyse_viscosity(stress_series, skip=10.0).green_kubo
    assert rec["value"] == pytest.approx(ref.value, rel=1e-12)
    (zero,) = _visc(stress_files, "--skip", "0")
    assert zero["diagnostics"]["skipped"] == [0.0, 0.0]


def test_max_lag(stress_files, stress_series):
    (rec,) = _visc(stress_files, "--max-lag", "8", "--cutoff", "6")
    assert rec["diagnostics"]["max_lag"] == pytest.approx(8.0, abs=DT / 2)
    # the running integral in the result stops at the maximum lag
    ref = analyse_viscosity(stress_series, max_lag=8.0, cutoff=6.0).green_kubo
    assert rec["value"] == pytest.approx(ref.value, rel=1e-12)
    (default,) = _visc(stress_files, "--cutoff", "6")
    assert default["diagnostics"]["max_lag"] != pytest.approx(8.0, abs=DT / 2)


def test_quiet_silences_stderr_only():
    # A restart log whose overlap the reader resolves (tests/data/lammps_logs README: steps
    # 1000-1500 written twice) makes a note on stderr; --quiet removes it and nothing else.
    log = str(committed(DATA / "lammps_logs" / "lj_restart_overlap.log"))
    args = ["average", log, "--column", "Temp", "--skip", "0"]
    loud = run(args)
    quiet = run(["--quiet", *args])
    assert loud.stderr.startswith("transport: note: ") and "restart" in loud.stderr
    assert quiet.stderr == ""
    assert quiet.stdout == loud.stdout


# ---- average --run -----------------------------------------------------------------------

def test_average_run_selects_that_thermo_run():
    # tests/data/lammps_logs/argon_real_tworuns.log: two runs of 201 rows; README there
    # (plain numpy on the file): mean T 99.6 K in run 1 (still cooling from 300 K), 93.0 K
    # in run 2. --skip 0 keeps every row, so the value is the plain mean.
    log = str(committed(DATA / "lammps_logs" / "argon_real_tworuns.log"))
    means = {}
    for run_no in ("1", "2"):
        (rec,) = run_json(["average", log, "--column", "Temp", "--run", run_no, "--skip",
                           "0"])["results"]
        means[run_no] = rec["value"]
        assert rec["diagnostics"]["n_used"] == 201
    assert means["1"] == pytest.approx(99.6, abs=0.05)  # README's rounding
    assert means["2"] == pytest.approx(93.0, abs=0.05)


# ---- diffusion ---------------------------------------------------------------------------

D_A2PS = 0.1  # Angstrom^2 / ps
D_REPORTED = 1.0  # the same in the reported unit, 1e-9 m^2/s
BOX = 25.0


def _universe(x: np.ndarray, dt_ps: float, box: float, bonds=None):
    from MDAnalysis.coordinates.memory import MemoryReader

    n_frames, n, _ = x.shape
    u = mda.Universe.empty(n, n_residues=n, atom_resindex=np.arange(n), trajectory=True)
    u.add_TopologyAttr("names", ["C"] * n)
    u.add_TopologyAttr("types", ["C"] * n)
    u.add_TopologyAttr("resnames", ["LIQ"] * n)
    u.add_TopologyAttr("resids", np.arange(1, n + 1))
    u.add_TopologyAttr("masses", np.full(n, 12.0))
    if bonds is not None:
        u.add_TopologyAttr("bonds", bonds)
    dims = np.array([box, box, box, 90.0, 90.0, 90.0])
    # frames through an in-memory reader with their times, so XTC stores increasing times
    u.load_new(np.ascontiguousarray(x, dtype=np.float32), format=MemoryReader, dt=dt_ps,
               dimensions=np.tile(dims, (n_frames, 1)))
    return u


def _write(folder: Path, x: np.ndarray, dt_ps: float, *, box: float = BOX, bonds=None,
           name: str = "traj.dcd") -> tuple[Path, Path]:
    """PDB topology (CONECT records for `bonds`) and a DCD/XTC trajectory, with MDAnalysis."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = _universe(x, dt_ps, box, bonds)
        top = folder / "top.pdb"
        u.atoms.write(str(top))
        traj = folder / name
        with mda.Writer(str(traj), u.atoms.n_atoms, dt=dt_ps) as w:
            for _ in u.trajectory:
                w.write(u.atoms)
    return top, traj


def _atomic_data(path: Path, types: list[int], box: float = BOX) -> Path:
    """A LAMMPS data file, atom style atomic, masses 12."""
    rows = "\n".join(f"{i + 1} {t} 0.0 0.0 0.0" for i, t in enumerate(types))
    k = max(types)
    masses = "\n".join(f"{t} 12.0" for t in range(1, k + 1))
    path.write_text(
        f"test data\n\n{len(types)} atoms\n{k} atom types\n\n0.0 {box} xlo xhi\n"
        f"0.0 {box} ylo yhi\n0.0 {box} zlo zhi\n\nMasses\n\n{masses}\n\n"
        f"Atoms # atomic\n\n{rows}\n")
    return path


def _diff(top, traj, *extra) -> list[dict]:
    return run_json(["diffusion", str(top), str(traj), *extra])["results"]


def _walk(n_frames: int, n: int, rng: np.random.Generator) -> np.ndarray:
    """Brownian paths (D = D_A2PS, frames 2 ps apart) starting near the middle of a
    1000 A box: after 600 ps (rms 11 A per coordinate) none comes near a face."""
    start = rng.uniform(450.0, 550.0, (1, n, 3))
    steps = rng.normal(0.0, np.sqrt(2 * D_A2PS * 2.0), (n_frames - 1, n, 3))
    return start + np.concatenate([np.zeros((1, n, 3)), np.cumsum(steps, axis=0)])


def _truth(n: int) -> float:
    """D after removing the centre-of-mass drift of n independent equal particles:
    D (1 - 1/n) (DEVELOPERS.md, Unwrapping)."""
    return D_REPORTED * (1 - 1 / n)


@pytest.fixture(scope="module")
def brownian(tmp_path_factory):
    """40 Brownian particles, 300 frames 2 ps apart, wrapped in a 25 A box (DCD)."""
    folder = tmp_path_factory.mktemp("brownian")
    x = brownian_positions(300, 40, 2.0, D_A2PS, BOX, np.random.default_rng(41))
    return _write(folder, x, 2.0)


def test_unwrap_none(tmp_path, brownian):
    # Continuous coordinates (a box far larger than the paths, nothing wraps): --unwrap
    # none uses them as they are, which gives the displacement-unwrapped D exactly.
    x = _walk(300, 40, np.random.default_rng(46))
    assert np.all((x > 1.0) & (x < 999.0))  # the walk never met a face
    top, traj = _write(tmp_path, x, 2.0, box=1000.0)
    none = run_json(["diffusion", str(top), str(traj), "--unwrap", "none"])
    disp = run_json(["diffusion", str(top), str(traj), "--unwrap", "displacement"])
    assert none["settings"]["unwrap_used"] == ["none"]
    # (to float32 storage of ~500 A coordinates, summed in a different order: ~1e-7)
    assert none["results"][0]["value"] == pytest.approx(disp["results"][0]["value"],
                                                        rel=1e-6)
    # on wrapped frames the same option keeps the jumps: the MSD is confined by the box,
    # never linear, and the run is refused rather than given a wrong D
    top, traj = brownian
    res = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(traj), "--unwrap",
                                    "none"])
    assert res.exit_code == 2 and "does not become linear" in res.stderr, res.output


def test_unwrap_images_from_a_dump_with_image_flags(tmp_path):
    # The same walk written as a LAMMPS dump with wrapped x y z and image flags: --unwrap
    # images and --unwrap displacement give the same D (steps << L/2, so both recover the
    # same path; the dump's 6 decimals of rounding move D by ~1e-7 relative).
    x = brownian_positions(200, 30, 2.0, D_A2PS, BOX, np.random.default_rng(42))
    d = np.diff(x, axis=0)
    unwrapped = np.cumsum(np.r_[x[:1], d - BOX * np.rint(d / BOX)], axis=0)
    images = np.floor(unwrapped / BOX).astype(int)
    wrapped = unwrapped - images * BOX
    dump = tmp_path / "run.lammpstrj"
    lines = []
    for k in range(x.shape[0]):
        lines += ["ITEM: TIMESTEP", str(k * 1000), "ITEM: NUMBER OF ATOMS", "30",
                  "ITEM: BOX BOUNDS pp pp pp", *[f"0.0 {BOX}"] * 3,
                  "ITEM: ATOMS id type x y z ix iy iz"]
        lines += [f"{i + 1} 1 {a:.6f} {b:.6f} {c:.6f} {p} {q} {r}"
                  for i, ((a, b, c), (p, q, r)) in enumerate(zip(wrapped[k], images[k],
                                                                strict=True))]
    dump.write_text("\n".join(lines) + "\n")
    data = _atomic_data(tmp_path / "run.data", [1] * 30)
    common = ["--units", "real", "--timestep", "2"]  # 1000 steps of 2 fs = 2 ps
    img = run_json(["diffusion", str(data), str(dump), "--unwrap", "images", *common])
    disp = run_json(["diffusion", str(data), str(dump), "--unwrap", "displacement",
                     *common])
    assert img["settings"]["unwrap_used"][0].startswith("image")
    assert disp["settings"]["unwrap_used"][0].startswith("displacement")
    a, b = img["results"][0], disp["results"][0]
    assert a["value"] == pytest.approx(b["value"], rel=1e-5)
    assert abs(a["value"] - _truth(30)) < 4 * a["stderr"]


def test_scaled_dump_coordinates(tmp_path):
    # A dump with scaled coordinates xs ys zs (fractions of the box) reads as the same
    # Cartesian positions as the dump with x y z (to the 6-7 printed digits: 25 A x 5e-7).
    x = brownian_positions(50, 10, 2.0, D_A2PS, BOX, np.random.default_rng(47))
    data = _atomic_data(tmp_path / "run.data", [1] * 10)
    for name, cols, values in (("plain.lammpstrj", "x y z", x),
                               ("scaled.lammpstrj", "xs ys zs", x / BOX)):
        lines = []
        for k in range(x.shape[0]):
            lines += ["ITEM: TIMESTEP", str(k * 1000), "ITEM: NUMBER OF ATOMS", "10",
                      "ITEM: BOX BOUNDS pp pp pp", *[f"0.0 {BOX}"] * 3,
                      f"ITEM: ATOMS id type {cols}"]
            lines += [f"{i + 1} 1 {a:.7f} {b:.7f} {c:.7f}"
                      for i, (a, b, c) in enumerate(values[k])]
        (tmp_path / name).write_text("\n".join(lines) + "\n")
    kw = {"units": "real", "timestep": 2.0}
    plain = load_trajectory(data, tmp_path / "plain.lammpstrj", **kw)[0]
    scaled = load_trajectory(data, tmp_path / "scaled.lammpstrj", **kw)[0]
    np.testing.assert_allclose(scaled.positions, plain.positions, rtol=0,
                               atol=25e-10 * 5e-7 + 1e-16)
    np.testing.assert_allclose(plain.positions[0], x[0] * 1e-10, rtol=0, atol=1e-16 + 1e-16)


def test_keep_drift(tmp_path):
    # A common velocity v adds v^2 t^2 to every MSD: --keep-drift leaves it in, the
    # default removes it (the truth is then D (1 - 1/N)).
    x = _walk(300, 40, np.random.default_rng(43))
    v = np.array([0.03, 0.0, 0.0])  # Angstrom / ps: v^2 t^2 = 9 A^2 at 100 ps
    x = x + v * (2.0 * np.arange(300))[:, None, None]
    top, traj = _write(tmp_path, x, 2.0, box=1000.0)
    removed = run_json(["diffusion", str(top), str(traj)])
    kept = run_json(["diffusion", str(top), str(traj), "--keep-drift"])
    r, k = removed["results"][0], kept["results"][0]
    assert r["diagnostics"]["drift_removed"] is True
    assert k["diagnostics"]["drift_removed"] is False
    assert kept["settings"]["remove_drift"] is False
    assert abs(r["value"] - _truth(40)) < 4 * r["stderr"]
    # kept: exactly the library's fit without drift removal, and larger (v^2 t^2 raises
    # the slope; measured +3.2% here, 2.4 stderr; a faster drift makes the MSD non-linear
    # and the run is refused instead, so the shift is checked at 1 stderr)
    series = load_trajectory(top, traj)[0]
    ref = analyse_diffusion(series, remove_drift=False).msd[0]
    assert k["value"] == pytest.approx(ref.value, rel=1e-12)
    assert k["value"] - r["value"] > r["stderr"], (k["value"], r["value"], r["stderr"])


def test_scratch_folder_is_used_for_the_private_links(tmp_path, monkeypatch):
    # XTC readers write an offsets cache beside the file they open, so the reader opens a
    # link in a private folder made inside --scratch (DEVELOPERS.md, "Reading never writes
    # beside an input"), removed afterwards
    x = brownian_positions(100, 20, 2.0, D_A2PS, BOX, np.random.default_rng(44))
    inputs = tmp_path / "in"
    inputs.mkdir()
    top, traj = _write(inputs, x, 2.0, name="traj.xtc")
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    made = []
    real_mkdtemp = tempfile.mkdtemp

    def spy(*args, **kwargs):
        path = real_mkdtemp(*args, **kwargs)
        made.append(Path(path))
        return path

    monkeypatch.setattr(tempfile, "mkdtemp", spy)
    before = sorted(p.name for p in inputs.iterdir())
    (rec,) = _diff(top, traj, "--scratch", str(scratch))
    assert any(p.parent == scratch for p in made), made
    assert list(scratch.iterdir()) == []
    assert sorted(p.name for p in inputs.iterdir()) == before
    assert abs(rec["value"] - _truth(20)) < 4 * rec["stderr"]


def test_group_by_type(tmp_path, brownian):
    _, traj = brownian
    data = _atomic_data(tmp_path / "types.data", [1] * 25 + [2] * 15)
    recs = _diff(data, traj, "--group-by", "type", "--units", "real", "--timestep", "2")
    assert [r["diagnostics"]["n_particles"] for r in recs] == [25, 15]
    assert recs[0]["group"] != recs[1]["group"]
    series = load_trajectory(data, traj, group_by="type", units="real", timestep=2.0)[0]
    for r, e in zip(recs, analyse_diffusion(series).msd, strict=True):
        assert r["group"] == e.group
        assert r["value"] == pytest.approx(e.value, rel=1e-12)


def test_group_by_molecule_uses_the_bonds(tmp_path):
    # 20 rigid dimers (atoms 2i and 2i+1 bonded, 1 A apart, moving together): --group-by
    # molecule diffuses 20 molecule centres whose D is the atoms' D.
    centres = _walk(300, 20, np.random.default_rng(45))
    x = np.repeat(centres, 2, axis=1)
    x[:, 1::2, 0] += 1.0
    top, traj = _write(tmp_path, x, 2.0, box=1000.0,
                       bonds=[(2 * i, 2 * i + 1) for i in range(20)])
    (mol,) = _diff(top, traj, "--group-by", "molecule")
    (atoms,) = _diff(top, traj)
    assert mol["diagnostics"]["n_particles"] == 20
    assert mol["diagnostics"]["atoms_per_particle"] in (2, 2.0, [2])
    assert atoms["diagnostics"]["n_particles"] == 40
    assert abs(mol["value"] - _truth(20)) < 4 * mol["stderr"]
    # the same motion counted per atom gives the same D to float32 rounding of positions
    assert mol["value"] == pytest.approx(atoms["value"], rel=1e-4)


def test_diffusion_skip(brownian):
    top, traj = brownian
    (rec,) = _diff(top, traj, "--skip", "100")
    (full,) = _diff(top, traj)
    assert rec["diagnostics"]["frames"] == [full["diagnostics"]["frames"][0] - 50]  # 2 ps
    series = load_trajectory(top, traj, skip=100e-12)[0]
    assert rec["value"] == pytest.approx(analyse_diffusion(series).msd[0].value, rel=1e-12)
