"""Implicit solvent and conjugation along real GFN2-xTB scans."""

import numpy as np
import pytest
from tblite.interface import Calculator

import torsionscan
from torsionscan.engines import solvation_model
from torsionscan.settings import ScanSettings

pytestmark = pytest.mark.xtb

COARSE = dict(step_deg=30.0, conformers=2)


def _dipole_debye(numbers, coords_bohr):
    """Dipole moment magnitude from an independent tblite single point (atomic units -> debye)."""
    calculator = Calculator("GFN2-xTB", numbers, coords_bohr)
    calculator.set("verbosity", 0)
    return float(np.linalg.norm(calculator.singlepoint().get("dipole"))) * 2.541746


def _minimum(bond, planar_angle):
    return min((m for m in bond.profile.minima if abs(abs(m.angle_deg) - planar_angle) < 30),
               key=lambda m: m.energy_hartree)


def test_water_shifts_the_enone_balance_towards_its_more_polar_conformer():
    gas = torsionscan.scan("C=CC(C)=O", settings=ScanSettings(**COARSE))
    water = torsionscan.scan("C=CC(C)=O", settings=ScanSettings(solvent="water", **COARSE))
    numbers = [a.GetAtomicNum() for a in gas.mol.GetAtoms()]
    cis, trans = _minimum(gas.bonds[0], 0.0), _minimum(gas.bonds[0], 180.0)
    polar_cis = _dipole_debye(numbers, cis.coords_bohr) > _dipole_debye(numbers, trans.coords_bohr)

    def cis_minus_trans(result):
        bond = result.bonds[0]
        return (_minimum(bond, 0.0).energy_hartree - _minimum(bond, 180.0).energy_hartree) * 627.5094740631

    # a dielectric stabilises the conformer with the larger dipole more (Onsager reaction field)
    assert (cis_minus_trans(water) < cis_minus_trans(gas)) == polar_cis
    assert abs(cis_minus_trans(water) - cis_minus_trans(gas)) > 0.05
    assert (water.settings.solvent, solvation_model(water.settings.solvent, water.settings.solvation_model)) == (
        "water", "alpb")
    assert gas.settings.solvent is None


def test_butadiene_conjugation_is_weakest_near_90_degrees(butadiene_scan):
    # textbook pi conjugation: overlap vanishes for perpendicular p orbitals, so the central
    # bond order is lowest and the HOMO-LUMO gap largest near 90 degrees
    points = [p for p in butadiene_scan.bonds[0].points if np.isfinite(p.energy_hartree)]
    lowest_order = min(points, key=lambda p: p.central_bond_order)
    widest_gap = max(points, key=lambda p: p.homo_lumo_gap_ev)
    assert abs(abs(lowest_order.angle_deg) - 90) <= 15
    assert abs(abs(widest_gap.angle_deg) - 90) <= 15
    planar = [p for p in points if abs(p.angle_deg) in (0.0, 180.0)]
    assert all(p.central_bond_order > lowest_order.central_bond_order + 0.05 for p in planar)
    assert all(p.homo_lumo_gap_ev < widest_gap.homo_lumo_gap_ev - 1.0 for p in planar)


def test_bad_solvent_settings_are_refused_before_any_calculation():
    from torsionscan.errors import InputError

    with pytest.raises(InputError, match="unknown solvent"):
        torsionscan.scan("C=CC=O", settings=ScanSettings(solvent="lava"))
