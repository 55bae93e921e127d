"""Trajectory reading for self-diffusion, against MDAnalysis and files with known content.

References used below:
* MDAnalysis's own MSD class, ``MDAnalysis.analysis.msd.EinsteinMSD`` with ``fft=False``
  (direct windowed average over all origins), on files shipped with ``MDAnalysisTests``.
* MDAnalysis's own unwrapping by LAMMPS image flags (``unwrap_images=True``, x + n L).
* Brownian motion with known D written to DCD files (MSD = 6 D t).
"""

from __future__ import annotations

import gzip
import json
import os
import signal
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from transport.cli import main
from transport.diffusion import analyse_diffusion, species_msd
from transport.errors import InputError
from transport.io import _collect, _dcd, _frames, grouping, unwrapping
from transport.io.trajectory import load_trajectory
from transport.synthetic import brownian_positions

mda = pytest.importorskip("MDAnalysis")
datafiles = pytest.importorskip("MDAnalysisTests.datafiles")

A2_PER_M2 = 1e20  # Angstrom^2 per m^2


def _quiet_mda():
    return warnings.catch_warnings()


def _write_dcd(folder: Path, x: np.ndarray, box, dt_ps: float, *,
               resnames=None, name: str = "traj.dcd", topology: str = "top.pdb",
               bonds=None) -> tuple[Path, Path]:
    """Write a PDB topology and a DCD trajectory (Angstrom) with MDAnalysis; `box` is a
    cubic box length, constant or one per frame."""
    n_frames, n, _ = x.shape
    resnames = list(resnames) if resnames is not None else ["LIQ"] * n
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe.empty(n, n_residues=n, atom_resindex=np.arange(n), trajectory=True)
        u.add_TopologyAttr("names", ["C"] * n)
        u.add_TopologyAttr("types", [r[0] for r in resnames])
        u.add_TopologyAttr("resnames", resnames)
        u.add_TopologyAttr("resids", np.arange(1, n + 1))
        u.add_TopologyAttr("masses", np.full(n, 12.0))
        if bonds is not None:
            u.add_TopologyAttr("bonds", bonds)
        boxes = np.broadcast_to(np.asarray(box, dtype=np.float64), (n_frames,))
        dims = [boxes[0]] * 3 + [90.0, 90.0, 90.0]
        u.dimensions = dims
        u.atoms.positions = x[0]
        top = folder / topology
        u.atoms.write(str(top))
        traj = folder / name
        with mda.Writer(str(traj), n, dt=dt_ps) as w:
            for k in range(n_frames):
                u.atoms.positions = x[k]
                u.dimensions = [boxes[k]] * 3 + [90.0, 90.0, 90.0]
                w.write(u.atoms)
    return top, traj


def _write_xdr(folder: Path, x: np.ndarray, box: float, dt_ps: float, *,
               name: str = "traj.xtc", topology: str = "top.pdb") -> tuple[Path, Path]:
    """Write a PDB topology and an XTC or TRR trajectory (by suffix) with MDAnalysis.

    The frames go through an in-memory reader with the frame interval set, so the XDR file
    stores increasing times (its writer takes each frame's time from the Universe).
    """
    from MDAnalysis.coordinates.memory import MemoryReader

    n_frames, n, _ = x.shape
    dims = np.array([box, box, box, 90.0, 90.0, 90.0])
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe.empty(n, n_residues=n, atom_resindex=np.arange(n), trajectory=True)
        u.add_TopologyAttr("names", ["C"] * n)
        u.add_TopologyAttr("types", ["C"] * n)
        u.add_TopologyAttr("resnames", ["LIQ"] * n)
        u.add_TopologyAttr("resids", np.arange(1, n + 1))
        u.add_TopologyAttr("masses", np.full(n, 12.0))
        u.load_new(np.ascontiguousarray(x, dtype=np.float32), format=MemoryReader, dt=dt_ps,
                   dimensions=np.tile(dims, (n_frames, 1)))
        top = folder / topology
        u.atoms.write(str(top))
        traj = folder / name
        with mda.Writer(str(traj), n) as w:
            for _ in u.trajectory:
                w.write(u.atoms)
    return top, traj


def _snapshot(folder: Path) -> dict[str, tuple[bytes, int]]:
    """Every file in `folder` (hidden ones included): its bytes and modification time."""
    return {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in folder.iterdir()}


def _write_dump(path: Path, x: np.ndarray, box: float, steps: np.ndarray, columns: str,
                images: np.ndarray | None = None, v: np.ndarray | None = None) -> Path:
    """A LAMMPS ``dump custom`` text file (gzip if the name ends in .gz)."""
    n_frames, n, _ = x.shape
    lines = []
    for k in range(n_frames):
        lines += ["ITEM: TIMESTEP", str(int(steps[k])), "ITEM: NUMBER OF ATOMS", str(n),
                  "ITEM: BOX BOUNDS pp pp pp"] + [f"0.0 {box:.10g}"] * 3
        lines.append(f"ITEM: ATOMS {columns}")
        table = np.column_stack([np.arange(1, n + 1), np.ones(n), x[k]]
                                + ([images[k]] if images is not None else [])
                                + ([v[k]] if v is not None else []))
        fmt = ["%d", "%d", "%.6f", "%.6f", "%.6f"] + (["%d"] * 3 if images is not None
                                                      else []) + (
            ["%.6f"] * 3 if v is not None else [])
        lines += [" ".join(f % val for f, val in zip(fmt, row, strict=True)) for row in table]
    text = "\n".join(lines) + "\n"
    if path.suffix == ".gz":
        with gzip.open(path, "wt") as fh:
            fh.write(text)
    else:
        path.write_text(text)
    return path


def _write_atomic_data(path: Path, n: int, box: float) -> Path:
    """A LAMMPS data file, atom style atomic (``id type x y z``)."""
    rows = "\n".join(f"{i + 1} 1 0.0 0.0 0.0" for i in range(n))
    path.write_text(
        f"test data\n\n{n} atoms\n1 atom types\n\n0.0 {box} xlo xhi\n0.0 {box} ylo yhi\n"
        f"0.0 {box} zlo zhi\n\nMasses\n\n1 1.0\n\nAtoms # atomic\n\n{rows}\n")
    return path


# ---------------------------------------------------------------------------------------
# against MDAnalysis
# ---------------------------------------------------------------------------------------


def test_msd_matches_mdanalysis_einstein_msd_on_real_trajectory():
    # adenylate kinase test trajectory (PSF + DCD, 3341 atoms x 98 frames, no box):
    # raw coordinates (unwrap none, no drift removal) vs EinsteinMSD(fft=False).
    from MDAnalysis.analysis.msd import EinsteinMSD

    s = load_trajectory(datafiles.PSF, datafiles.DCD, unwrap="none")[0]
    assert s.box is None and s.unwrap == "none" and s.n_frames == 98
    ours = species_msd(s, np.arange(s.n_particles), remove_drift=False) * A2_PER_M2
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe(datafiles.PSF, datafiles.DCD)
        ref = EinsteinMSD(u, select="all", msd_type="xyz", fft=False).run().results.timeseries
    # both read the same float32 coordinates; ours stores them in metres as float32 (one
    # more rounding, 6e-8 relative of coordinates ~30 A against displacements ~1 A)
    np.testing.assert_allclose(ours[1:], ref[1:], rtol=1e-5)
    assert ours[0] == 0.0


def test_image_flags_match_mdanalysis_unwrapping():
    # LAMMPS dump with image flags (MDAnalysisTests image_vf): our image-flag unwrapping
    # against MDAnalysis's unwrap_images=True, then EinsteinMSD(fft=False) on both.
    from MDAnalysis.analysis.msd import EinsteinMSD

    s = load_trajectory(datafiles.LAMMPS_image_vf, datafiles.LAMMPSDUMP_image_vf,
                        units="real", timestep=1.0)[0]
    assert s.unwrap == "image flags"
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe(datafiles.LAMMPS_image_vf, datafiles.LAMMPSDUMP_image_vf,
                         format="LAMMPSDUMP", unwrap_images=True)
        ref_pos = np.array([ts.positions.copy() for ts in u.trajectory])
        ref = EinsteinMSD(u, select="all", msd_type="xyz", fft=False).run().results.timeseries
    np.testing.assert_allclose(s.positions * 1e10, ref_pos, rtol=0, atol=2e-5)
    ours = species_msd(s, np.arange(s.n_particles), remove_drift=False) * A2_PER_M2
    np.testing.assert_allclose(ours[1:], ref[1:], rtol=1e-5)
    # real units: steps 0, 1000, ... times 1 fs
    assert s.dt == pytest.approx(1000 * 1e-15)
    assert s.velocities is not None  # the dump has vx vy vz


def test_group_by_molecule_uses_bonds():
    # the image_vf data file has one bond: atoms 1-2 form one molecule, the other five are
    # single atoms; centres of mass are mass weighted (all masses 1 here)
    s = load_trajectory(datafiles.LAMMPS_image_vf, datafiles.LAMMPSDUMP_image_vf,
                        units="real", timestep=1.0, group_by="molecule")[0]
    assert s.n_particles == 6
    assert sorted(s.atoms_per_particle.tolist()) == [1, 1, 1, 1, 1, 2]
    a = load_trajectory(datafiles.LAMMPS_image_vf, datafiles.LAMMPSDUMP_image_vf,
                        units="real", timestep=1.0)[0]
    dimer = int(np.flatnonzero(s.atoms_per_particle == 2)[0])
    np.testing.assert_allclose(s.positions[:, dimer], a.positions[:, :2].mean(axis=1),
                               rtol=1e-6)
    t = load_trajectory(datafiles.LAMMPS_image_vf, datafiles.LAMMPSDUMP_image_vf,
                        units="real", timestep=1.0, group_by="type")[0]
    assert t.species_names == ("type 1", "type 2")


# ---------------------------------------------------------------------------------------
# files with known content
# ---------------------------------------------------------------------------------------

D_A2PS = 0.1  # Angstrom^2/ps = 1e-9 m^2/s


def test_dcd_brownian_units_species_and_truth(tmp_path):
    rng = np.random.default_rng(21)
    n = 60
    x = brownian_positions(500, n, 2.0, D_A2PS, 25.0, rng)
    names = ["OIL"] * 40 + ["ADD"] * 20
    top, traj = _write_dcd(tmp_path, x, 25.0, 2.0, resnames=names)
    s = load_trajectory(top, traj, group_by="residue")[0]
    assert s.dt == pytest.approx(2e-12, rel=1e-6)  # DCD stores the step in AKMA units
    np.testing.assert_allclose(s.box[0], 25e-10, rtol=1e-6)
    assert s.species_names == ("OIL", "ADD")
    # carbon's 12 Da; 1 Da = 1.66053906660e-27 kg (CODATA 2018, from memory)
    assert s.masses[0] == pytest.approx(12.0 * 1.66053906660e-27)
    assert s.positions.dtype == np.float32
    res = analyse_diffusion(s)
    for e in res.msd:
        # drift removal leaves D (1 - 1/N) for N independent Brownian particles
        truth = 1.0 * (1 - 1 / n)
        assert e.unit == "1e-9 m^2/s"
        assert abs(e.value - truth) < 4 * e.stderr, (e.group, e.value, e.stderr)
        assert e.diagnostics["box_lengths"] == pytest.approx([2.5] * 3, rel=1e-6)  # nm
    assert [e.group for e in res.msd] == ["OIL", "ADD"]


def _frame_by_frame(monkeypatch):
    """Make the reader take every frame from MDAnalysis's reader (no block reading)."""
    monkeypatch.setattr(_collect, "_bulk_dcd", lambda u, p: None)


def _spy_blocks(monkeypatch) -> list:
    """Record what the block-reader factory returns."""
    made: list = []
    real = _collect._bulk_dcd

    def spy(u, p):
        made.append(real(u, p))
        return made[-1]

    monkeypatch.setattr(_collect, "_bulk_dcd", spy)
    return made


def _assert_same_series(a, b):
    np.testing.assert_array_equal(a.positions, b.positions)
    np.testing.assert_array_equal(a.box, b.box)
    np.testing.assert_array_equal(a.drift, b.drift)
    assert (a.dt, a.t0, a.n_frames, a.unwrap) == (b.dt, b.t0, b.n_frames, b.unwrap)


def test_dcd_blocks_equal_mdanalysis_frame_by_frame_with_a_fluctuating_box(
        tmp_path, monkeypatch):
    # Reference: MDAnalysis's DCD reader, one Timestep per frame (positions, the unit cell
    # converted to box lengths, times). The box changes every frame, as at constant
    # pressure, so every frame's cell is converted by the block reader.
    rng = np.random.default_rng(24)
    n_frames = 230  # several blocks and a partial last one
    boxes = 20.0 * (1.0 + 0.01 * np.sin(np.arange(n_frames) / 7.0))
    x = brownian_positions(n_frames, 40, 1.0, D_A2PS, 20.0, rng, wrap=False)
    x -= boxes[:, None, None] * np.floor(x / boxes[:, None, None])
    top, traj = _write_dcd(tmp_path, x, boxes, 1.0)
    with monkeypatch.context() as m:
        made = _spy_blocks(m)
        blocks = load_trajectory(top, traj, timestep=0.5)[0]
        times = load_trajectory(top, traj)[0]  # times stored in the file
    assert len(made) == 2 and all(isinstance(f, _dcd._DCDFrames) for f in made)
    with monkeypatch.context() as m:
        _frame_by_frame(m)
        ref = load_trajectory(top, traj, timestep=0.5)[0]
        ref_times = load_trajectory(top, traj)[0]
    _assert_same_series(blocks, ref)
    _assert_same_series(times, ref_times)
    assert blocks.unwrap.startswith("displacement")
    np.testing.assert_allclose(blocks.box[:, 0], boxes * 1e-10, rtol=1e-6)  # float32 cell


def test_a_damaged_dcd_frame_is_named(tmp_path):
    # The frame layout of the CHARMM/LAMMPS DCD format (from memory): a unit-cell record
    # (4 + 48 + 4 bytes) and the x, y, z records (4 + 4N + 4 bytes each) per frame, after a
    # header. A zeroed record length in frame 40 is a damaged file, named as such.
    rng = np.random.default_rng(25)
    n_frames, n = 100, 20
    x = brownian_positions(n_frames, n, 2.0, D_A2PS, 25.0, rng)
    top, traj = _write_dcd(tmp_path, x, 25.0, 2.0)
    data = bytearray(traj.read_bytes())
    frame = 56 + 3 * (4 * n + 8)
    header = len(data) - n_frames * frame
    at = header + 40 * frame + 56 + (4 * n + 8)  # frame 40, the y record's length
    data[at:at + 4] = b"\0\0\0\0"
    bad = tmp_path / "bad.dcd"
    bad.write_bytes(bytes(data))
    with pytest.raises(InputError, match="DCD frame 40 is damaged") as err:
        load_trajectory(top, bad)
    assert str(bad) in str(err.value) and f"byte {header + 40 * frame}" in str(err.value)


def test_memory_limit_spills_to_scratch_file_with_same_result(tmp_path):
    rng = np.random.default_rng(22)
    x = brownian_positions(200, 30, 1.0, D_A2PS, 20.0, rng)
    top, traj = _write_dcd(tmp_path, x, 20.0, 1.0)
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    mem = load_trajectory(top, traj)[0]
    spilled = load_trajectory(top, traj, memory_limit=0, scratch_dir=scratch)[0]
    assert isinstance(spilled.positions.base, np.memmap) or isinstance(
        spilled.positions, np.memmap)
    assert list(scratch.iterdir()) == []  # the scratch file has no name left on disk
    np.testing.assert_array_equal(np.asarray(spilled.positions), mem.positions)
    assert any("scratch file" in w for w in spilled.warnings)


def test_continued_parts_equal_the_whole_run(tmp_path):
    rng = np.random.default_rng(23)
    x = brownian_positions(300, 25, 1.0, D_A2PS, 20.0, rng)
    top, whole = _write_dcd(tmp_path, x, 20.0, 1.0, name="whole.dcd")
    _, p1 = _write_dcd(tmp_path, x[:151], 20.0, 1.0, name="p1.dcd", topology="t1.pdb")
    # the second part repeats the boundary frame 150, as a restarted run writes it; its
    # time stamps restart at 0 in the file, so the frame interval is given explicitly
    _, p2 = _write_dcd(tmp_path, x[150:], 20.0, 1.0, name="p2.dcd", topology="t2.pdb")
    a = load_trajectory(top, whole, frame_interval=1.0)[0]
    b = load_trajectory(top, [p1, p2], continuation=True, frame_interval=1.0)[0]
    assert b.n_frames == 300
    assert any("repeated at the boundary" in w for w in b.warnings)
    np.testing.assert_allclose(b.positions, a.positions, rtol=0, atol=1e-15)
    reps = load_trajectory(top, [p1, p2], frame_interval=1.0)
    assert [r.n_frames for r in reps] == [151, 150]


@pytest.mark.parametrize("kind", ["images", "unwrapped", "wrapped"])
def test_lammps_dump_columns_give_the_same_positions(tmp_path, kind):
    # one Brownian trajectory written three ways: x y z ix iy iz, xu yu zu, and wrapped
    # x y z only; reduced units, frame times = step numbers x --timestep
    rng = np.random.default_rng(24)
    L, n = 8.0, 12
    u = brownian_positions(60, n, 0.25, 0.03, L, rng, wrap=False)
    n_img = np.floor(u / L)
    w = u - n_img * L
    steps = np.arange(60) * 50
    if kind == "images":
        path = _write_dump(tmp_path / "d.lammpstrj.gz", w, L, steps, "id type x y z ix iy iz",
                           images=n_img)
    elif kind == "unwrapped":
        path = _write_dump(tmp_path / "d.lammpstrj", u, L, steps, "id type xu yu zu")
    else:
        path = _write_dump(tmp_path / "d.lammpstrj", w, L, steps, "id type x y z")
    data = _write_atomic_data(tmp_path / "lj.data", n, L)
    s = load_trajectory(data, path, units="lj", timestep=0.005)[0]
    assert s.dt == pytest.approx(0.25)
    assert s.units.reduced
    expected = {"images": "image flags", "unwrapped": "unwrapped coordinates",
                "wrapped": "displacement"}[kind]
    assert s.unwrap.startswith(expected)
    ref = u - (n_img[0] * L if kind == "wrapped" else 0.0)
    # 6 decimals in the file
    np.testing.assert_allclose(s.positions, ref, atol=2e-6)


def test_lammps_dump_needs_units_and_time(tmp_path):
    rng = np.random.default_rng(25)
    u = brownian_positions(10, 4, 1.0, 0.01, 8.0, rng)
    path = _write_dump(tmp_path / "d.lammpstrj", u, 8.0, np.arange(10) * 10, "id type x y z")
    data = _write_atomic_data(tmp_path / "lj.data", 4, 8.0)
    # both missing settings are named in one message (issue 15)
    with pytest.raises(InputError, match="neither their units nor the time between steps"):
        load_trajectory(data, path)
    with pytest.raises(InputError, match="do not state the time between steps"):
        load_trajectory(data, path, units="lj")
    with pytest.raises(InputError, match="do not state their units"):
        load_trajectory(data, path, timestep=0.005)


@pytest.mark.parametrize("fmt", ["xtc", "trr"])
def test_xdr_input_folder_is_never_written(tmp_path, fmt):
    # MDAnalysis's XTC/TRR readers keep an index of frame offsets in hidden files beside the
    # trajectory (.<name>_offsets.npz and a .lock file; MDAnalysis docs, "Notes on
    # offsets"). Reading through transport must leave the input folder as it was: the same
    # file names and the same bytes, with and without such a cache already present.
    rng = np.random.default_rng(41)
    x = brownian_positions(200, 30, 2.0, D_A2PS, 25.0, rng)
    inp, scratch, ref = tmp_path / "input", tmp_path / "scratch", tmp_path / "ref"
    for d in (inp, scratch, ref):
        d.mkdir()
    top, traj = _write_xdr(inp, x, 25.0, 2.0, name=f"run.{fmt}")
    before = _snapshot(inp)
    assert sorted(before) == ["run." + fmt, "top.pdb"]
    s = load_trajectory(top, traj, scratch_dir=scratch, unwrap="none")[0]
    load_trajectory(top, [traj, traj], scratch_dir=scratch)  # replicas: the same file twice
    assert _snapshot(inp) == before
    assert list(scratch.iterdir()) == []  # the private links and their caches are gone
    # the coordinates are MDAnalysis's own reading of the file (a copy in another folder)
    (ref / traj.name).write_bytes(traj.read_bytes())
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe(str(top), str(ref / traj.name))
        pos = np.array([ts.positions.copy() for ts in u.trajectory])
    assert s.dt == pytest.approx(2e-12, rel=1e-6)
    np.testing.assert_allclose(s.positions * 1e10, pos, rtol=1e-6)  # float32 metres
    # a cache the user's own MDAnalysis session left beside the input is read, not changed
    with _quiet_mda():
        warnings.simplefilter("ignore")
        len(mda.Universe(str(top), str(traj)).trajectory)
    cached = _snapshot(inp)
    assert any(name.endswith("_offsets.npz") for name in cached)
    again = load_trajectory(top, traj, scratch_dir=scratch, unwrap="none")[0]
    assert _snapshot(inp) == cached
    np.testing.assert_array_equal(again.positions, s.positions)


def test_amber_netcdf_trajectory_reads_like_the_dcd(tmp_path):
    # AMBER NetCDF (MDAnalysis writes and reads it through scipy.io.netcdf_file when the
    # netCDF4 package is absent): the same frames written as DCD and as NetCDF give the
    # same continuous positions and frame interval (reference: the DCD, itself checked
    # against MDAnalysis frame by frame above).
    from MDAnalysis.coordinates.memory import MemoryReader

    rng = np.random.default_rng(43)
    n_frames, n = 120, 25
    x = brownian_positions(n_frames, n, 2.0, D_A2PS, 25.0, rng).astype(np.float32)
    top, dcd = _write_dcd(tmp_path, x, 25.0, 2.0)
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe(str(top))
        u.load_new(x, format=MemoryReader, dt=2.0,
                   dimensions=np.tile([25.0, 25.0, 25.0, 90.0, 90.0, 90.0], (n_frames, 1)))
        nc = tmp_path / "run.ncdf"
        with mda.Writer(str(nc), n) as w:
            for _ in u.trajectory:
                w.write(u.atoms)
    a = load_trajectory(top, dcd)[0]
    b = load_trajectory(top, nc)[0]
    assert b.n_frames == n_frames and b.dt == pytest.approx(a.dt, rel=1e-6)
    assert b.sources[0].format.endswith("NCDFReader")
    np.testing.assert_allclose(b.positions, a.positions, rtol=0, atol=1e-15)  # 1e-5 A


# pytest turns an object's failing __del__ into this warning; here it must not happen at all
@pytest.mark.filterwarnings("error::pytest.PytestUnraisableExceptionWarning")
def test_format_needing_a_missing_package_says_which(tmp_path, capfd, monkeypatch):
    # MDAnalysis reads H5MD through h5py, an optional dependency (the h5md extra). Without
    # it the error is one line naming the package, and the half-built reader MDAnalysis
    # leaves behind prints no traceback when it is freed. With h5py installed, its absence
    # is simulated through MDAnalysis's own flag (HAS_H5PY, set when its H5MD module is
    # imported), so the test runs either way.
    h5md = pytest.importorskip("MDAnalysis.coordinates.H5MD")
    monkeypatch.setattr(h5md, "HAS_H5PY", False)
    rng = np.random.default_rng(44)
    top, _ = _write_dcd(tmp_path, brownian_positions(20, 5, 2.0, D_A2PS, 25.0, rng), 25.0, 2.0)
    h5 = tmp_path / "run.h5md"
    h5.write_bytes(b"\x89HDF\r\n\x1a\n" + bytes(2000))
    r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(h5)])
    assert r.exit_code == 2, r.output
    lines = [ln for ln in r.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and "pip install h5py" in lines[0], r.output
    err = capfd.readouterr().err
    assert "Traceback" not in err and "Exception ignored" not in err, err


def _allow_fork(monkeypatch):
    """Let the forked XTC/TRR decoding take small test files."""
    monkeypatch.setattr(_frames, "_FORK_MIN_FRAMES", 10)
    monkeypatch.setattr(_frames, "_FORK_MIN_VALUES", 1)
    monkeypatch.delenv(_frames.NO_FORK_ENV, raising=False)


@pytest.fixture()
def small_fork_threshold(monkeypatch):
    _allow_fork(monkeypatch)


@pytest.mark.skipif(not hasattr(__import__("os"), "fork"), reason="needs fork")
@pytest.mark.parametrize("fmt", ["xtc", "trr"])
def test_forked_decoding_equals_one_process(tmp_path, monkeypatch, small_fork_threshold,
                                            fmt):
    # Reference: the same file read in one process (TRANSPORT_NO_FORK), i.e. MDAnalysis's
    # reader frame after frame. The child's frames must come back unchanged (positions,
    # times, boxes), also when the child fails and this process reads them itself.
    rng = np.random.default_rng(45)
    x = brownian_positions(150, 30, 2.0, D_A2PS, 25.0, rng)
    top, traj = _write_xdr(tmp_path, x, 25.0, 2.0, name=f"run.{fmt}")
    made = []
    real = _frames._ForkedFrames.__init__

    def spy(self, *a, **k):
        real(self, *a, **k)
        made.append(self)

    with monkeypatch.context() as m:
        m.setattr(_frames._ForkedFrames, "__init__", spy)
        forked = load_trajectory(top, traj)[0]
    assert len(made) == 1 and made[0].start == int(0.4 * 150)  # the child took the rest
    with monkeypatch.context() as m:
        m.setenv(_frames.NO_FORK_ENV, "1")
        ref = load_trajectory(top, traj)[0]
    _assert_same_series(forked, ref)
    assert forked.sources[0].sha256 == ref.sources[0].sha256

    def broken(self, *a, **k):  # runs in the child (fork copies the patched class)
        raise RuntimeError("decoding failed")

    with monkeypatch.context() as m:
        m.setattr(_frames._ForkedFrames, "_decode", broken)
        fallback = load_trajectory(top, traj)[0]
    _assert_same_series(fallback, ref)

    def crash(self, *a, **k):  # the compiled decoder dying on damaged data, in the child
        os.kill(os.getpid(), signal.SIGKILL)

    with monkeypatch.context() as m:
        m.setattr(_frames._ForkedFrames, "_decode", crash)
        with pytest.raises(InputError, match=r"decoding frames 60-149 ended on signal"):
            load_trajectory(top, traj)


@pytest.mark.parametrize("fmt", ["xtc", "trr", "lammpstrj"])
def test_a_partial_last_frame_is_reported(tmp_path, fmt):
    # An engine stopped while writing leaves part of a last frame. The file is built as the
    # complete file of one frame fewer plus the first 40 bytes of the next frame, so the
    # partial frame is exactly 40 bytes (independent of any format parsing here).
    rng = np.random.default_rng(46)
    x = brownian_positions(60, 20, 2.0, D_A2PS, 25.0, rng)
    if fmt == "lammpstrj":
        top = _write_atomic_data(tmp_path / "top.data", 20, 25.0)
        cols, steps = "id type x y z", np.arange(60) * 10
        short = _write_dump(tmp_path / "short.lammpstrj", x[:-1], 25.0, steps[:-1], cols)
        full = _write_dump(tmp_path / "full.lammpstrj", x, 25.0, steps, cols)
        kw = {"units": "real", "timestep": 1.0}
    else:
        top, short = _write_xdr(tmp_path, x[:-1], 25.0, 2.0, name=f"short.{fmt}")
        _, full = _write_xdr(tmp_path, x, 25.0, 2.0, name=f"full.{fmt}", topology="t2.pdb")
        kw = {}
    head = short.read_bytes()
    assert full.read_bytes()[:len(head)] == head  # the same frames, then one more
    cut = tmp_path / f"cut.{fmt}"
    cut.write_bytes(full.read_bytes()[:len(head) + 40])
    s = load_trajectory(top, cut, **kw)[0]
    ref = load_trajectory(top, short, **kw)[0]
    assert s.n_frames == 59
    np.testing.assert_array_equal(s.positions, ref.positions)
    note = [w for w in s.warnings if "partial" in w or "incomplete" in w]
    assert len(note) == 1, s.warnings
    if fmt != "lammpstrj":
        assert "ends 40 bytes into a frame after frame 58" in note[0]
    assert not [w for w in ref.warnings if "partial" in w or "incomplete" in w]


def test_damaged_frames_in_the_middle_are_input_errors(tmp_path):
    # A frame in the middle whose header gives a wrong atom count (the word after the magic
    # number, XTC 1995 / TRR 1993, big-endian; GROMACS xdrfile format, from memory and seen
    # in the files MDAnalysis writes): the XTC frame cannot be decoded, and MDAnalysis's TRR
    # frame index stops there, so the rest of the file would be ignored; and a dump frame
    # with missing atom lines. Each is an error naming the file and the frame, not a shorter
    # analysis. (Garbage inside compressed XTC data is not used: the compiled decoder may
    # write out of bounds on it, which no caller can guard against.)
    rng = np.random.default_rng(47)
    x = brownian_positions(100, 20, 2.0, D_A2PS, 25.0, rng)
    cases = {}
    for fmt, number in (("xtc", 1995), ("trr", 1993)):
        magic = number.to_bytes(4, "big")
        top, traj = _write_xdr(tmp_path, x, 25.0, 2.0, name=f"run.{fmt}")
        data = bytearray(traj.read_bytes())
        starts = [i for i in range(0, len(data) - 3, 4) if data[i:i + 4] == magic]
        assert len(starts) == 100 and starts[0] == 0
        data[starts[50] + 4:starts[50] + 8] = (7).to_bytes(4, "big")  # frame 50: 7 atoms
        bad = tmp_path / f"bad.{fmt}"
        bad.write_bytes(bytes(data))
        cases[fmt] = (top, bad, {})
    top = _write_atomic_data(tmp_path / "top.data", 20, 25.0)
    dump = _write_dump(tmp_path / "run.lammpstrj", x, 25.0, np.arange(100) * 10,
                       "id type x y z")
    frames = dump.read_text().split("ITEM: TIMESTEP\n")
    lines = frames[51].split("\n")
    frames[51] = "\n".join(lines[:9] + lines[14:])  # frame 50 loses 5 atom lines
    bad_dump = tmp_path / "bad.lammpstrj"
    bad_dump.write_text("ITEM: TIMESTEP\n".join(frames))
    cases["dump"] = (top, bad_dump, {"units": "real", "timestep": 1.0})
    expect = {"xtc": "frame 50 of 100 cannot be read",
              "trr": "~50 frames) follow frame 49",
              "dump": "frame 50 of"}
    for fmt, (top, bad, kw) in cases.items():
        with pytest.raises(InputError) as err:
            load_trajectory(top, bad, **kw)
        text = str(err.value)
        assert str(bad) in text and expect[fmt] in text, (fmt, text)
    # the command: one line, exit 2 (the XTC decoder's own message on stderr is held back)
    top, bad, _ = cases["xtc"]
    r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(bad)])
    assert r.exit_code == 2
    assert [ln for ln in r.output.splitlines() if ln.strip()] == [
        ln for ln in r.output.splitlines() if ln.startswith("transport: error:")]


def test_compiled_reader_messages_are_held_back_on_input_errors(capfd):
    # What a compiled decoder prints on file descriptor 2 (the XTC decoder prints "Cannot
    # allocate memory for decompressing coordinates." on a damaged frame) is replayed after
    # a successful read and dropped when the read ends in an input error (one line then).
    with _frames._c_stderr_held(True):
        os.write(2, b"decoder says hello\n")
    assert capfd.readouterr().err == "decoder says hello\n"
    with pytest.raises(InputError), _frames._c_stderr_held(True):
        os.write(2, b"Cannot allocate memory for decompressing coordinates.\n")
        raise InputError("frame 3 cannot be read")
    assert capfd.readouterr().err == ""
    with _frames._c_stderr_held(False):  # progress bar on: nothing is held
        os.write(2, b"shown at once\n")
    assert capfd.readouterr().err == "shown at once\n"


def test_trr_with_velocities_in_some_frames_only(tmp_path):
    # GROMACS writes velocities every nstvout steps, positions every nstxout: a TRR may have
    # velocities in some frames only. The VACF needs every frame: that is an input error,
    # and the command reads positions only with --vacf no and a given temperature.
    from MDAnalysis.coordinates.memory import MemoryReader

    rng = np.random.default_rng(48)
    n, n_frames = 12, 60
    x = brownian_positions(n_frames, n, 1.0, D_A2PS, 20.0, rng).astype(np.float32)
    v = rng.normal(size=(n_frames, n, 3)).astype(np.float32)
    dims = np.tile([20.0, 20.0, 20.0, 90.0, 90.0, 90.0], (30, 1))
    top = tmp_path / "top.pdb"
    traj = tmp_path / "mixed.trr"
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe.empty(n, n_residues=n, atom_resindex=np.arange(n), trajectory=True)
        for name, val in (("names", ["C"] * n), ("types", ["C"] * n),
                          ("resnames", ["LIQ"] * n), ("resids", np.arange(1, n + 1))):
            u.add_TopologyAttr(name, val)
        u.load_new(x[:1], format=MemoryReader, dimensions=dims[:1])
        u.atoms.write(str(top))
        with mda.Writer(str(traj), n) as w:
            u.load_new(x[:30], format=MemoryReader, velocities=v[:30], dt=1.0,
                       dimensions=dims)
            for _ in u.trajectory:
                w.write(u.atoms)
            u.load_new(x[30:], format=MemoryReader, dt=1.0, dimensions=dims)
            for _ in u.trajectory:
                w.write(u.atoms)
    with pytest.raises(InputError, match="frame 30 has no velocities"):
        load_trajectory(top, traj, frame_interval=1.0)
    s = load_trajectory(top, traj, frame_interval=1.0, velocities=False)[0]
    assert s.n_frames == n_frames and s.velocities is None
    r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(traj), "--frame-interval",
                                  "1", "--vacf", "no", "--temperature", "300"])
    assert r.exit_code == 0, r.output


@pytest.mark.parametrize("forked", [False, True], ids=["one-process", "forked"])
def test_trr_velocities_and_kinetic_temperature(tmp_path, monkeypatch, forked):
    # TRR with positions and velocities (written by MDAnalysis, Angstrom/ps in memory), read
    # in one process and with the later frames decoded by a forked child.
    # References: MDAnalysis's own reading of the file, and equipartition computed here
    # directly, T = sum m (v - v_com)^2 / (k_B (3N - 3)) averaged over frames (common
    # practice), with CODATA k_B and atomic mass constant from scipy.constants.
    from MDAnalysis.coordinates.memory import MemoryReader
    from scipy import constants

    rng = np.random.default_rng(43)
    n, n_frames, box = 30, 60, 20.0
    x = brownian_positions(n_frames, n, 0.05, 0.5, box, rng).astype(np.float32)
    v = rng.normal(0.0, 3.0, (n_frames, n, 3)).astype(np.float32)  # Angstrom/ps
    kinds = ["C"] * 10 + ["O"] * 20  # a PDB keeps no masses: they are guessed from these
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe.empty(n, n_residues=n, atom_resindex=np.arange(n), trajectory=True)
        for name, val in (("names", kinds), ("types", kinds), ("elements", kinds),
                          ("resnames", ["LIQ"] * n), ("resids", np.arange(1, n + 1))):
            u.add_TopologyAttr(name, val)
        u.load_new(x, format=MemoryReader, dt=0.05, velocities=v,
                   dimensions=np.tile([box, box, box, 90.0, 90.0, 90.0], (n_frames, 1)))
        u.atoms.write(str(tmp_path / "top.pdb"))
        with mda.Writer(str(tmp_path / "run.trr"), n) as w:
            for _ in u.trajectory:
                w.write(u.atoms)
        ref = mda.Universe(str(tmp_path / "top.pdb"), str(tmp_path / "run.trr"))
        v_ref = np.array([ts.velocities.copy() for ts in ref.trajectory])
        masses = np.asarray(ref.atoms.masses, dtype=np.float64)  # MDAnalysis's own masses
    assert sorted(set(np.round(masses))) == [12.0, 16.0]
    if forked:
        _allow_fork(monkeypatch)
    else:
        monkeypatch.setenv(_frames.NO_FORK_ENV, "1")
    s = load_trajectory(tmp_path / "top.pdb", tmp_path / "run.trr")[0]
    assert s.velocities is not None
    np.testing.assert_allclose(s.velocities / 100.0, v_ref, rtol=1e-6)  # 1 A/ps = 100 m/s
    m = masses * constants.atomic_mass
    vv = v_ref.astype(np.float64) * 100.0
    vcom = np.einsum("fnk,n->fk", vv, m) / m.sum()
    twoke = np.einsum("fnk,n->f", (vv - vcom[:, None, :]) ** 2, m)
    truth = float(np.mean(twoke) / (constants.k * (3 * n - 3)))
    assert s.temperature == pytest.approx(truth, rel=1e-5)  # float32 velocities
    assert 100.0 < s.temperature < 400.0  # sd 3 A/ps at 12-16 amu: ~130-170 K


# ---------------------------------------------------------------------------------------
# the command line
# ---------------------------------------------------------------------------------------


def test_cli_diffusion_on_xtc_leaves_the_input_folder_alone(tmp_path):
    # XTC stores coordinates to 0.001 nm: rounding of 0.003 A rms per coordinate adds a
    # constant ~5e-5 A^2 to the MSD, not to its slope, so the truth D (1 - 1/N) still holds.
    import hashlib

    rng = np.random.default_rng(36)
    x = brownian_positions(400, 40, 2.0, D_A2PS, 25.0, rng)
    inp, out = tmp_path / "input", tmp_path / "out"
    inp.mkdir()
    out.mkdir()
    top, traj = _write_xdr(inp, x, 25.0, 2.0)
    before = _snapshot(inp)
    r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(traj), "--json",
                                  str(out / "d.json")])
    assert r.exit_code == 0, r.output
    assert _snapshot(inp) == before
    doc = json.loads((out / "d.json").read_text())
    res = doc["results"][0]
    assert abs(res["value"] - 1.0 * (1 - 1 / 40)) < 4 * res["stderr"]
    (src,) = doc["inputs"]  # one source per trajectory file (the topology is named in it)
    assert src["path"] == str(traj) and src["format"] == "trajectory:XTCReader"
    assert src["sha256"] == hashlib.sha256(traj.read_bytes()).hexdigest()


def _files(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


def test_cli_diffusion_writes_json_and_plot(tmp_path):
    rng = np.random.default_rng(31)
    x = brownian_positions(400, 40, 2.0, D_A2PS, 25.0, rng)
    top, traj = _write_dcd(tmp_path, x, 25.0, 2.0, resnames=["OIL"] * 25 + ["ADD"] * 15)
    out = tmp_path / "d.json"
    fig = tmp_path / "d.png"
    r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(traj), "--group-by",
                                  "residue", "--json", str(out), "--plot", str(fig)])
    assert r.exit_code == 0, r.output
    assert "msd_wls" in r.output and "OIL" in r.output and "ADD" in r.output
    doc = json.loads(out.read_text())
    assert doc["command"] == "diffusion"
    assert [x["group"] for x in doc["results"]] == ["OIL", "ADD"]
    for res in doc["results"]:
        assert res["quantity"] == "self_diffusion" and res["unit"] == "1e-9 m^2/s"
        assert res["diagnostics"]["drift_removed"] is True
        assert res["diagnostics"]["n_particles"] in (25, 15)
        lo, hi = res["interval95"]
        assert lo < res["value"] < hi
    assert doc["settings"]["unwrap_used"][0].startswith("displacement")
    assert fig.stat().st_size > 10_000


def test_cli_fit_window_in_ps(tmp_path):
    rng = np.random.default_rng(32)
    x = brownian_positions(300, 30, 2.0, D_A2PS, 25.0, rng)
    top, traj = _write_dcd(tmp_path, x, 25.0, 2.0)
    out = tmp_path / "d.json"
    r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(traj), "--fit-window",
                                  "10:100", "--json", str(out)])
    assert r.exit_code == 0, r.output
    res = json.loads(out.read_text())["results"][0]
    # 300 frames 2 ps apart: 8 time blocks of 37 frames hold lags up to 18 frames (36 ps);
    # the window asked for is kept as the whole-run fit's, and the cut is said
    assert res["window"] == pytest.approx([10, 36], rel=1e-6)
    assert res["diagnostics"]["whole_run_window"] == pytest.approx([10, 100], rel=1e-6)
    assert any("fit window was cut" in w for w in res["warnings"])


def _bad_runs(tmp_path: Path) -> dict[str, list[str]]:
    rng = np.random.default_rng(33)
    x = brownian_positions(100, 20, 2.0, D_A2PS, 25.0, rng)
    top, traj = _write_dcd(tmp_path, x, 25.0, 2.0)
    other_top, _ = _write_dcd(tmp_path, x[:, :10], 25.0, 2.0, name="ten.dcd",
                              topology="ten.pdb")
    garbage = tmp_path / "garbage.pdb"
    garbage.write_bytes(b"\x00\x01 not a topology \xff" * 10)
    # frames far apart: rms step 25 A / 4 per coordinate
    far = brownian_positions(50, 20, 1.0, (25.0 / 4) ** 2 / 2, 25.0, rng)
    _, far_traj = _write_dcd(tmp_path, far, 25.0, 1.0, name="far.dcd", topology="far.pdb")
    damaged = tmp_path / "damaged.dcd"
    data = bytearray(traj.read_bytes())
    frame = 56 + 3 * (4 * 20 + 8)  # cell record and x, y, z records (DCD layout, from memory)
    at = len(data) - 50 * frame + 56  # frame 50's x record length
    data[at:at + 4] = b"\xff\xff\xff\xff"
    damaged.write_bytes(bytes(data))
    return {
        "missing topology": [str(tmp_path / "nope.pdb"), str(traj)],
        "missing trajectory": [str(top), str(tmp_path / "nope.dcd")],
        "unreadable topology": [str(garbage), str(traj)],
        "mismatched atom counts": [str(other_top), str(traj)],
        "frames too far apart": [str(top), str(far_traj)],
        "empty selection": [str(top), str(traj), "--select", "name XYZ"],
        "blank selection": [str(top), str(traj), "--select", "  "],
        "molecules without bonds": [str(top), str(traj), "--group-by", "molecule"],
        "damaged DCD frame": [str(top), str(damaged)],
    }


@pytest.mark.parametrize("case", ["missing topology", "missing trajectory",
                                  "unreadable topology", "mismatched atom counts",
                                  "frames too far apart", "empty selection", "blank selection",
                                  "molecules without bonds", "damaged DCD frame"])
def test_cli_bad_input_exit_2_one_line_nothing_written(tmp_path, case):
    args = _bad_runs(tmp_path)[case]
    before = _files(tmp_path)
    out, fig = tmp_path / "r.json", tmp_path / "r.png"
    r = CliRunner().invoke(main, ["-q", "diffusion", *args, "--json", str(out), "--plot",
                                  str(fig)])
    assert r.exit_code == 2, r.output
    lines = [ln for ln in r.output.splitlines() if ln.strip()]
    assert len(lines) == 1, r.output
    assert lines[0].startswith("transport: error:")
    assert "Traceback" not in r.output
    assert _files(tmp_path) == before  # nothing written
    expect = {"missing topology": "not found", "missing trajectory": "not found",
              "unreadable topology": "cannot read the topology",
              "mismatched atom counts": "atoms", "frames too far apart": "too far apart",
              "empty selection": "matches no atoms",
              "blank selection": "--select is empty",
              "molecules without bonds": "needs bonds",
              "damaged DCD frame": "DCD frame 50 is damaged"}[case]
    assert expect in lines[0]


def test_cli_bad_option_values(tmp_path):
    rng = np.random.default_rng(34)
    x = brownian_positions(50, 10, 2.0, D_A2PS, 25.0, rng)
    top, traj = _write_dcd(tmp_path, x, 25.0, 2.0)
    for extra in (["--fit-window", "a:b"], ["--fit-window", "5:1"], ["--units", "furlong"],
                  ["--plot", str(tmp_path / "x.gif")]):
        r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(traj), *extra])
        assert r.exit_code == 2, (extra, r.output)
        assert "Traceback" not in r.output


def test_triclinic_test_file_is_too_coarse_to_unwrap_but_readable_unwrapped():
    # MDAnalysisTests: 125 TIP3P waters in a triclinic box (PSF + DCD) whose cell changes
    # shape strongly between its 10 frames (angles 44-96 degrees): steps of a quarter of
    # the narrowest cell height cannot be unwrapped reliably, and the reader says so
    with pytest.raises(InputError, match="too far apart"):
        load_trajectory(datafiles.PSF_TRICLINIC, datafiles.DCD_TRICLINIC)
    s = load_trajectory(datafiles.PSF_TRICLINIC, datafiles.DCD_TRICLINIC, unwrap="none",
                        group_by="residue")[0]
    assert s.n_particles == 125 and s.species_names == ("TIP3",)
    assert s.atoms_per_particle.tolist() == [3] * 125


def test_cell_vectors_match_mdanalysis():
    # Reference: MDAnalysis.lib.mdamath.triclinic_vectors (float32) for random cells,
    # including the rhombic dodecahedron (60, 60, 90) and a rectangular box.
    from MDAnalysis.lib.mdamath import triclinic_vectors

    rng = np.random.default_rng(49)
    dims = np.column_stack([rng.uniform(20, 60, (20, 3)), rng.uniform(60, 120, (20, 3))])
    dims = np.vstack([dims, [50, 50, 50, 60, 60, 90], [30, 40, 50, 90, 90, 90]])
    ours = unwrapping._cell_vectors(dims)
    ref = np.array([triclinic_vectors(d.astype(np.float32)) for d in dims])
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-4)  # float32 reference


def _triclinic_run(rng, n_frames, n, cell_dims, steps_sd, scale=None):
    """Brownian particles in a triclinic cell: (wrapped coordinates, truth, dims per frame).

    The coordinates are wrapped into the cell through fractional coordinates; with `scale`
    (per frame) the cell is rescaled each frame and the particles with it (as a barostat
    does), the truth accumulating the physical displacements.
    """
    dims = np.tile(np.asarray(cell_dims, dtype=np.float64), (n_frames, 1))
    if scale is not None:
        dims[:, :3] *= scale[:, None]
    cells = unwrapping._cell_vectors(dims)
    inv = np.linalg.inv(cells)
    w = np.empty((n_frames, n, 3))
    true = np.empty_like(w)
    f = rng.uniform(0, 1, (n, 3))
    w[0] = true[0] = f @ cells[0]
    for k in range(1, n_frames):
        y = (w[k - 1] @ inv[k - 1]) @ cells[k] + rng.normal(0, steps_sd, (n, 3))
        true[k] = true[k - 1] + (y - w[k - 1])
        fr = y @ inv[k]
        w[k] = (fr - np.floor(fr)) @ cells[k]
    return w, true, dims


def _unwrap_cells_in_blocks(w, dims, block):
    """The reader's frame processor on float64 frames with triclinic cells, in blocks:
    (continuous positions, raw jumps counted)."""
    n_frames, n, _ = w.shape
    proc = unwrapping._FrameProcessor(
        mode="displacement", explicit=False, atom_masses=np.ones(n),
        particles=grouping._Particles(np.arange(n), None, np.zeros(n, np.intp), ("a",),
                                        np.ones(n), np.ones(n, np.intp)),
        velocities=False, path=None)
    cells = unwrapping._cell_vectors(dims)
    out = np.concatenate([proc.unwrap(w[a:a + block], dims[a:a + block, :3], None,
                                      cells[a:a + block]).copy()
                          for a in range(0, n_frames, block)])
    return out, proc.stats.raw_jumps


@pytest.mark.parametrize("rescaled", [False, True], ids=["fixed", "rescaled"])
def test_triclinic_image_flags(rescaled):
    # LAMMPS image flags in a triclinic cell: the unwrapped position is x + n H (rows of H
    # the cell vectors a, b, c; LAMMPS dump documentation, from memory). Brownian particles
    # are wrapped and their flags counted here; under a cell rescaled every frame the flags
    # change at the crossings and u(t+1) = u(t) + dx + dn H(t+1) follows the physical
    # trajectory (von Bülow et al. 2020), whereas x + n H(t) would not.
    rng = np.random.default_rng(52)
    n_frames, n = 200, 30
    dims = np.tile([30.0, 35.0, 40.0, 75.0, 80.0, 95.0], (n_frames, 1))
    if rescaled:
        dims[:, :3] *= (1.0 + 0.01 * np.sin(np.arange(n_frames) / 7.0))[:, None]
    cells = unwrapping._cell_vectors(dims)
    inv = np.linalg.inv(cells)
    w = np.empty((n_frames, n, 3))
    flags = np.zeros((n_frames, n, 3))
    true = np.empty_like(w)
    w[0] = true[0] = rng.uniform(0, 1, (n, 3)) @ cells[0]
    for k in range(1, n_frames):
        y = (w[k - 1] @ inv[k - 1]) @ cells[k] + rng.normal(0, 0.6, (n, 3))
        true[k] = true[k - 1] + (y - w[k - 1])
        crossed = np.floor(y @ inv[k])
        w[k] = y - crossed @ cells[k]
        flags[k] = flags[k - 1] + crossed
    assert np.any(flags != 0)
    proc = unwrapping._FrameProcessor(
        mode="images", explicit=False, atom_masses=np.ones(n),
        particles=grouping._Particles(np.arange(n), None, np.zeros(n, np.intp), ("a",),
                                        np.ones(n), np.ones(n, np.intp)),
        velocities=False, path=None)
    u = np.concatenate([proc.unwrap(w[a:a + 16], dims[a:a + 16, :3], flags[a:a + 16],
                                    cells[a:a + 16]).copy() for a in range(0, n_frames, 16)])
    np.testing.assert_allclose(u - u[0], true - true[0], rtol=0, atol=1e-9)
    if not rescaled:  # a fixed cell: exactly x + n H
        np.testing.assert_allclose(u, w + flags @ cells[0], rtol=0, atol=1e-9)


def test_triclinic_cell_unwrapped_like_mdanalysis_nojump(tmp_path):
    # Brownian motion wrapped into a rhombic dodecahedron (50 A, angles 60, 60, 90) and
    # written as XTC. References: the truth (float32 file rounding: 1e-3 A) and MDAnalysis's
    # own NoJump transformation on the same file; D = s^2 / (2 dt) within 4 sd.
    from MDAnalysis.transformations.nojump import NoJump

    rng = np.random.default_rng(50)
    n_frames, n, sd, dt = 400, 60, 0.5, 2.0
    w, true, dims = _triclinic_run(rng, n_frames, n, [50, 50, 50, 60, 60, 90], sd)
    from MDAnalysis.coordinates.memory import MemoryReader

    top, _ = _write_xdr(tmp_path, w[:2], 50.0, dt, name="seed.xtc")  # the topology
    traj = tmp_path / "tric.xtc"
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe(str(top))
        u.load_new(w.astype(np.float32), format=MemoryReader, dt=dt, dimensions=dims)
        with mda.Writer(str(traj), n) as wr:
            for _ in u.trajectory:
                wr.write(u.atoms)
        ref = mda.Universe(str(top), str(traj))
        ref.trajectory.add_transformations(NoJump())
        nojump = np.array([ts.positions.copy() for ts in ref.trajectory])
    s = load_trajectory(top, traj, unwrap="displacement")[0]
    assert s.unwrap.startswith("displacement")
    np.testing.assert_allclose(s.box_angles[0], [60, 60, 90], atol=1e-3)
    ours = np.asarray(s.positions, dtype=np.float64) * 1e10
    np.testing.assert_allclose(ours - ours[0], true - true[0], atol=2e-2)
    np.testing.assert_allclose(ours, nojump, atol=2e-2)
    e = analyse_diffusion(s, remove_drift=False).msd[0]
    d_true = sd**2 / (2 * dt) * 10  # A^2/ps -> 1e-9 m^2/s
    assert abs(e.value - d_true) < 4 * e.stderr, (e.value, e.stderr, d_true)
    assert e.diagnostics["box_angles"] == pytest.approx([60, 60, 90], abs=1e-3)
    # dodecahedron volume = a^3 / sqrt(2) (common geometry), in nm^3
    assert e.diagnostics["box_volume"] == pytest.approx(5.0**3 / np.sqrt(2), rel=1e-5)
    # the same frames in float64, in blocks of 7 and 43 frames: the truth to rounding
    for block in (7, 43):
        exact, jumps = _unwrap_cells_in_blocks(w, dims, block)
        np.testing.assert_allclose(exact - exact[0], true - true[0], rtol=0, atol=1e-9)
        assert jumps > 0  # the particles did cross the cell faces


def test_triclinic_cell_that_changes_size_follows_the_particles(tmp_path):
    # The cell (a triclinic one) is rescaled every frame by up to 1%, as a barostat would;
    # minimum-image steps in the box of the later frame (von Bülow et al. 2020) follow the
    # physical trajectory built alongside (float32 file rounding).
    from MDAnalysis.coordinates.memory import MemoryReader

    rng = np.random.default_rng(51)
    n_frames, n = 300, 40
    scale = 1.0 + 0.01 * np.sin(np.arange(n_frames) / 9.0)
    w, true, dims = _triclinic_run(rng, n_frames, n, [40, 45, 50, 80, 70, 100], 0.4, scale)
    top, _ = _write_xdr(tmp_path, w[:2], 40.0, 1.0, name="seed.xtc")
    traj = tmp_path / "npt.xtc"
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe(str(top))
        u.load_new(w.astype(np.float32), format=MemoryReader, dt=1.0, dimensions=dims)
        with mda.Writer(str(traj), n) as wr:
            for _ in u.trajectory:
                wr.write(u.atoms)
    s = load_trajectory(top, traj)[0]
    assert s.unwrap.startswith("displacement")
    ours = np.asarray(s.positions, dtype=np.float64) * 1e10
    err = np.abs((ours - ours[0]) - (true - true[0]))
    # XTC keeps 0.01 A: a particle that close to a face may be wrapped into the other
    # image than the one the run had, and the next rescaling then moves that image by the
    # change of a box vector (~0.06 A here) - the small residual of the scheme under a
    # changing box. Nearly all positions are exact to the file's rounding; none is off by
    # more than two such events.
    assert np.mean(err < 2e-2) > 0.99, np.mean(err < 2e-2)
    assert err.max() < 0.15, err.max()
    # the same frames in float64 (no rounding) are followed exactly
    exact, _ = _unwrap_cells_in_blocks(w, dims, 43)
    np.testing.assert_allclose(exact - exact[0], true - true[0], rtol=0, atol=1e-9)


def test_skip_drops_the_start_and_single_residue_is_refused(tmp_path):
    rng = np.random.default_rng(26)
    x = brownian_positions(100, 8, 1.0, 0.01, 8.0, rng)
    top, traj = _write_dcd(tmp_path, x, 8.0, 1.0)
    full = load_trajectory(top, traj)[0]
    part = load_trajectory(top, traj, skip=30e-12)[0]  # 30 ps
    assert part.n_frames == 70
    assert part.t0 == pytest.approx(full.t0 + 30e-12, rel=1e-6)
    np.testing.assert_array_equal(part.positions, full.positions[30:])
    # a LAMMPS atomic data file has a single residue: centre of mass of everything
    data = _write_atomic_data(tmp_path / "lj.data", 8, 8.0)
    dump = _write_dump(tmp_path / "d.lammpstrj", x, 8.0, np.arange(100), "id type x y z")
    with pytest.raises(InputError, match="one particle of all 8"):
        load_trajectory(data, dump, units="lj", timestep=1.0, group_by="residue")


def test_cli_replicas_and_continue(tmp_path):
    rng = np.random.default_rng(35)
    x = brownian_positions(400, 30, 2.0, D_A2PS, 25.0, rng)
    top, p1 = _write_dcd(tmp_path, x[:200], 25.0, 2.0, name="a.dcd")
    _, p2 = _write_dcd(tmp_path, x[200:], 25.0, 2.0, name="b.dcd", topology="b.pdb")
    for extra, n_frames in (([], [200, 200]), (["--continue", "--frame-interval", "2"],
                                               [400])):
        out = tmp_path / "r.json"
        r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(p1), str(p2),
                                      "--json", str(out), *extra])
        assert r.exit_code == 0, r.output
        res = json.loads(out.read_text())["results"][0]
        assert res["diagnostics"]["frames"] == n_frames
        assert res["diagnostics"]["n_particles"] == 30 * len(n_frames)
        # independent Brownian particles, drift removed: truth D (1 - 1/30) = 0.967
        assert abs(res["value"] - 0.967) < 4 * res["stderr"]


def test_h5md_round_trip_with_the_extra(tmp_path):
    # The `h5md` extra (h5py): MDAnalysis writes an H5MD file (positions in nm, time in
    # ps, the box), and the reader gives back the same positions (float32 storage: ~1e-6
    # relative) and a D within 4 stderr of the truth D (1 - 1/N).
    pytest.importorskip("h5py", reason="the h5md extra (h5py) is not installed: "
                        "pip install 'transport-coefficients[h5md]'")
    from MDAnalysis.coordinates.memory import MemoryReader

    rng = np.random.default_rng(45)
    n, n_frames, box = 30, 300, 25.0
    x = brownian_positions(n_frames, n, 2.0, D_A2PS, box, rng)
    with _quiet_mda():
        warnings.simplefilter("ignore")
        u = mda.Universe.empty(n, n_residues=n, atom_resindex=np.arange(n), trajectory=True)
        for attr, val in (("names", ["C"] * n), ("types", ["C"] * n),
                          ("resnames", ["LIQ"] * n), ("resids", np.arange(1, n + 1)),
                          ("masses", np.full(n, 12.0))):
            u.add_TopologyAttr(attr, val)
        u.load_new(np.ascontiguousarray(x, dtype=np.float32), format=MemoryReader, dt=2.0,
                   dimensions=np.tile([box] * 3 + [90.0] * 3, (n_frames, 1)))
        u.trajectory.units = {"time": "ps", "length": "Angstrom"}
        top = tmp_path / "top.pdb"
        u.atoms.write(str(top))
        h5 = tmp_path / "run.h5md"
        with mda.Writer(str(h5), n, positions=True, velocities=False, forces=False) as w:
            for _ in u.trajectory:
                w.write(u.atoms)
    s = load_trajectory(top, h5)[0]
    assert s.n_frames == n_frames and s.n_particles == n
    assert s.dt == pytest.approx(2e-12, rel=1e-6)
    np.testing.assert_allclose(s.box[0], box * 1e-10, rtol=1e-6)
    # the first frame as written (later frames are unwrapped, so they differ by boxes)
    np.testing.assert_allclose(s.positions[0], x[0] * 1e-10, rtol=0, atol=box * 1e-10 * 1e-6)
    out = tmp_path / "d.json"
    r = CliRunner().invoke(main, ["-q", "diffusion", str(top), str(h5), "--json", str(out)])
    assert r.exit_code == 0, r.output
    (rec,) = json.loads(out.read_text())["results"]
    assert abs(rec["value"] - 1.0 * (1 - 1 / n)) < 4 * rec["stderr"], rec["value"]
