"""Atoms from the first frame of a LAMMPS dump, for a trajectory given without a topology.

A LAMMPS ``dump custom`` file lists, in every frame, one row per atom with the columns the
run asked for. When it has ``id`` and ``type`` these rows describe the atoms well enough for
self-diffusion: this module reads the first frame (only that frame, decompressing no more of
the file than it needs) and builds an MDAnalysis universe with no trajectory
(``Universe.empty`` plus topology attributes [1]_): ids, types, and when present ``mol``
(molecule ids, also kept as ``molnums`` so that ``--group-by molecule`` works without bonds),
``mass``, ``element`` and ``q`` (charges). The atoms are put in order of id, the order
MDAnalysis's dump reader gives the coordinates in.

Masses, in the engine's mass unit (g/mol for ``real`` and ``metal``): the ``mass`` column;
else the standard atomic weight of the ``element`` column (MDAnalysis's table); else none.
Per-type masses given by the user (``--masses 1=12.011,2=1.008``, :func:`parse_masses`)
take precedence and are applied by :func:`transport.io.trajectory.load_trajectory`, which
refuses unknown masses when centres of mass need them.

References
----------
.. [1] MDAnalysis user guide, "Constructing, modifying, and adding to a Universe"
   (``Universe.empty`` and ``add_TopologyAttr``), MDAnalysis 2.x documentation.
"""

from __future__ import annotations

import io
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError

__all__ = ["dump_universe", "is_dump", "parse_masses"]

_FIX_COLUMNS = ("write the dump with 'dump ID all custom N FILE id type x y z' (add mol and "
                "mass when the analysis needs molecules), or give a topology before it")


def is_dump(path: Path) -> bool:
    """True if `path` (plain or compressed) starts like a LAMMPS dump."""
    from ._open import read_head

    try:
        head = read_head(path, 64)[0]
    except OSError:
        return False
    return head.lstrip().startswith(b"ITEM: TIMESTEP")


def parse_masses(text: str | Mapping[str, float] | None) -> dict[str, float]:
    """``"1=12.011,2=1.008"`` (type = mass) -> ``{"1": 12.011, "2": 1.008}``.

    Raises
    ------
    InputError
        An entry that is not TYPE=MASS with a positive finite mass.
    """
    if text is None:
        return {}
    if isinstance(text, Mapping):
        items = [(str(k), v) for k, v in text.items()]
    else:
        items = []
        for part in filter(None, (p.strip() for p in text.split(","))):
            key, eq, val = part.partition("=")
            if not eq or not key.strip():
                raise InputError(f"--masses entry {part!r} is not TYPE=MASS",
                                 expected="TYPE=MASS pairs separated by commas",
                                 fix="write e.g. --masses 1=12.011,2=1.008")
            items.append((key.strip(), val.strip()))
    out: dict[str, float] = {}
    for key, val in items:
        try:
            m = float(val)
        except (TypeError, ValueError):
            m = float("nan")
        if not (np.isfinite(m) and m > 0):
            raise InputError(f"--masses gives type {key} the mass {val!r}",
                             expected="a positive mass (engine mass unit, g/mol for real "
                                      "and metal)", fix="write e.g. --masses 1=12.011,2=1.008")
        out[key] = m
    return out


def _first_frame(path: Path) -> tuple[int, list[str], list[list[str]], int]:
    """(number of atoms, column names, rows as strings, line of the ATOMS header)."""
    from ._open import open_bytes

    with open_bytes(path) as opened:
        fh: Any = opened.stream
        if not hasattr(fh, "readline"):
            fh = io.BufferedReader(fh)
        n_atoms = None
        lineno = 0
        while True:
            raw = fh.readline()
            lineno += 1
            if not raw:
                raise InputError("LAMMPS dump ends before the atoms of its first frame",
                                 path=str(path), line=lineno,
                                 expected="ITEM: NUMBER OF ATOMS and ITEM: ATOMS sections",
                                 fix="check that the run wrote at least one whole frame")
            line = raw.decode("ascii", "replace").strip()
            if line.startswith("ITEM: NUMBER OF ATOMS"):
                nxt = fh.readline().decode("ascii", "replace").strip()
                lineno += 1
                try:
                    n_atoms = int(nxt)
                except ValueError:
                    raise InputError(f"number of atoms is {nxt!r}", path=str(path),
                                     line=lineno, expected="a whole number",
                                     fix="repair or regenerate the dump") from None
            elif line.startswith("ITEM: ATOMS"):
                cols = line.split()[2:]
                header_line = lineno
                break
        if n_atoms is None:
            raise InputError("LAMMPS dump has no 'ITEM: NUMBER OF ATOMS' before its atoms",
                             path=str(path), line=lineno, expected="a dump custom file",
                             fix="repair or regenerate the dump")
        rows = []
        for i in range(n_atoms):
            raw = fh.readline()
            if not raw:
                raise InputError(f"first frame ends after {i} of {n_atoms} atoms",
                                 path=str(path), line=header_line + i + 1,
                                 expected=f"{n_atoms} atom rows",
                                 fix="check that the run wrote at least one whole frame")
            rows.append(raw.decode("ascii", "replace").split())
    return n_atoms, cols, rows, header_line


def dump_universe(path: Path) -> tuple[Any, str]:
    """An MDAnalysis universe (no trajectory) of the atoms in the first frame of `path`.

    Parameters
    ----------
    path : Path
        A LAMMPS dump (``dump custom`` text, optionally compressed) with ``id`` and
        ``type`` columns.

    Returns
    -------
    universe, str
        The universe, atoms in order of id, and where the masses came from (``"mass
        column"``, ``"element column"`` or ``""`` when unknown; per-type masses given by
        the user are applied later, by the trajectory loader).

    Raises
    ------
    InputError
        No ``id`` or ``type`` column, a short first frame, repeated ids, non-numeric
        values.
    """
    import MDAnalysis as mda

    n, cols, rows, hline = _first_frame(path)
    missing = [c for c in ("id", "type") if c not in cols]
    if missing:
        raise InputError(
            f"LAMMPS dump has no {' and no '.join(repr(c) for c in missing)} column, so it "
            f"cannot describe its atoms (columns: {' '.join(cols)})", path=str(path),
            line=hline, expected="id and type columns", fix=_FIX_COLUMNS)
    bad = [i for i, r in enumerate(rows) if len(r) != len(cols)]
    if bad:
        i = bad[0]
        raise InputError(f"atom row has {len(rows[i])} values, the header names {len(cols)}",
                         path=str(path), line=hline + i + 1,
                         expected=f"{len(cols)} values: {' '.join(cols)}",
                         fix="repair or regenerate the dump")
    table = np.array(rows, dtype=object).reshape(n, len(cols)) if n else np.empty(
        (0, len(cols)), dtype=object)

    def column(name: str, kind: type) -> np.ndarray:
        j = cols.index(name)
        try:
            return np.array(table[:, j], dtype=str).astype(kind)
        except ValueError:
            for i, v in enumerate(table[:, j]):
                try:
                    kind(v)
                except ValueError:
                    raise InputError(f"column {name!r} holds {v!r}", path=str(path),
                                     line=hline + i + 1,
                                     expected=f"a {'whole ' if kind is int else ''}number",
                                     fix="repair or regenerate the dump") from None
            raise

    ids = column("id", int)
    order = np.argsort(ids, kind="stable")
    ids = ids[order]
    if ids.size > 1 and np.any(ids[1:] == ids[:-1]):
        dup = int(ids[1:][ids[1:] == ids[:-1]][0])
        raise InputError(f"atom id {dup} appears twice in the first frame", path=str(path),
                         line=hline, expected="unique atom ids",
                         fix="repair or regenerate the dump")
    types = np.array(table[order, cols.index("type")], dtype=str)
    if "mol" in cols:
        mol = column("mol", int)[order]
        resids, resindex = np.unique(mol, return_inverse=True)
    else:
        mol = None
        resids, resindex = np.array([1]), np.zeros(n, dtype=np.intp)
    u = mda.Universe.empty(n, n_residues=resids.size, atom_resindex=resindex.reshape(-1),
                           trajectory=False)
    u.add_TopologyAttr("ids", ids)
    u.add_TopologyAttr("types", types)
    u.add_TopologyAttr("names", types)
    u.add_TopologyAttr("resids", resids)
    if mol is not None:
        u.add_TopologyAttr("molnums", resids)  # a residue attribute: one per molecule
    if "q" in cols:
        u.add_TopologyAttr("charges", column("q", float)[order])
    elements = None
    if "element" in cols:
        elements = np.char.capitalize(np.array(table[order, cols.index("element")],
                                               dtype=str))
        u.add_TopologyAttr("elements", elements)
    source = ""
    m = np.zeros(n)
    if "mass" in cols:
        m, source = column("mass", float)[order], "mass column"
    elif elements is not None:
        from MDAnalysis.guesser.tables import masses as table_masses

        known = np.array([table_masses.get(e.upper(), 0.0) for e in elements], dtype=float)
        if np.all(known > 0):
            m, source = known, "element column"
    if source:
        u.add_TopologyAttr("masses", m)
    return u, source


def _type_key(t: str) -> tuple[int, int, str]:
    return (0, int(t), "") if re.fullmatch(r"\d+", t) else (1, 0, t)
