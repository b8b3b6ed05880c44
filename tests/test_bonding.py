"""A relaxation that changes the molecule is caught: bonds perceived from covalent radii at the
relaxed structure against the input's graph, and a profile with a wide failed arc is refused."""

import numpy as np
import pytest

import torsionscan
from torsionscan.bonding import bonding_changes, graph_bonds
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import CalculationError
from torsionscan.molecule import find_conjugated_bonds, load_molecule, starting_structures
from torsionscan.profile import FourierSeries
from torsionscan.units import ANGSTROM_BOHR


@pytest.fixture(scope="module")
def acrolein():
    molecule = load_molecule("C=CC=O")
    return molecule, starting_structures(molecule, 1)[0] * ANGSTROM_BOHR


def test_an_intact_structure_has_no_changes(acrolein):
    molecule, coords = acrolein
    assert bonding_changes(molecule.numbers, graph_bonds(molecule.mol), coords) == []


def test_a_migrated_hydrogen_is_named_with_both_carbons(acrolein):
    molecule, coords = acrolein
    mol = molecule.mol
    aldehyde_h = next(a.GetIdx() for a in mol.GetAtomWithIdx(2).GetNeighbors() if a.GetAtomicNum() == 1)
    moved = coords.copy()
    normal = np.cross(coords[0] - coords[1], coords[2] - coords[1])  # out of the heavy-atom plane at C2
    moved[aldehyde_h] = coords[1] + 1.09 * ANGSTROM_BOHR * normal / np.linalg.norm(normal)
    changes = bonding_changes(molecule.numbers, graph_bonds(mol), moved)
    assert changes == [f"H{aldehyde_h + 1} moved from C3 to C2"]


def test_a_broken_bond_is_reported_with_its_length(acrolein):
    molecule, coords = acrolein
    apart = coords.copy()
    apart[2:4] += np.array([5.0, 0.0, 0.0]) * ANGSTROM_BOHR  # C3 and O4 (with nothing else) pulled away
    changes = bonding_changes(molecule.numbers, graph_bonds(molecule.mol), apart)
    assert any(c.startswith("bond C2-C3 broken") for c in changes)


def test_a_stretched_but_intact_bond_is_not_a_change(acrolein):
    molecule, coords = acrolein
    stretched = coords.copy()
    stretched[3] = coords[2] + 1.3 * (coords[3] - coords[2])  # C=O 30 % longer: strained, still bonded
    assert bonding_changes(molecule.numbers, graph_bonds(molecule.mol), stretched) == []


def test_a_profile_with_a_wide_failed_arc_is_refused():
    molecule = load_molecule("C=CC=C")
    atoms = find_conjugated_bonds(molecule)[0].atoms
    engine = ModelEngine(molecule.mol, [(atoms, FourierSeries(0.0, (1.0, -1.5, 1.2), (0.0, 0.0, 0.0)))],
                         fail_near_deg=range(-60, 61, 15), fail_tolerance_deg=8.0)
    with pytest.raises(CalculationError, match=r"no converged point from -75 to 75 deg.*model failure"):
        torsionscan.scan("C=CC=C", engine=engine, settings=torsionscan.ScanSettings(conformers=1, frequencies=False))


@pytest.mark.xtb
def test_a_dication_that_falls_apart_is_not_reported_as_a_profile():
    # GFN2-xTB acrolein dication: hydrogen migration and C-C fragmentation on the s-cis side
    with pytest.raises(CalculationError, match="bonding changed"):
        torsionscan.scan("C=CC=O", charge=2, settings=torsionscan.ScanSettings(conformers=1, step_deg=30.0,
                                                                               frequencies=False))


class _FallingApart:
    """An engine stand-in that pulls C3 and O4 away from the rest, step by step, and then fails (as
    an SCF or a constraint restoration can once a structure has come apart)."""

    def __init__(self, atoms_count, fail_after):
        self.calls, self.fail_after, self.count = 0, fail_after, atoms_count

    def energy_and_gradient(self, coords):
        self.calls += 1
        if self.calls > self.fail_after:
            raise CalculationError("the SCF did not converge")
        gradient = np.zeros((self.count, 3))
        gradient[2:4, 0] = -0.5  # downhill is +x for C3 and O4
        return -float(coords[2:4, 0].sum()) * 0.5, gradient


def test_a_relaxation_that_fails_after_the_structure_came_apart_names_the_change(acrolein):
    from torsionscan.optimize import Convergence
    from torsionscan.relax import BONDING_CHANGED, Relaxer

    molecule, coords = acrolein
    relaxer = Relaxer(_FallingApart(len(coords), fail_after=25), molecule.numbers, bonds=graph_bonds(molecule.mol))
    with pytest.raises(CalculationError, match=BONDING_CHANGED + ": .*bond C2-C3 broken"):
        relaxer.relax(coords, Convergence(max_gradient=1e-4, rms_gradient=1e-4, max_evaluations=100))
    intact = Relaxer(_FallingApart(len(coords), fail_after=0), molecule.numbers, bonds=graph_bonds(molecule.mol))
    with pytest.raises(CalculationError, match="SCF did not converge"):  # nothing moved: the failure itself
        intact.relax(coords, Convergence(max_gradient=1e-4, rms_gradient=1e-4, max_evaluations=100))


@pytest.mark.xtb
def test_a_profile_fitted_beside_points_that_fell_apart_is_flagged():
    # the same dication at the default 15 deg step: the arc where it falls apart (-30 to 30 deg) leaves
    # a gap the fit may still cross, so a profile is reported, and it must say the structure changed
    from torsionscan.quality import STRUCTURE_CHANGED, flag_details

    result = torsionscan.scan("C=CC=O", charge=2, settings=torsionscan.ScanSettings(conformers=1, frequencies=False))
    bond = result.bonds[0]
    assert STRUCTURE_CHANGED in bond.flags
    assert "C2-C3 broken" in dict(flag_details(bond))[STRUCTURE_CHANGED]
    intact = torsionscan.scan("C=CC=O", settings=torsionscan.ScanSettings(conformers=1, frequencies=False))
    assert STRUCTURE_CHANGED not in intact.bonds[0].flags
