"""Reading inputs, finding conjugated single bonds, the dihedral atom rule, bad input."""

from fractions import Fraction

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from torsionscan.errors import InputError
from torsionscan.molecule import (
    find_conjugated_bonds, load_molecule, pauling_bond_orders, select_bond, side_atoms, starting_structures,
    torsion_bond,
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
    # 2-(2-tolyl)pyridine. The former rule ranked every aromatic neighbour and broke ties by the
    # lower atom number; the present rule takes pi partners in some Kekulé structure (both ortho
    # atoms on each side here), then the higher atomic number (ring N on the pyridine side), the
    # larger Pauling bond order (1/2 for all four here), more heavy-atom neighbours (the
    # methyl-bearing carbon on the tolyl side), so the answer is the same in both atom orders.
    for smiles in ("Cc1ccccc1-c1ccccn1", "n1ccccc1-c1ccccc1C"):
        molecule = load_molecule(smiles)
        (bond,) = find_conjugated_bonds(molecule)
        i, j, k, l = bond.atoms
        symbols = molecule.symbols
        outer = {symbols[i], symbols[l]}
        assert outer == {"C", "N"}
        ring_carbon = i if symbols[i] == "C" else l
        neighbours = molecule.mol.GetAtomWithIdx(ring_carbon).GetNeighbors()
        assert any(n.GetSymbol() == "C" and n.GetDegree() == 4 for n in neighbours)  # the methyl
        assert not bond.symmetric_rotor_candidate


def test_sigma_only_ring_atoms_are_never_the_reference():
    # furan O, thiophene S: single-bonded to C2 in the only Kekulé structure
    assert find_conjugated_bonds(load_molecule("C=Cc1ccco1"))[0].atoms == (0, 1, 2, 3)
    assert find_conjugated_bonds(load_molecule("C=Cc1cccs1"))[0].atoms == (0, 1, 2, 3)
    # 3-thienyl: C3=C2 is double, C3-C4 single in thiophene's Kekulé structure, whatever the order
    assert find_conjugated_bonds(load_molecule("C=Cc1ccsc1"))[0].atoms == (0, 1, 2, 6)
    assert find_conjugated_bonds(load_molecule("C=Cc1cscc1"))[0].atoms == (0, 1, 2, 3)
    # naphthalen-2-yl: C1 (bond order 2/3) before C3 (1/3)
    molecule = load_molecule("C=Cc1ccc2ccccc2c1")
    (bond,) = find_conjugated_bonds(molecule)
    assert bond.atoms == (0, 1, 2, 11)
    assert bond.scis_meaning == "s-cis: C1=C2 syn to C3=C12"


def test_s_cis_meaning_and_symmetric_rotor_flag():
    cases = {
        "C=CC=C": ("s-cis: C1=C2 syn to C3=C4", False),
        "C=Cc1ccco1": ("s-cis: C1=C2 syn to C3=C4", False),
        "C=Cc1ccccn1": ("s-cis: C1=C2 syn to C3=N8", False),
        "C=Cc1ccsc1": ("s-cis: C1=C2 syn to C3=C7", False),
        "C=Cc1ccccc1": ("s-cis: C1=C2 syn to C3=C4", True),
        "c1ccccc1-c1ccccc1": ("s-cis: C1=C6 syn to C7=C8", True),
        "C=Cn1cccc1": ("s-cis: C1=C2 syn to N3\u2013C4", True),  # pyrrole N has no pi partner
    }
    for smiles, (meaning, symmetric) in cases.items():
        (bond,) = find_conjugated_bonds(load_molecule(smiles))
        assert (bond.scis_meaning, bond.symmetric_rotor_candidate) == (meaning, symmetric), smiles


def test_hand_chosen_bonds_keep_the_override_and_the_fallback():
    molecule = load_molecule("C=Cc1ccco1")
    # i-j-k-l given: taken as written, even the ring O
    chosen = select_bond(molecule, "1-2-3-7")
    assert chosen.atoms == (0, 1, 2, 6)
    assert chosen.scis_meaning == "s-cis: C1=C2 syn to C3\u2013O7"
    assert torsion_bond(molecule.mol, (0, 1, 2, 6)) == chosen
    # an sp3-sp2 bond chosen by hand: the sp3 side has no pi partner, heaviest neighbour (C) wins
    ethyl = load_molecule("CCC=C")
    bond = select_bond(ethyl, "2-3")
    assert bond.atoms == (0, 1, 2, 3) and not bond.conjugated
    assert bond.scis_meaning == "s-cis: C1\u2013C2 syn to C3=C4"


def _resonance_bond_orders(mol):
    """Fraction of RDKit's enumerated Kekulé structures with each bond double (independent check)."""
    structures = [s for s in Chem.ResonanceMolSupplier(mol, Chem.KEKULE_ALL) if s is not None]
    orders = {}
    for bond in mol.GetBonds():
        if bond.GetIsAromatic() or bond.GetBondType() == Chem.BondType.DOUBLE:
            key = tuple(sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx())))
            double = sum(s.GetBondWithIdx(bond.GetIdx()).GetBondType() == Chem.BondType.DOUBLE for s in structures)
            orders[key] = Fraction(double, len(structures))
    return orders


@pytest.mark.parametrize("smiles", [
    "c1ccc2ccccc2c1", "c1ccc2ncccc2c1", "c1ccc2cccc2cc1", "c1ccc2c(c1)-c1ccccc1-2", "C1=CC=CC=CC=C1",
    "O=C1C=CC(=O)C=C1", "c1ccc2cc3ccccc3cc2c1",
    "c1ccc2c(c1)ccc1ccccc12", "c1cc2ccc3cccc4ccc(c1)c2c34", "C=Cc1ccco1", "c1ccc2[nH]ccc2c1", "O=c1cccc[nH]1",
    "c1ccccc1-c1ccccc1", "C=Cc1ccc2ccccc2c1",
])
def test_pauling_bond_orders_match_rdkit_kekule_enumeration(smiles):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert pauling_bond_orders(mol) == _resonance_bond_orders(mol)


def test_naphthalene_pauling_bond_orders():
    # closed form: naphthalene has three Kekulé structures; C1=C2 is double in two, C2=C3 in one
    # (the classic Pauling bond orders 2/3 and 1/3)
    orders = pauling_bond_orders(Chem.MolFromSmiles("c1ccc2ccccc2c1"))
    # atoms 0..9 of the SMILES are C2, C3, C4, C4a, C5, C6, C7, C8, C8a, C1
    assert orders[(0, 9)] == Fraction(2, 3)  # C1-C2
    assert orders[(0, 1)] == Fraction(1, 3)  # C2-C3
    assert orders[(3, 8)] == Fraction(1, 3)  # C4a-C8a


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


def test_molecule_source_rule(tmp_path, monkeypatch):
    from pathlib import Path

    from torsionscan.molecule import molecule_source

    monkeypatch.chdir(tmp_path)
    (tmp_path / "CCO").write_text("x\n")
    (tmp_path / "mol.sdf").write_text("x\n")
    assert molecule_source("C=CC=O") == "C=CC=O"
    assert molecule_source("mol.sdf") == Path("mol.sdf") and molecule_source("missing.xyz") == Path("missing.xyz")
    assert molecule_source(smiles="CCO") == "CCO" and molecule_source(file="CCO") == Path("CCO")
    for kwargs, words in [({"text": "CCO"}, "ambiguous"), ({"smiles": "C=C(C"}, "as SMILES"),
                          ({"text": "CCO", "smiles": "CCO"}, "only one of"), ({}, "no molecule given")]:
        with pytest.raises(InputError, match=words):
            molecule_source(**kwargs)
    # from Python a string that parses as SMILES is SMILES even beside a file of that name; a Path is a file
    assert load_molecule("CCO").smiles == "CCO"
    with pytest.raises(InputError, match="unknown file type"):
        load_molecule(Path("CCO"))


def test_input_structures_with_coinciding_or_no_atoms_are_refused(tmp_path):
    (tmp_path / "close.xyz").write_text("2\n\nC 0 0 0\nC 0 0 0.3\n")
    with pytest.raises(InputError, match=r"atoms 1 \(C\) and 2 \(C\) are only 0.30 Å apart"):
        load_molecule(tmp_path / "close.xyz")
    (tmp_path / "none.sdf").write_text("empty\n     RDKit          3D\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\n"
                                       "M  END\n$$$$\n")
    with pytest.raises(InputError, match="record 1 holds no atoms"):
        load_molecule(tmp_path / "none.sdf")
    with pytest.raises(InputError, match="holds no atoms"):
        load_molecule(Chem.Mol())
