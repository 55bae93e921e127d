"""Readable species names for residues and molecules (issue 15, item 4).

References: the composition of n-hexane in tests/data/alkane (2 CH3 sites of type 1 and
4 CH2 sites of type 2 per molecule, as `make_alkane.py` builds it); MDAnalysis's own
fragments, residue names and elements of MDAnalysisTests files; Hill order of chemical
formulas (C, then H, then the rest alphabetically; Hill, J. Am. Chem. Soc. 22, 478 (1900);
common practice).
"""

from __future__ import annotations

import warnings
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

from transport.io.grouping import _build_particles, _hill_formula, _molecule_labels
from transport.io.trajectory import load_trajectory

mda = pytest.importorskip("MDAnalysis")
datafiles = pytest.importorskip("MDAnalysisTests.datafiles")

ALKANE = Path(__file__).parent / "data" / "alkane"


@pytest.mark.parametrize("group_by", ["molecule", "residue"])
def test_hexane_molecules_are_named_by_their_types(group_by):
    # LAMMPS data file without residue names or elements: each molecule (bonded fragment,
    # and also each molecule id, which MDAnalysis reads as a residue) has 2 sites of type 1
    # and 4 of type 2; the old name ran the types together ("1224")
    s = load_trajectory(ALKANE / "hexane.data", ALKANE / "hexane_wrapped.dcd", units="real",
                        timestep=2.0, group_by=group_by, temperature=298.0)[0]
    assert s.species_names == ("t1x2-t2x4",)
    assert s.n_particles == 100
    assert s.atoms_per_particle.tolist() == [6] * 100


def test_residue_names_name_molecules():
    # MDAnalysisTests: 125 TIP3P waters (PSF with bonds, residue name TIP3)
    s = load_trajectory(datafiles.PSF_TRICLINIC, datafiles.DCD_TRICLINIC, unwrap="none",
                        group_by="molecule")[0]
    assert s.species_names == ("TIP3",)
    assert s.n_particles == 125 and s.atoms_per_particle.tolist() == [3] * 125


def _universe_particles(path: str, group_by: str = "molecule"):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = mda.Universe(path)
    return u, _build_particles(u, u.atoms, group_by, "all", np.ones(u.atoms.n_atoms), path)


def test_formula_from_elements_matches_mdanalysis_fragment():
    # MDAnalysisTests: lysozyme in water (GROMACS 2021 TPR: bonds, elements, residue
    # names). The protein spans many residues, so it is named by its formula, counted here
    # from MDAnalysis's own fragment; the waters keep their residue name
    u, p = _universe_particles(datafiles.TPR2021)
    protein = max(u.atoms.fragments, key=len)
    n = Counter(str(e) for e in protein.elements)
    expected = "C{C}H{H}N{N}O{O}S{S}".format(**n)
    assert set(n) == {"C", "H", "N", "O", "S"}
    assert p.species_names == (expected, "SOL")
    # hen lysozyme is usually given as C613H951N193O185S10 (from memory); this topology's
    # protonation states add 8 hydrogens
    assert expected == "C613H959N193O185S10"
    assert p.n == len(u.atoms.fragments)


def test_names_are_stable():
    # the same topology opened twice gives the same names in the same order
    _, a = _universe_particles(datafiles.CONECT)
    _, b = _universe_particles(datafiles.CONECT)
    assert a.species_names == b.species_names
    np.testing.assert_array_equal(a.species, b.species)


def test_hill_order_and_counts():
    assert _hill_formula(["H", "O", "C"], [6, 1, 2]) == "C2H6O"  # ethanol
    assert _hill_formula(["O", "H"], [1, 2]) == "H2O"  # no carbon: alphabetical
    assert _hill_formula(["Cl", "Na"], [1, 1]) == "ClNa"


def test_names_of_different_compositions_differ():
    # molecules 0, 2: types 1,1,2 (elements C,C,O); molecule 1: types 3,3,4 with the same
    # elements (another force-field typing of the same formula); molecule 3: residue "C2O",
    # which collides with the formula; molecule 4: types 10 and 2 (numeric order)
    owner = np.array([0, 0, 0, 1, 1, 1, 2, 2, 2, 3, 3, 3, 4, 4])
    types = np.array(["1", "1", "2", "3", "3", "4", "1", "1", "2", "1", "1", "2", "10", "2"])
    elements = np.array(["C", "C", "O"] * 4 + ["C", "O"])
    resn = np.array(["UNK"] * 9 + ["C2O"] * 3 + ["UNK"] * 2)
    names = _molecule_labels(owner, 5, types, resn, elements)
    assert names == ["C2O (t1x2-t2)", "C2O (t3x2-t4)", "C2O (t1x2-t2)", "C2O", "CO"]
    by_types = _molecule_labels(owner, 5, types, None, None)
    assert by_types == ["t1x2-t2", "t3x2-t4", "t1x2-t2", "t1x2-t2", "t2-t10"]
