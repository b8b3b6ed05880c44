"""Frequencies, free energies and cycloaddition readiness on real GFN2-xTB calculations."""

import math

import numpy as np
import pytest

import torsionscan
from torsionscan.engines import make_engine
from torsionscan.freeenergy import finite_difference_hessian
from torsionscan.molecule import load_molecule, starting_structures
from torsionscan.optimize import Convergence
from torsionscan.rrho import harmonic_frequencies
from torsionscan.relax import Relaxer
from torsionscan.settings import ScanSettings
from torsionscan.units import ANGSTROM_BOHR, rt_kcal_mol

pytestmark = pytest.mark.xtb

TIGHT = Convergence(max_gradient=2e-6, rms_gradient=1e-6, max_evaluations=300)


def _minimum(smiles):
    molecule = load_molecule(smiles)
    engine = make_engine(molecule.numbers)
    result = Relaxer(engine, molecule.numbers).relax(starting_structures(molecule, 1)[0] * ANGSTROM_BOHR, TIGHT)
    assert result.converged
    masses = [atom.GetMass() for atom in molecule.mol.GetAtoms()]
    return engine, masses, result.x.reshape(-1, 3)


def test_hessian_is_symmetric_and_consistent_with_gradient_differences():
    engine, _, coords = _minimum("C=CC=O")
    gradient = lambda c: engine.energy_and_gradient(c)[1].ravel()  # noqa: E731
    raw = finite_difference_hessian(gradient, coords, symmetrise=False)
    assert np.abs(raw - raw.T).max() < 1e-4 * np.abs(raw).max()
    hessian = finite_difference_hessian(gradient, coords)
    direction = np.random.default_rng(7).normal(size=coords.size)
    direction /= np.linalg.norm(direction)
    step = 0.002  # a different step from the Hessian's own 0.005 Bohr
    change = (gradient(coords.ravel() + step * direction) - gradient(coords.ravel() - step * direction)) / (2 * step)
    assert np.abs(hessian @ direction - change).max() < 2e-3 * np.abs(change).max()


def test_formaldehyde_frequencies_match_the_experimental_table():
    # Experimental fundamentals of H2CO, cm-1: T. Shimanouchi, Tables of Molecular Vibrational
    # Frequencies, Consolidated Volume I, NSRDS-NBS 39 (1972) (values from memory):
    # nu4 1167, nu6 1249, nu3 1500, nu2 1746, nu1 2782, nu5 2843. GFN2-xTB harmonic frequencies
    # are typically within a few percent of experiment (from memory), so each mode within 8%
    # and the mean absolute deviation below 60 cm-1.
    experiment = np.array([1167.0, 1249.0, 1500.0, 1746.0, 2782.0, 2843.0])
    engine, masses, coords = _minimum("C=O")
    hessian = finite_difference_hessian(lambda c: engine.energy_and_gradient(c)[1], coords)
    frequencies, _ = harmonic_frequencies(hessian, masses, coords)
    assert len(frequencies) == 6 and frequencies.min() > 0
    assert np.all(np.abs(frequencies - experiment) <= 0.08 * experiment)
    assert np.mean(np.abs(frequencies - experiment)) < 60.0


def test_butadiene_stationary_points_have_the_right_nature(butadiene_scan):
    profile = butadiene_scan.bonds[0].profile
    assert all(m.imaginary_count == 0 for m in profile.minima)
    assert all(m.imaginary_count == 1 and m.imaginary_along_torsion for m in profile.maxima)
    s_trans = next(m for m in profile.minima if abs(m.angle_deg) > 170)
    # s-trans-1,3-butadiene torsional fundamental nu13 = 163 cm-1 (gas-phase infrared; from memory);
    # 30 cm-1 allows GFN2-xTB's ~1 kcal/mol torsion error on this shallow mode
    assert s_trans.frequencies_cm1[0] == pytest.approx(163.0, abs=30.0)


def test_a_flat_planar_region_counts_its_soft_torsion_mode_and_passes_the_check():
    # 1-phenylbutadiene's diene bond: the planar s-cis point and the s-cis wells on either side lie
    # within 0.01 kcal/mol (GFN2-xTB), one flat region; the sign of its torsion mode at the planar
    # structure is below what a harmonic analysis resolves, so it never fails the check, and its
    # magnitude enters G - E like any other soft mode
    from torsionscan.quality import STATIONARY_CHECK
    from torsionscan.rrho import rrho_thermo

    result = torsionscan.scan("C=C/C=C/c1ccccc1", name="phenyl-diene", bond="2-3")
    bond = result.bonds[0]
    (flat,) = [m for m in bond.profile.minima if m.flat_region]
    assert abs(flat.angle_deg) < 0.05 and flat.imaginary_count <= 1 and STATIONARY_CHECK not in bond.flags
    masses = [atom.GetMass() for atom in load_molecule(result.smiles).mol.GetAtoms()]
    expected = rrho_thermo(np.abs(flat.frequencies_cm1), masses, flat.coords_bohr, 298.15,
                           quasi_harmonic_cutoff_cm1=100.0).gibbs_correction_kcal_mol
    assert flat.gibbs_corrections_kcal_mol[0] == pytest.approx(expected, abs=1e-6)  # the symmetrised structure
    assert [row["flat_region"] for row in bond.stationary_table() if row["kind"] == "minimum"].count(True) == 1


def test_free_energy_populations_and_readiness_of_butadiene(butadiene_scan):
    profile = butadiene_scan.bonds[0].profile
    for p in profile.rrho_populations:
        assert p.s_cis + p.s_trans == pytest.approx(1.0)
        assert 0.0 < p.s_cis < 0.3  # s-trans dominates (common knowledge)
    assert profile.minima[0].frequencies_cm1 and profile.minima[0].gibbs_corrections_kcal_mol
    readiness = profile.readiness
    assert [r.temperature_k for r in readiness] == [p.temperature_k for p in profile.populations]
    at_zero = next(m for m in profile.maxima if abs(m.angle_deg) < 1)
    # the planar s-cis structure is the barrier top at 0 deg: the same electronic energy
    assert readiness[0].delta_e_kcal_mol == pytest.approx(profile.relative_kcal_mol(at_zero.energy_hartree), abs=0.01)
    for r in readiness:
        rt = rt_kcal_mol(r.temperature_k)
        assert r.boltzmann_factor == pytest.approx(math.exp(-r.delta_g_kcal_mol / rt), rel=1e-4)
    assert profile.planar_scis.imaginary_count == 0  # the torsion is frozen there
    assert len(profile.planar_scis.frequencies_cm1) == 3 * 10 - 7


def test_an_enone_gets_no_diene_readiness_and_frequencies_can_be_skipped():
    settings = ScanSettings(step_deg=30.0, conformers=2)
    enone = torsionscan.scan("C=CC=O", settings=settings).bonds[0]
    assert enone.profile.readiness == () and enone.profile.planar_scis is None
    assert enone.profile.rrho_populations
    quick = torsionscan.scan("C=CC=O", settings=ScanSettings(step_deg=30.0, conformers=2, frequencies=False)).bonds[0]
    assert quick.profile.minima[0].frequencies_cm1 == () and quick.profile.rrho_populations == ()
    assert quick.frequency_gradient_evaluations == 0


def test_a_top_inside_one_region_is_verified_without_a_full_hessian():
    # ortho-methylstyrene: the planar tops at 0 and 180 deg lie between mirror-image minima of one
    # region, so no free energy needs them; their nature is shown by the lowest-eigenvalue search
    # (with the dihedral frozen), and a full Hessian there agrees: one imaginary mode, along the torsion
    from torsionscan.freeenergy import stable_with_torsion_frozen
    from torsionscan.geometry import dihedral_gradient

    result = torsionscan.scan("C=Cc1ccccc1C", cores=2)
    bond = result.bonds[0]
    inside = [m for m in bond.profile.maxima if abs(m.angle_deg) < 1 or abs(m.angle_deg) > 179]
    crossing = [m for m in bond.profile.maxima if 60 < abs(m.angle_deg) < 120]
    assert len(inside) == 2 and crossing
    assert all(m.imaginary_count == 1 and m.imaginary_along_torsion and not m.frequencies_cm1 for m in inside)
    assert all(m.imaginary_count == 1 and m.frequencies_cm1 and m.gibbs_corrections_kcal_mol for m in crossing)
    assert bond.profile.interconversion  # the rate needs the crossing tops' free energies only
    molecule = load_molecule("C=Cc1ccccc1C")
    masses = [a.GetMass() for a in molecule.mol.GetAtoms()]
    engine = make_engine(molecule.numbers)
    top = inside[0]
    coords = np.asarray(top.coords_bohr)
    hessian = finite_difference_hessian(lambda c: engine.gradients_from_reference(coords, [c])[0], coords)
    free = harmonic_frequencies(hessian, masses, coords)[0]
    frozen = harmonic_frequencies(hessian, masses, coords, [dihedral_gradient(coords, *bond.dihedral_atoms)])[0]
    assert free[0] < 0 < free[1] and frozen[0] > 0
    assert stable_with_torsion_frozen(engine.gradients_from_reference, molecule.numbers, masses, coords,
                                      bond.dihedral_atoms)


def test_the_search_leaves_a_top_with_a_second_imaginary_mode_to_the_full_hessian():
    # 3-methyl-1,3-pentadiene's planar top at 0 deg: a second imaginary mode (a methyl turning), so
    # the Hessian with the dihedral frozen is not positive and the search does not vouch for it
    from torsionscan.freeenergy import stable_with_torsion_frozen
    from torsionscan.geometry import dihedral_gradient

    result = torsionscan.scan("C=C/C(C)=C/C", cores=2, settings=ScanSettings(frequencies=False))
    bond = result.bonds[0]
    top = next(m for m in bond.profile.maxima if abs(m.angle_deg) < 1)
    molecule = load_molecule("C=C/C(C)=C/C")
    engine = make_engine(molecule.numbers)
    masses = [a.GetMass() for a in molecule.mol.GetAtoms()]
    coords = np.asarray(top.coords_bohr)
    hessian = finite_difference_hessian(lambda c: engine.gradients_from_reference(coords, [c])[0], coords)
    frozen = harmonic_frequencies(hessian, masses, coords, [dihedral_gradient(coords, *bond.dihedral_atoms)])[0]
    assert frozen[0] < 0  # the full Hessian: an imaginary mode that freezing the dihedral does not remove
    assert stable_with_torsion_frozen(engine.gradients_from_reference, molecule.numbers, masses, coords,
                                      bond.dihedral_atoms) is None


def _turning_hessian(coords, dihedral, curvature):
    """A model Hessian (Lindh, hydrogen peroxide) with the dihedral made soft or unstable: plus
    curvature (Hartree/Bohr^2) along the normalised dihedral gradient."""
    from torsionscan import geometry
    from torsionscan.modelhessian import lindh_hessian

    direction = geometry.dihedral_gradient(coords, *dihedral).ravel()
    direction /= np.linalg.norm(direction)
    return lindh_hessian([1, 8, 8, 1], coords) + curvature * np.outer(direction, direction)


def test_only_a_flat_minimum_counts_an_imaginary_torsion_mode_at_its_magnitude():
    # logic on a model Hessian: at a flat minimum the soft mode enters G - E at |nu|; at a flat top
    # it is the reaction coordinate and stays out, as at any top
    from dataclasses import replace as with_fields

    from torsionscan.freeenergy import _analyse_all, analyse
    from torsionscan.records import StationaryRecord
    from torsionscan.rrho import rrho_thermo

    coords = np.array([[1.6, 1.5, 0.3], [1.3, 0.0, 0.0], [-1.3, 0.0, 0.0], [-1.6, 1.5, -0.3]])
    masses, dihedral = [1.008, 15.999, 15.999, 1.008], (0, 1, 2, 3)
    hessian = _turning_hessian(coords, dihedral, -0.2)
    hessians = lambda xyz: (hessian, coords)  # noqa: E731 - one structure, its Hessian given
    plain = analyse(hessians, masses, coords, dihedral, [298.15])
    flat = analyse(hessians, masses, coords, dihedral, [298.15], flat_torsion=True)
    assert plain.imaginary_count == flat.imaginary_count == 1 and plain.imaginary_along_torsion
    expected = rrho_thermo(np.abs(flat.frequencies_cm1), masses, coords, 298.15).gibbs_correction_kcal_mol
    assert flat.gibbs_corrections_kcal_mol[0] == pytest.approx(expected, abs=1e-9)
    assert plain.gibbs_corrections_kcal_mol[0] != pytest.approx(expected, abs=1e-3)  # the mode left out
    record = StationaryRecord("minimum", 0.0, 0.0, 0.0, "test", True, coords, flat_region=True)
    (as_minimum,) = _analyse_all([record], hessians, masses, dihedral, [298.15], False, None)
    (as_top,) = _analyse_all([with_fields(record, kind="maximum")], hessians, masses, dihedral, [298.15], False, None)
    assert as_minimum.gibbs_corrections_kcal_mol == flat.gibbs_corrections_kcal_mol
    assert as_top.gibbs_corrections_kcal_mol == plain.gibbs_corrections_kcal_mol
