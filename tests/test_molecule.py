"""Reading inputs, finding conjugated single bonds, the dihedral atom rule, bad input."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from torsionscan.errors import InputError
from torsionscan.molecule import (
    find_conjugated_bonds, load_molecule, select_bond, side_atoms, starting_structures,
)


def _bonds(smiles):
    return [b.atoms for b in find_conjugated_bonds(load_molecule(smiles))]


def test_diene_enone_and_biaryl_bonds_are_found():
    assert _bonds("C=CC=C") == [(0, 1, 2, 3)]
    assert _bonds("C=CC=O") == [(0, 1, 2, 3)]
    assert len(_bonds("c1ccccc1-c1ccccc1")) == 1
    # phenyl vinyl ketone: the vinyl-carbonyl and the carbonyl-aryl bonds
    assert len(_bonds("C=CC(=O)c1ccccc1")) == 2


def test_non_conjugated_ring_and_alkyne_bonds_are_not_listed():
    assert _bonds("CCC=C") == []  # sp3-sp2
    assert _bonds("C1=CC=CC1") == []  # the single bond is in a ring
    assert _bonds("CC#CC=C") == []  # triple bonds do not define an s-cis/s-trans dihedral


def test_outer_atoms_are_pi_partners_so_zero_is_s_cis():
    atoms = _bonds("C=CC=O")[0]
    mol = load_molecule("C=CC=O").mol
    assert mol.GetBondBetweenAtoms(atoms[0], atoms[1]).GetBondType() == Chem.BondType.DOUBLE
    assert mol.GetBondBetweenAtoms(atoms[2], atoms[3]).GetBondType() == Chem.BondType.DOUBLE


def test_aryl_outer_atom_rule_prefers_heteroatom_then_substituted_ortho():
    # 2-(2-tolyl)pyridine: ring N on the pyridine side, the methyl-bearing carbon on the tolyl side
    molecule = load_molecule("Cc1ccccc1-c1ccccn1")
    i, j, k, l = find_conjugated_bonds(molecule)[0].atoms
    symbols = molecule.symbols
    assert symbols[l] == "N"
    assert any(n.GetIdx() == 0 for n in molecule.mol.GetAtomWithIdx(i).GetNeighbors())


def test_bond_selection_by_one_based_numbers():
    molecule = load_molecule("C=CC=C")
    assert select_bond(molecule, "2-3").atoms == (0, 1, 2, 3)
    assert select_bond(molecule, "1-2-3-4").atoms == (0, 1, 2, 3)
    with pytest.raises(InputError, match="not a single bond"):
        select_bond(molecule, "1-2")
    with pytest.raises(InputError, match="not bonded"):
        select_bond(molecule, "1-4")
    with pytest.raises(InputError, match="between 1 and"):
        select_bond(molecule, "0-1")
    with pytest.raises(InputError, match="ring"):
        select_bond(load_molecule("C1=CC=CC1"), "3-4")


def test_side_atoms_split_the_molecule_at_the_bond():
    molecule = load_molecule("C=CC=C")
    side = side_atoms(molecule, 1, 2)
    assert 2 in side and 3 in side and 1 not in side and 0 not in side
    assert len(side) == 5  # C3, C4 and their three hydrogens


def test_sdf_record_and_xyz_inputs(tmp_path):
    writer = Chem.SDWriter(str(tmp_path / "two.sdf"))
    for smiles, title in (("C=CC=C", "first"), ("C=CC=O", "second")):
        mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
        AllChem.EmbedMolecule(mol, randomSeed=1)
        mol.SetProp("_Name", title)
        writer.write(mol)
    writer.close()
    second = load_molecule(tmp_path / "two.sdf", record=2)
    assert second.name == "second" and second.smiles == "C=CC=O"
    assert second.input_coords_angstrom.shape == (second.mol.GetNumAtoms(), 3)
    with pytest.raises(InputError, match="record"):
        load_molecule(tmp_path / "two.sdf", record=3)

    mol = Chem.MolFromMolFile(str(tmp_path / "two.sdf"), removeHs=False)
    (tmp_path / "diene.xyz").write_text(Chem.MolToXYZBlock(mol))
    from_xyz = load_molecule(tmp_path / "diene.xyz")
    assert from_xyz.smiles == "C=CC=C"
    assert from_xyz.name == "diene"
    assert len(find_conjugated_bonds(from_xyz)) == 1


def test_bad_inputs_give_clear_errors(tmp_path):
    with pytest.raises(InputError, match="SMILES"):
        load_molecule("C=C(C")
    with pytest.raises(InputError, match="file not found"):
        load_molecule("missing.sdf")
    with pytest.raises(InputError, match="separate molecules"):
        load_molecule("C=CC=C.O")
    (tmp_path / "junk.xyz").write_text("three\nnot xyz\nC 0 0\n")
    with pytest.raises(InputError, match="XYZ"):
        load_molecule(tmp_path / "junk.xyz")
    (tmp_path / "junk.sdf").write_text("nothing useful here\n")
    with pytest.raises(InputError):
        load_molecule(tmp_path / "junk.sdf")


def test_start_structures_are_deterministic():
    molecule = load_molecule("C/C=C/C=C")
    first = starting_structures(molecule, count=3)
    second = starting_structures(molecule, count=3)
    assert len(first) == 3
    for a, b in zip(first, second):
        np.testing.assert_allclose(a, b, atol=1e-10)


def test_stereocentres_are_detected():
    assert load_molecule("C[C@H](F)C=CC=C").has_stereocentres
    assert not load_molecule("C=CC=C").has_stereocentres


def test_an_rdkit_molecule_is_accepted_with_its_coordinates_and_title():
    mol = Chem.AddHs(Chem.MolFromSmiles("C=CC=O"))
    AllChem.EmbedMolecule(mol, randomSeed=7)
    mol.SetProp("_Name", "acrolein from a record")
    molecule = load_molecule(mol)
    assert molecule.name == "acrolein_from_a_record"
    assert molecule.smiles == "C=CC=O"
    np.testing.assert_allclose(molecule.input_coords_angstrom, mol.GetConformer().GetPositions())
