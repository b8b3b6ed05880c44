"""Symmetry-equivalent finite-difference displacements: the Hessian built from one displacement
per class equals the full central-difference Hessian, at a fraction of the gradients."""

import numpy as np
import pytest

import torsionscan
from torsionscan.engines.model import ModelEngine
from torsionscan.freeenergy import FD_STEP_BOHR, finite_difference_hessian
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.rrho import harmonic_frequencies, internal_basis
from torsionscan.symmetry import find_group, symmetric_hessian


@pytest.fixture(scope="module")
def butadiene_model():
    molecule = load_molecule("C=CC=C")
    atoms = find_conjugated_bonds(molecule)[0].atoms
    engine = ModelEngine(molecule.mol, [(atoms, FourierSeries(0.0, (1.0, -1.5, 1.2), (0.0, 0.0, 0.0)))])
    result = torsionscan.scan("C=CC=C", engine=engine, settings=torsionscan.ScanSettings(conformers=1, frequencies=False))
    masses = np.array([a.GetMass() for a in molecule.mol.GetAtoms()])
    return molecule, engine, result.bonds[0].profile, masses


def _gradient(engine):
    return lambda coords: engine.energy_and_gradient(coords)[1]


def _gradients_at(engine):
    return lambda reference, structures: [engine.energy_and_gradient(s)[1] for s in structures]


def test_a_planar_s_trans_structure_has_the_four_operations_of_c2h(butadiene_model):
    molecule, _, profile, masses = butadiene_model
    trans = next(m for m in profile.minima if abs(m.angle_deg) > 170)
    _, _, operations, symmetric = find_group(molecule.numbers, masses, trans.coords_bohr)
    assert len(operations) == 4  # E, C2, sigma_h, i
    assert np.abs(symmetric - (trans.coords_bohr - masses @ trans.coords_bohr / masses.sum()) @ find_group(
        molecule.numbers, masses, trans.coords_bohr)[1]).max() < 0.02


def test_the_symmetric_hessian_equals_the_full_one_with_fewer_gradients(butadiene_model):
    molecule, engine, profile, masses = butadiene_model
    counts = {}
    for record in (*profile.minima, *profile.maxima):
        hessian, coords, used = symmetric_hessian(_gradients_at(engine), molecule.numbers, masses, record.coords_bohr,
                                                  FD_STEP_BOHR)
        full = finite_difference_hessian(_gradient(engine), coords)
        # the two differ only by the central-difference truncation error, O(h^2), in two frames
        assert np.abs(hessian - full).max() < 1e-5
        # vibrations above 100 cm-1 (the model's soft torsion and the rigid-body residue left out)
        ours, theirs = harmonic_frequencies(hessian, masses, coords)[0], harmonic_frequencies(full, masses, coords)[0]
        assert np.allclose(ours[ours > 100], theirs[theirs > 100], atol=0.05)
        counts[round(record.angle_deg)] = used
    # 6N = 60 displacements: C2h (s-trans, 180 deg) and C2v (planar s-cis, 0 deg) need 25, C2 (twisted) 30
    assert counts[180] == 25 and counts[0] == 25
    assert all(used == 30 for angle, used in counts.items() if angle not in (0, 180))


def _vibrational_block(hessian, masses, coords):
    """The mass-weighted Hessian in the space of the vibrations (rrho.internal_basis)."""
    basis = internal_basis(masses, coords)
    scale = np.repeat(1.0 / np.sqrt(masses), 3)
    return basis.T @ (hessian * np.outer(scale, scale)) @ basis


def test_a_structure_without_symmetry_is_displaced_along_its_internal_directions_only(butadiene_model):
    molecule, engine, profile, masses = butadiene_model
    rng = np.random.default_rng(7)
    coords = profile.minima[0].coords_bohr + rng.normal(scale=0.1, size=profile.minima[0].coords_bohr.shape)
    _, _, operations, _ = find_group(molecule.numbers, masses, coords)
    assert len(operations) == 1
    hessian, used_coords, used = symmetric_hessian(_gradients_at(engine), molecule.numbers, masses, coords, FD_STEP_BOHR)
    assert used == 2 * (3 * 10 - 6) and np.array_equal(used_coords, coords)  # 48 instead of 6N = 60
    full = finite_difference_hessian(_gradient(engine), coords)
    ours, theirs = _vibrational_block(hessian, masses, coords), _vibrational_block(full, masses, coords)
    # equal up to the central-difference truncation error, O(h^2), along different directions
    assert np.abs(ours - theirs).max() < 1e-6 * np.abs(theirs).max()
    # the rigid-body directions carry no curvature (the frequencies leave them out in any case)
    shift = np.tile([1.0, 0.0, 0.0], 10)
    assert np.abs(hessian @ shift).max() < 1e-12


def _gfn2_scan(smiles):
    """(first bond's profile without frequencies, molecule, masses, GFN2-xTB engine) of a molecule."""
    from torsionscan.engines import make_engine

    result = torsionscan.scan(smiles, cores=2, settings=torsionscan.ScanSettings(frequencies=False))
    molecule = load_molecule(smiles)
    masses = np.array([a.GetMass() for a in molecule.mol.GetAtoms()])
    return result.bonds[0].profile, molecule, masses, make_engine(molecule.numbers)


@pytest.mark.xtb
def test_internal_directions_give_the_full_hessians_frequencies_with_gfn2_xtb():
    # a twisted (C1) ortho-methylstyrene minimum: every frequency within 0.5 cm-1 of the Cartesian
    # central-difference Hessian's (both are 0.005 Bohr differences of the same gradients)
    profile, molecule, masses, engine = _gfn2_scan("C=Cc1ccccc1C")
    twisted = next(m for m in profile.minima if 20 < abs(m.angle_deg) < 160)
    coords = np.asarray(twisted.coords_bohr)
    gradients_at = engine.gradients_from_reference
    hessian, _, used = symmetric_hessian(gradients_at, molecule.numbers, masses, coords, FD_STEP_BOHR)
    full = finite_difference_hessian(lambda c: gradients_at(coords, [c])[0], coords)
    assert used == 2 * (3 * 19 - 6)
    ours, theirs = harmonic_frequencies(hessian, masses, coords)[0], harmonic_frequencies(full, masses, coords)[0]
    assert theirs.min() > 0 and np.abs(ours - theirs).max() < 0.5


def test_a_structure_met_again_turned_or_mirrored_reuses_its_hessian_turned_with_it(butadiene_model):
    # the lowest minimum reached from two bonds' scans is one structure in two frames
    from torsionscan.freeenergy import Hessians
    from torsionscan.geometry import rotation_matrix

    molecule, engine, profile, masses = butadiene_model
    gauche = next(m for m in profile.minima if 0 < m.angle_deg < 90)  # no symmetry beyond C2
    calls = []

    def counted(reference, structures):
        calls.append(len(structures))
        return _gradients_at(engine)(reference, structures)

    hessians = Hessians(counted, molecule.numbers, masses)
    first, _ = hessians(gauche.coords_bohr)
    spent = sum(calls)
    turn = rotation_matrix(np.array([0.3, -1.0, 0.5]), 2.1)
    for mirror in (1.0, -1.0):  # a rotation, then a rotation with a reflection
        matrix = turn * np.array([mirror, 1.0, 1.0])
        moved = (gauche.coords_bohr - gauche.coords_bohr.mean(axis=0)) @ matrix + [4.0, -2.0, 7.0]
        again, used = hessians(moved)
        assert sum(calls) == spent  # no new gradient
        assert np.abs(used - moved).max() < 0.02  # the structure it belongs to, in the new frame
        direct = finite_difference_hessian(_gradient(engine), moved)
        assert np.abs(again - direct).max() < 1e-5 * np.abs(direct).max()
        frequencies = lambda h, c: harmonic_frequencies(h, masses, c)[0]  # noqa: E731
        assert np.allclose(frequencies(again, used), frequencies(first, gauche.coords_bohr), atol=1e-6)
    other = gauche.coords_bohr.copy()
    other[0, 0] += 0.5  # one atom 0.5 Bohr away: another structure, a Hessian of its own
    hessians(other)
    assert sum(calls) > spent


def _met_again(engine, molecule, masses, first, second):
    """(Hessian, structure, counting gradients_at, its calls) for `second` from a Hessians (with the
    molecule's equivalent atom orders) that did `first`; asserts that it took no new gradient."""
    from torsionscan.freeenergy import Hessians
    from torsionscan.molecule import atom_orders

    calls = []

    def counted(reference, structures):
        calls.append(len(structures))
        return engine.gradients_from_reference(reference, structures)

    hessians = Hessians(counted, molecule.numbers, masses, atom_orders(molecule.mol))
    hessians(first)
    spent = sum(calls)
    again, used = hessians(second)
    assert sum(calls) == spent  # no new gradient
    return again, used, counted, calls


@pytest.mark.xtb
def test_a_phenyl_ring_flipped_onto_itself_reuses_the_hessian_with_its_atoms_exchanged():
    # the planar minima at 0 and 180 deg of a phenyl-vinyl bond are one structure with the ortho
    # (and meta) atoms exchanged: its Hessian, reordered, gives the frequencies computed afresh
    from torsionscan.freeenergy import Hessians

    profile, molecule, masses, engine = _gfn2_scan("C=Cc1ccccc1")
    zero, flipped = sorted(profile.minima, key=lambda m: abs(m.angle_deg))
    assert abs(zero.angle_deg) < 1 and abs(flipped.angle_deg) > 179
    coords, flipped = np.asarray(zero.coords_bohr), np.asarray(flipped.coords_bohr)
    again, used, counted, calls = _met_again(engine, molecule, masses, coords, flipped)
    spent = sum(calls)
    assert np.abs(used - flipped).max() < 0.02
    direct = finite_difference_hessian(lambda c: engine.gradients_from_reference(flipped, [c])[0], flipped)
    ours, theirs = harmonic_frequencies(again, masses, used)[0], harmonic_frequencies(direct, masses, flipped)[0]
    assert theirs.min() > 0 and np.abs(ours - theirs).max() < 0.5
    Hessians(counted, molecule.numbers, masses)(flipped)  # without the exchanges of equivalent atoms: computed again
    assert sum(calls) > spent


@pytest.mark.xtb
def test_a_structure_with_its_methyl_hydrogens_renumbered_and_turned_reuses_the_hessian_element_by_element():
    # acetaldehyde's minimum with its three methyl hydrogens numbered round by one (a 3-cycle, not
    # its own inverse) and the whole structure turned: the same structure, so the reordered Hessian
    # must equal one computed there afresh, element by element in the space of the vibrations
    from torsionscan.engines import make_engine
    from torsionscan.geometry import rotation_matrix
    from torsionscan.molecule import starting_structures
    from torsionscan.optimize import Convergence
    from torsionscan.relax import Relaxer
    from torsionscan.units import ANGSTROM_BOHR

    molecule = load_molecule("CC=O")
    masses = np.array([a.GetMass() for a in molecule.mol.GetAtoms()])
    engine = make_engine(molecule.numbers)
    tight = Convergence(max_gradient=2e-6, rms_gradient=1e-6, max_evaluations=300)
    coords = Relaxer(engine, molecule.numbers).relax(starting_structures(molecule, 1)[0] * ANGSTROM_BOHR,
                                                    tight).x.reshape(-1, 3)
    methyl = [a.GetIdx() for a in molecule.mol.GetAtomWithIdx(0).GetNeighbors() if a.GetAtomicNum() == 1]
    renumbered = np.arange(len(coords))
    renumbered[methyl] = np.roll(methyl, 1)
    moved = (coords[renumbered] - coords.mean(axis=0)) @ rotation_matrix(np.array([0.2, 1.0, -0.4]), 1.3) + 3.0
    again, used, _, _ = _met_again(engine, molecule, masses, coords, moved)
    assert np.abs(used - moved).max() < 1e-4  # the structure made exactly Cs
    direct, _, _ = symmetric_hessian(lambda r, s: engine.gradients_from_reference(r, s), molecule.numbers, masses,
                                     moved, FD_STEP_BOHR)
    ours, theirs = _vibrational_block(again, masses, moved), _vibrational_block(direct, masses, moved)
    assert np.abs(ours - theirs).max() < 1e-3 * np.abs(theirs).max()
