"""Particle grouping: which atoms form a particle, its species and its mass.

``group_by`` (:data:`GROUP_BY`) decides: each selected atom a particle of one species
(``atom``), atoms by type (``type``), centres of mass of residues named by residue name
(``residue``), or centres of mass of bonded molecules (MDAnalysis fragments), named by
residue name or composition (``molecule``). A particle that groups atoms is reduced from
the atom coordinates by a sparse matrix of mass fractions (:func:`_weights_matrix`), block
by block, in :meth:`_Particles.reduce`.
"""

from __future__ import annotations

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


def _composition(types: np.ndarray) -> str:
    kinds, counts = np.unique(types.astype(str), return_counts=True)
    return "".join(f"{k}{c if c > 1 else ''}" for k, c in zip(kinds, counts, strict=True))


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
        resnames = getattr(sel, "resnames", None)
        if resnames is None:
            keys = np.asarray(sel.resids).astype(str)
            label_of = {int(r): "residue" for r in owner_raw}
        else:
            keys = np.asarray(resnames).astype(str)
            label_of = dict(zip(owner_raw.tolist(), keys.tolist(), strict=True))
    else:  # molecule
        try:
            owner_raw = np.asarray(sel.fragindices)
        except Exception:  # MDAnalysis raises NoDataError without bonds
            raise InputError(
                "grouping by molecule needs bonds in the topology, and it has none",
                path=path,
                expected="a topology with bonds (PSF, TPR, LAMMPS data with a Bonds "
                         "section, PDB with CONECT records)",
                fix="use --group-by residue, or give a topology that lists bonds",
            ) from None
        types = np.asarray(sel.types).astype(str)
        try:
            resn = np.asarray(sel.resnames).astype(str)
        except Exception:
            resn = None
        label_of = {}
        order = np.argsort(owner_raw, kind="stable")
        bounds = np.flatnonzero(np.diff(owner_raw[order])) + 1
        for chunk in np.split(order, bounds):
            key = int(owner_raw[chunk[0]])
            if resn is not None and np.unique(resn[chunk]).size == 1 and resn[chunk[0]] \
                    not in ("", "UNK", "SYSTEM"):
                label_of[key] = str(resn[chunk[0]])
            else:
                label_of[key] = _composition(types[chunk])
    uniq, owner = np.unique(owner_raw, return_inverse=True)
    mat, tot, counts = _weights_matrix(owner, m, uniq.size)
    labels = [label_of[int(k)] for k in uniq]
    codes, names = _species_codes(labels)
    return _Particles(idx, mat, codes, names, tot, counts.astype(np.intp))
