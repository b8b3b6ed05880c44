"""Dihedral values, analytic derivatives and rigid rotations against exact or reference answers."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms

from torsionscan import geometry


@pytest.fixture(scope="module")
def pentadiene_coords():
    mol = Chem.AddHs(Chem.MolFromSmiles("C/C=C/C=C"))
    AllChem.EmbedMolecule(mol, randomSeed=7)
    return mol, mol.GetConformer().GetPositions()


def _central_difference(function, coords, step=1e-5):
    grad = np.zeros_like(coords)
    for atom in range(len(coords)):
        for axis in range(3):
            plus, minus = coords.copy(), coords.copy()
            plus[atom, axis] += step
            minus[atom, axis] -= step
            change = function(plus) - function(minus)
            change = (change + np.pi) % (2 * np.pi) - np.pi  # angles near +-180 deg wrap
            grad[atom, axis] = change / (2 * step)
    return grad


def test_dihedral_matches_rdkit_sign_convention(pentadiene_coords):
    # RDKit (general-purpose reference library) uses the IUPAC sign convention
    mol, coords = pentadiene_coords
    conformer = mol.GetConformer()
    for quartet in [(0, 1, 2, 3), (1, 2, 3, 4), (5, 0, 1, 2)]:
        ours = np.degrees(geometry.dihedral(coords, *quartet))
        assert ours == pytest.approx(rdMolTransforms.GetDihedralDeg(conformer, *quartet), abs=1e-9)


def test_planar_cis_and_trans_values():
    cis = np.array([[1.0, 1.0, 0.0], [0.0, 0.0, 0.0], [1.5, 0.0, 0.0], [2.5, 1.0, 0.0]])
    trans = cis.copy()
    trans[3, 1] = -1.0
    assert geometry.dihedral(cis, 0, 1, 2, 3) == pytest.approx(0.0, abs=1e-12)
    assert abs(geometry.dihedral(trans, 0, 1, 2, 3)) == pytest.approx(np.pi, abs=1e-12)


def test_dihedral_gradient_matches_finite_differences(pentadiene_coords):
    _, coords = pentadiene_coords
    analytic = geometry.dihedral_gradient(coords, 1, 2, 3, 4)
    numeric = _central_difference(lambda c: geometry.dihedral(c, 1, 2, 3, 4), coords)
    np.testing.assert_allclose(analytic, numeric, atol=1e-8)


def test_bond_angle_gradient_matches_finite_differences(pentadiene_coords):
    _, coords = pentadiene_coords

    def angle(c):
        u, v = c[0] - c[1], c[2] - c[1]
        return np.arccos(np.dot(u, v) / np.linalg.norm(u) / np.linalg.norm(v))

    numeric = _central_difference(angle, coords)
    (analytic,) = geometry.bond_angle_gradients(coords, np.array([0]), np.array([1]), np.array([2]))
    np.testing.assert_allclose(analytic, numeric[:3], atol=1e-8)
    assert np.abs(numeric[3:]).max() < 1e-8


def test_many_dihedral_gradients_at_once_equal_the_one_at_a_time_gradient(pentadiene_coords):
    _, coords = pentadiene_coords
    quartets = np.array([(0, 1, 2, 3), (1, 2, 3, 4), (5, 0, 1, 2), (4, 3, 2, 1)])
    many = geometry.dihedral_gradients(coords, *quartets.T)
    for quartet, gradients in zip(quartets, many):
        one = geometry.dihedral_gradient(coords, *quartet)
        np.testing.assert_allclose(gradients, one[quartet], rtol=1e-12, atol=1e-14)
        assert np.abs(np.delete(one, quartet, axis=0)).max() == 0.0


def test_rotation_about_bond_changes_dihedral_by_exactly_the_angle(pentadiene_coords):
    mol, coords = pentadiene_coords
    moving = [3, 4] + [a.GetIdx() for a in mol.GetAtomWithIdx(3).GetNeighbors() if a.GetAtomicNum() == 1]
    moving += [a.GetIdx() for a in mol.GetAtomWithIdx(4).GetNeighbors() if a.GetAtomicNum() == 1]
    before = geometry.dihedral(coords, 1, 2, 3, 4)
    turned, rotation = geometry.rotate_about_bond(coords, 2, 3, moving, np.radians(37.0))
    after = geometry.dihedral(turned, 1, 2, 3, 4)
    assert np.degrees(np.angle(np.exp(1j * (after - before)))) == pytest.approx(37.0, abs=1e-9)
    # rigid: all distances within the moving group kept, rotation orthogonal
    np.testing.assert_allclose(rotation @ rotation.T, np.eye(3), atol=1e-12)
    d0 = np.linalg.norm(coords[moving][:, None] - coords[moving][None], axis=-1)
    d1 = np.linalg.norm(turned[moving][:, None] - turned[moving][None], axis=-1)
    np.testing.assert_allclose(d0, d1, atol=1e-12)


def test_rigid_body_directions_are_orthonormal_and_leave_dihedrals_unchanged(pentadiene_coords):
    _, coords = pentadiene_coords
    modes = geometry.rigid_body_directions(coords)
    assert modes.shape == (6, coords.size)
    np.testing.assert_allclose(modes @ modes.T, np.eye(6), atol=1e-10)
    grad = geometry.dihedral_gradient(coords, 1, 2, 3, 4).ravel()
    np.testing.assert_allclose(modes @ grad, 0.0, atol=1e-10)


def test_distinct_structures_sees_one_structure_turned_mirrored_or_relabelled(pentadiene_coords):
    from torsionscan.molecule import atom_orders, side_atoms

    mol, coords = pentadiene_coords
    orders, parents = atom_orders(mol)
    turned = coords @ geometry.rotation_matrix([1.0, 2.0, 3.0], 0.7).T + 5.0
    mirrored = coords * [1.0, 1.0, -1.0]
    methyl = [a.GetIdx() for a in mol.GetAtomWithIdx(0).GetNeighbors() if a.GetAtomicNum() == 1]
    relabelled = coords.copy()
    relabelled[methyl] = coords[methyl[1:] + methyl[:1]]  # the methyl hydrogens renumbered in turn
    # the other structure: the terminal vinyl group turned by 90 degrees about the central single bond
    other, _ = geometry.rotate_about_bond(coords, 2, 3, side_atoms(mol, 2, 3), np.pi / 2)
    assert geometry.distinct_structures([coords, turned, mirrored, relabelled, other], orders, parents, 0.01) == [0, 4]
    # a structure 0.05 apart is kept at a tolerance of 0.01
    nudged = coords.copy()
    nudged[0, 0] += 0.05
    assert geometry.distinct_structures([coords, nudged], orders, parents, 0.01) == [0, 1]
