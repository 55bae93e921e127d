"""Particle grouping: which atoms form a particle, its species and its mass.

``group_by`` (:data:`GROUP_BY`) decides: each selected atom a particle of one species
(``atom``), atoms by type (``type``), centres of mass of residues (``residue``) or of bonded
molecules (MDAnalysis fragments, ``molecule``; without bonds, the molecule ids of a LAMMPS
dump's ``mol`` column). Residues and molecules are named by their
residue name when the topology has one, else by composition: a formula in Hill order when
every atom has an element (``C6H14``), else the types with counts (``t1x2-t2x4``); names
are unique per composition and depend only on the topology (:func:`_molecule_labels`).
A particle that groups atoms is reduced from
the atom coordinates by a sparse matrix of mass fractions (:func:`_weights_matrix`), block
by block, in :meth:`_Particles.reduce`.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from ..errors import InputError

GroupBy = Literal["atom", "type", "residue", "molecule"]
#: Accepted values of ``group_by``.
GROUP_BY: tuple[str, ...] = ("atom", "type", "residue", "molecule")


@dataclass
class _Particles:
    """How selected atoms form particles and species."""

    atom_index: np.ndarray  # indices (into all atoms) of the selected atoms
    weights: Any  # None (each selected atom is a particle) or sparse (P x n_sel) matrix
    species: np.ndarray
    species_names: tuple[str, ...]
    masses: np.ndarray  # per particle, engine mass unit
    atoms_per_particle: np.ndarray

    @property
    def n(self) -> int:
        return int(self.species.size)

    def is_identity(self, n_atoms: int) -> bool:
        """True if the particles are all atoms in order (positions need no copy)."""
        return (self.weights is None and self.atom_index.size == n_atoms
                and bool(np.all(self.atom_index == np.arange(n_atoms))))

    def reduce(self, a: np.ndarray) -> np.ndarray:
        """Particle values (B, P, 3) from atom values (B, n_atoms, 3)."""
        sel = a[:, self.atom_index]
        if self.weights is None:
            return sel
        b, n_sel, _ = sel.shape
        flat = sel.transpose(1, 0, 2).reshape(n_sel, b * 3)
        return np.asarray(self.weights @ flat).reshape(-1, b, 3).transpose(1, 0, 2)


def _weights_matrix(owner: np.ndarray, masses: np.ndarray, n_part: int):
    """Sparse (n_part x n_sel) matrix of mass fractions: particle COM = W @ atom positions."""
    from scipy import sparse

    tot = np.bincount(owner, weights=masses, minlength=n_part)
    counts = np.bincount(owner, minlength=n_part)
    w = np.where(tot[owner] > 0, masses / np.where(tot[owner] > 0, tot[owner], 1.0),
                 1.0 / counts[owner])
    mat = sparse.csr_matrix((w, (owner, np.arange(owner.size))), shape=(n_part, owner.size))
    return mat, tot, counts


def _species_codes(labels: Sequence[str]) -> tuple[np.ndarray, tuple[str, ...]]:
    names = tuple(dict.fromkeys(labels))
    index = {n: i for i, n in enumerate(names)}
    return np.array([index[s] for s in labels], dtype=np.intp), names


#: Residue names that name no molecule (placeholders written by tools that know none).
_GENERIC_RESNAMES = frozenset({"", "UNK", "SYSTEM"})
_ELEMENT = re.compile(r"^[A-Z][a-z]?$")
#: Longest composition name; longer ones become ``N-atom molecule``.
_LONGEST_NAME = 40


def _type_order(kind: str) -> tuple[int, int, str]:
    """Numeric types in numeric order (2 before 10), then named types alphabetically."""
    return (0, int(kind), "") if kind.isdigit() else (1, 0, kind)


def _types_name(kinds: Sequence[str], counts: Sequence[int]) -> str:
    """``t1x2-t2x4`` (numeric types get a ``t``; a count of one is not written)."""
    parts = []
    for k, c in sorted(zip(kinds, counts, strict=True), key=lambda kc: _type_order(kc[0])):
        label = f"t{k}" if k.isdigit() else k
        parts.append(label if c == 1 else f"{label}x{c}")
    return "-".join(parts)


def _hill_formula(elements: Sequence[str], counts: Sequence[int]) -> str:
    """Chemical formula in Hill order: C, then H, then the rest alphabetically (all
    alphabetically without carbon); a count of one is not written (Hill, J. Am. Chem. Soc.
    22, 478 (1900); common practice)."""
    n = dict(zip(elements, counts, strict=True))
    first = [e for e in ("C", "H") if e in n] if "C" in n else []
    rest = sorted(e for e in n if e not in first)
    return "".join(e if n[e] == 1 else f"{e}{n[e]}" for e in (*first, *rest))


def _element_symbols(sel: Any) -> np.ndarray | None:
    """Element symbols of the selected atoms (``Cl``-style), or None unless every atom has
    one."""
    try:
        raw = np.asarray(sel.elements).astype(str)
    except Exception:  # MDAnalysis NoDataError: the topology has no elements
        return None
    sym = np.char.capitalize(np.char.strip(raw))
    ok = np.vectorize(lambda e: bool(_ELEMENT.match(e)), otypes=[bool])(np.unique(sym))
    return sym if ok.all() else None


def _molecule_labels(owner: np.ndarray, n_mol: int, types: np.ndarray,
                     resnames: np.ndarray | None, elements: np.ndarray | None) -> list[str]:
    """A species label for each of `n_mol` molecules; `owner` is each atom's molecule index.

    The residue name when all the molecule's atoms share one that names something
    (not ``UNK`` and other placeholders); otherwise a name from the composition: the
    formula when every atom has an element (``C6H14``), else the types with counts
    (``t1x2-t2x4``), or ``N-atom molecule`` when that is longer than 40 characters.
    Molecules of different composition never share a name: when two
    compositions (or a composition and a residue name) give the same name, the types are
    added (``C6H14 (t1x2-t2x4)``), then a number in order of first appearance. Names depend
    only on the topology, so they are the same on every run.
    """
    order = np.argsort(owner, kind="stable")
    starts = np.r_[0, np.flatnonzero(np.diff(owner[order])) + 1]
    tkinds, tcode = np.unique(types, return_inverse=True)
    columns = [np.bincount(owner * tkinds.size + tcode,
                           minlength=n_mol * tkinds.size).reshape(n_mol, tkinds.size)]
    if elements is not None:
        ekinds, ecode = np.unique(elements, return_inverse=True)
        columns.append(np.bincount(owner * ekinds.size + ecode,
                                   minlength=n_mol * ekinds.size).reshape(n_mol, ekinds.size))
    rows, comp = np.unique(np.hstack(columns), axis=0, return_inverse=True)
    comp = comp.reshape(-1)
    named = np.zeros(n_mol, dtype=bool)
    resname = np.full(n_mol, "", dtype=object)
    if resnames is not None:
        rkinds, rcode = np.unique(resnames, return_inverse=True)
        lo = np.minimum.reduceat(rcode[order], starts)
        hi = np.maximum.reduceat(rcode[order], starts)
        resname = rkinds[lo].astype(object)
        named = (lo == hi) & ~np.isin(np.char.upper(rkinds[lo].astype(str)),
                                      list(_GENERIC_RESNAMES))
    # names of the compositions in use, in order of first appearance
    used = list(dict.fromkeys(comp[~named].tolist()))
    by_types = {}
    name = {}
    for r in used:
        tc = rows[r, :tkinds.size]
        by_types[r] = _types_name(tkinds[tc > 0].tolist(), tc[tc > 0].tolist())
        if elements is None:
            name[r] = by_types[r]
        else:
            ec = rows[r, tkinds.size:]
            name[r] = _hill_formula(ekinds[ec > 0].tolist(), ec[ec > 0].tolist())
        if len(name[r]) > _LONGEST_NAME:  # a polymer's or protein's many types
            name[r] = f"{int(tc.sum())}-atom molecule"
    taken = set(resname[named].tolist())
    seen: dict[str, int] = {}
    for r in used:
        seen[name[r]] = seen.get(name[r], 0) + 1
    for r in used:
        if ((seen[name[r]] > 1 or name[r] in taken) and name[r] != by_types[r]
                and len(by_types[r]) <= _LONGEST_NAME):
            name[r] = f"{name[r]} ({by_types[r]})"
    final: set[str] = set(taken)
    for r in used:
        base, k = name[r], 1
        while name[r] in final:
            k += 1
            name[r] = f"{base} #{k}"
        final.add(name[r])
    return [str(resname[i]) if named[i] else name[int(comp[i])] for i in range(n_mol)]


def _molecule_numbers(sel: Any) -> np.ndarray | None:
    """Molecule numbers stored with the atoms (a LAMMPS dump's ``mol`` column, kept as
    MDAnalysis ``molnums``), or None."""
    try:
        return np.asarray(sel.molnums)
    except Exception:  # MDAnalysis NoDataError
        return None


def _build_particles(u: Any, sel: Any, group_by: str, selection: str, masses_all: np.ndarray,
                     path: str) -> _Particles:
    idx = np.asarray(sel.indices, dtype=np.intp)
    m = masses_all[idx]
    if group_by in ("atom", "type"):
        if group_by == "atom":
            labels = [selection] * idx.size
        else:
            labels = [f"type {t}" for t in np.asarray(sel.types).astype(str)]
        codes, names = _species_codes(labels)
        return _Particles(idx, None, codes, names, m, np.ones(idx.size, dtype=np.intp))
    if group_by == "residue":
        owner_raw = np.asarray(sel.resindices)
    else:  # molecule
        try:
            owner_raw = np.asarray(sel.fragindices)
        except Exception:  # MDAnalysis raises NoDataError without bonds
            owner_raw = _molecule_numbers(sel)
        if owner_raw is None:
            raise InputError(
                "grouping by molecule needs bonds in the topology, and it has none",
                path=path,
                expected="a topology with bonds (PSF, TPR, LAMMPS data with a Bonds "
                         "section, PDB with CONECT records)",
                fix="use --group-by residue, or give a topology that lists bonds (or a "
                    "LAMMPS dump with a mol column)",
            )
    uniq, owner = np.unique(owner_raw, return_inverse=True)
    owner = owner.reshape(-1)
    try:
        resn = np.asarray(sel.resnames).astype(str)
    except Exception:  # MDAnalysis NoDataError: the topology has no residue names
        resn = None
    labels = _molecule_labels(owner, uniq.size, np.asarray(sel.types).astype(str), resn,
                              _element_symbols(sel))
    mat, tot, counts = _weights_matrix(owner, m, uniq.size)
    codes, names = _species_codes(labels)
    return _Particles(idx, mat, codes, names, tot, counts.astype(np.intp))
