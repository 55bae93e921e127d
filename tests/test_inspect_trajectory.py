"""``transport inspect`` on trajectories, against the files' own headers and MDAnalysis.

References: the dump's first-frame header read with plain Python; MDAnalysis's own
readers (``MDAnalysisTests`` files) for frames, time step and box.
"""

from __future__ import annotations

import gzip
import json
import shutil
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from transport.cli import main

mda = pytest.importorskip("MDAnalysis")
datafiles = pytest.importorskip("MDAnalysisTests.datafiles")

DATA = Path(__file__).parent / "data"
ARGON = DATA / "dump_only" / "argon.lammpstrj.gz"


def _inspect(args, tmp_path: Path) -> dict:
    out = tmp_path / "i.json"
    res = CliRunner().invoke(main, ["inspect", *map(str, args), "--json", str(out)])
    assert res.exit_code == 0, res.output
    return json.loads(out.read_text())


def test_dump_with_its_log_and_an_xtc_at_once(tmp_path):
    d = tmp_path / "run"
    d.mkdir()
    (d / ARGON.name).symlink_to(ARGON)
    shutil.copy(ARGON.parent / "log.lammps", d / "log.lammps")
    doc = _inspect([d / ARGON.name, datafiles.XTC], tmp_path)
    dump, xtc = doc["files"]
    # the dump's own header: atoms, box bounds (Angstrom, units real), columns
    with gzip.open(ARGON, "rt") as fh:
        head = [next(fh) for _ in range(9)]
    lo, hi = (float(v) for v in head[5].split())
    assert dump["kind"] == "trajectory" and dump["format"] == "LAMMPS dump"
    assert dump["atoms"] == int(head[3]) == 256
    assert dump["frames"] == 201
    # 50 steps between dumps x `timestep 4` fs from the log = 0.2 ps
    assert dump["frame_interval"] == pytest.approx(0.2, rel=1e-12)
    assert "log's timestep" in dump["time_from"]
    # nm; MDAnalysis keeps the box in float32: 1e-7 relative
    assert dump["box"] == pytest.approx([(hi - lo) / 10] * 3, rel=2e-7)
    assert dump["box_shape"] == "orthorhombic" and dump["box_changes"] is False
    assert dump["coordinates"] == "wrapped, with image flags"  # columns ... x y z ix iy iz
    assert dump["velocities"] is True
    assert dump["types"] == {"1": 256}
    assert "type 1 39.948" in dump["masses"]  # `mass 1 39.948` in the log
    # the XTC against MDAnalysis's own reader of it
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = mda.Universe(datafiles.XTC)
        dims0 = u.trajectory[0].dimensions.copy()
        dims1 = u.trajectory[-1].dimensions.copy()
        n, dt = len(u.trajectory), u.trajectory.dt
    assert xtc["frames"] == n and xtc["atoms"] == u.atoms.n_atoms
    assert xtc["frame_interval"] == pytest.approx(dt, rel=1e-6)  # ps (XTC stores float32)
    assert xtc["box"] == pytest.approx(dims0[:3] / 10, rel=1e-6)  # nm
    assert xtc["box_changes"] == (not np.allclose(dims0, dims1, rtol=1e-6))
    assert xtc["box_shape"] == ("orthorhombic" if np.allclose(dims0[3:], 90) else "triclinic")
    assert "needs a topology first" in xtc["diffusion"]


def test_dump_without_settings_says_what_is_missing(tmp_path):
    (tmp_path / ARGON.name).symlink_to(ARGON)
    doc = _inspect([tmp_path / ARGON.name], tmp_path)
    rec = doc["files"][0]
    assert rec["frame_interval"] is None
    assert "--timestep" in rec["time_from"]
    assert "units not known" in rec["length_unit"]
