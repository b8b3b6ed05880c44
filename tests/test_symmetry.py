"""Finite-difference Hessians along symmetry-adapted model modes: equal to the full Cartesian
central-difference Hessian within the finite-difference error, at a fraction of the gradients."""

import numpy as np
import pytest
from rdkit import Chem

import torsionscan
from torsionscan.engines.model import ModelEngine
from torsionscan.freeenergy import FD_STEP_BOHR, finite_difference_hessian
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.rrho import harmonic_frequencies, internal_basis
from torsionscan.modelhessian import lindh_hessian
from torsionscan.symmetry import FORWARD_STEP_BOHR, find_group, symmetric_hessian


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


def _mode_hessian(gradients_at, molecule, masses, coords):
    """symmetry.symmetric_hessian with the Lindh model Hessian, as the frequency stage calls it."""
    return symmetric_hessian(gradients_at, molecule.numbers, masses, coords, lindh_hessian(molecule.numbers, coords),
                             FD_STEP_BOHR)


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
        hessian, coords, used = _mode_hessian(_gradients_at(engine), molecule, masses, record.coords_bohr)
        full = finite_difference_hessian(_gradient(engine), coords)
        # the two differ by the forward differences' O(h) error along the stiff totally symmetric
        # modes, of the order of h / (2 r) of a curvature for springs of length r ~ 2 Bohr (1.2e-4 at
        # h = 0.0005), and the central differences' O(h^2) error, in two frames
        assert np.abs(hessian - full).max() < 2 * FORWARD_STEP_BOHR
        # vibrations above 100 cm-1 (the model's soft torsion and the rigid-body residue left out)
        ours, theirs = harmonic_frequencies(hessian, masses, coords)[0], harmonic_frequencies(full, masses, coords)[0]
        assert np.allclose(ours[ours > 100], theirs[theirs > 100], rtol=1e-3, atol=0.0)
        counts[round(record.angle_deg)] = used
    # 6N = 60 Cartesian central-difference displacements; the internal directions alone need 2 (3N - 6) = 48:
    # with the modes that C2h (s-trans, 180 deg), C2v (planar s-cis, 0 deg) and C2 (twisted) reverse, and
    # forward differences along the stiff totally symmetric ones, fewer than half of 6N
    assert counts[180] < 30 and counts[0] < 30
    assert all(used < 30 for angle, used in counts.items() if angle not in (0, 180))


def _vibrational_block(hessian, masses, coords):
    """The mass-weighted Hessian in the space of the vibrations (rrho.internal_basis)."""
    basis = internal_basis(masses, coords)
    scale = np.repeat(1.0 / np.sqrt(masses), 3)
    return basis.T @ (hessian * np.outer(scale, scale)) @ basis


def test_a_structure_without_symmetry_is_displaced_along_its_internal_directions_only(butadiene_model):
    from torsionscan.symmetry import STIFF_MODE_CM1, symmetry_adapted_modes

    molecule, engine, profile, masses = butadiene_model
    rng = np.random.default_rng(7)
    coords = profile.minima[0].coords_bohr + rng.normal(scale=0.1, size=profile.minima[0].coords_bohr.shape)
    _, _, operations, _ = find_group(molecule.numbers, masses, coords)
    assert len(operations) == 1
    hessian, used_coords, used = _mode_hessian(_gradients_at(engine), molecule, masses, coords)
    scale = np.repeat(1.0 / np.sqrt(masses), 3)
    wavenumbers = symmetry_adapted_modes(operations, masses, coords,
                                         lindh_hessian(molecule.numbers, coords) * np.outer(scale, scale))[1]
    stiff = int(np.sum(wavenumbers > STIFF_MODE_CM1))
    # the reference, one gradient per stiff mode, two per soft one: fewer than the 2 (3N - 6) = 48 of
    # central differences along every internal direction (6N = 60 Cartesian)
    assert 0 < stiff <= 3 * 10 - 6 and used == 1 + stiff + 2 * (3 * 10 - 6 - stiff)
    assert np.array_equal(used_coords, coords)
    full = finite_difference_hessian(_gradient(engine), coords)
    ours, theirs = _vibrational_block(hessian, masses, coords), _vibrational_block(full, masses, coords)
    # equal up to the forward differences' O(h) error (see the test above)
    assert np.abs(ours - theirs).max() < 1e-3 * np.abs(theirs).max()
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
    # a twisted (C1) ortho-methylstyrene minimum: its frequencies against the Cartesian
    # central-difference Hessian's (0.005 Bohr differences of the same gradients)
    profile, molecule, masses, engine = _gfn2_scan("C=Cc1ccccc1C")
    twisted = next(m for m in profile.minima if 20 < abs(m.angle_deg) < 160)
    coords = np.asarray(twisted.coords_bohr)
    gradients_at = engine.gradients_from_reference
    hessian, _, used = _mode_hessian(gradients_at, molecule, masses, coords)
    full = finite_difference_hessian(lambda c: gradients_at(coords, [c])[0], coords)
    assert used < 2 * (3 * 19 - 6)
    ours, theirs = harmonic_frequencies(hessian, masses, coords)[0], harmonic_frequencies(full, masses, coords)[0]
    # soft modes: both central differences; stiff ones: the forward differences' anharmonic error,
    # about 2 cm-1 at h = 0.0005 Bohr on C-H stretches near 3000 cm-1 (under 0.1 %)
    soft = theirs < 500
    assert theirs.min() > 0 and np.abs(ours - theirs)[soft].max() < 0.5
    assert np.abs(ours - theirs).max() < 1e-3 * theirs.max()


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
        # equal within the forward differences' O(h) error (first test); a wrong turn would be O(1) off
        assert np.abs(again - direct).max() < 1e-3 * np.abs(direct).max()
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
    # soft modes within the noise of 0.005-Bohr differences of gradients converged to ~1e-7 Hartree/Bohr
    # (up to ~2 cm-1 on the 16 cm-1 ring torsion); stiff ones within the forward differences' 0.1 %
    assert theirs.min() > 0 and np.abs(ours - theirs)[theirs < 500].max() < 1.0
    assert np.abs(ours - theirs).max() < 1e-3 * theirs.max()
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
    direct, _, _ = _mode_hessian(engine.gradients_from_reference, molecule, masses, moved)
    ours, theirs = _vibrational_block(again, masses, moved), _vibrational_block(direct, masses, moved)
    # within the forward differences' O(h) error, which differs between the two because each is built
    # along the modes of its own numbering (about 2e-3 of the largest element); a wrong reordering of the
    # methyl hydrogens would be off by a large share of it
    assert np.abs(ours - theirs).max() < 5e-3 * np.abs(theirs).max()


def test_a_13c_label_removes_the_operations_that_would_exchange_it():
    # a large molecule: the label moves the centre of mass too little to spoil the operations by itself
    smiles = "c1ccccc1/C=C/C=C/c1ccccc1"
    molecule = load_molecule(smiles)
    central = next(b for b in find_conjugated_bonds(molecule)
                   if not any(molecule.mol.GetAtomWithIdx(int(a)).GetIsAromatic() for a in b.atoms[1:3]))
    engine = ModelEngine(molecule.mol, [(central.atoms, FourierSeries(0.0, (1.0, -1.5, 1.2), (0.0, 0.0, 0.0)))])
    result = torsionscan.scan(smiles, engine=engine, bond=f"{central.atoms[1] + 1}-{central.atoms[2] + 1}",
                              settings=torsionscan.ScanSettings(conformers=1, frequencies=False, step_deg=30.0))
    trans = next(m for m in result.bonds[0].profile.minima if abs(m.angle_deg) > 170).coords_bohr
    masses = np.array([a.GetMass() for a in molecule.mol.GetAtoms()])
    labelled = masses.copy()
    labelled[int(central.atoms[1])] = 13.00335  # one inner carbon of the diene made 13C
    assert len(find_group(molecule.numbers, masses, trans)[2]) == 4  # C2h
    assert len(find_group(molecule.numbers, labelled, trans)[2]) == 2  # only the molecular plane is left
    hessian, coords, _ = _mode_hessian(_gradients_at(engine), molecule, labelled, trans)
    # the energy does not depend on the masses: the full Hessian is the reference, as in the test above
    assert np.abs(hessian - finite_difference_hessian(_gradient(engine), coords)).max() < 2 * FORWARD_STEP_BOHR


def test_a_ring_flip_or_hydrogen_swap_that_would_move_an_isotope_label_computes_a_hessian_of_its_own():
    from torsionscan.freeenergy import Hessians
    from torsionscan.molecule import atom_orders

    molecule = load_molecule("C=Cc1ccccc1")
    atoms = find_conjugated_bonds(molecule)[0].atoms
    engine = ModelEngine(molecule.mol, [(atoms, FourierSeries(0.0, (0.0, -2.0), (0.0, 0.0)))])  # planar minima
    result = torsionscan.scan("C=Cc1ccccc1", engine=engine, settings=torsionscan.ScanSettings(conformers=1,
                                                                                           frequencies=False))
    first = min(result.bonds[0].profile.minima, key=lambda m: abs(m.angle_deg)).coords_bohr
    orders, parents = atom_orders(molecule.mol)
    flip = next(order for order in orders[1:])  # the ring turned over: ortho and meta atoms exchanged
    full = flip.copy()
    for heavy in np.flatnonzero(parents < 0):  # each atom's hydrogens go with it
        full[parents == heavy] = np.flatnonzero(parents == flip[heavy])
    terminal = np.flatnonzero(parents == 0)  # the two hydrogens of the vinyl CH2
    swap = np.arange(len(full))
    swap[terminal] = terminal[::-1]
    # (renumbered structure, its atom that gets the label): the same structure for unlabelled atoms
    cases = [(first[full], int(np.flatnonzero(full != np.arange(len(full)))[0]), 13),  # an exchanged carbon
             (first[swap], int(terminal[0]), 2)]  # one of the two CH2 hydrogens
    for second, index, isotope in cases:
        labelled = Chem.Mol(molecule.mol)
        labelled.GetAtomWithIdx(index).SetIsotope(isotope)
        spent = {}
        for name, mol in (("natural", molecule.mol), ("labelled", labelled)):
            calls = []

            def counted(reference, structures, calls=calls):
                calls.append(len(structures))
                return _gradients_at(engine)(reference, structures)

            masses = np.array([a.GetMass() for a in mol.GetAtoms()])
            hessians = Hessians(counted, molecule.numbers, masses, atom_orders(mol))
            hessians(first)
            before = sum(calls)
            hessians(second)
            spent[name] = sum(calls) - before
        assert spent["natural"] == 0  # the renumbered structure reuses the Hessian
        assert spent["labelled"] > 0  # the label sits elsewhere there: another structure
