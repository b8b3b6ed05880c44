"""Higher-level re-scoring of a scan: DFT single points (PySCF, on the CPU) at the relaxed
geometries of the scan, analysed by the same analysis.analyse_profile as the scan's own profile,
and the disagreement between the two methods.

The re-scored profile keeps the scan's geometries; its minima and maxima are located on its
Fourier fit (interpolation between grid points, no re-optimisation) and labelled so. Energies
absolute in Hartree, coordinates Bohr. The DFT levels and the PySCF calculation itself live in
engines/dft.py (re-exported here: Level, PRESETS, parse_level, check_level).
"""

import math
import time
from dataclasses import replace

import numpy as np

from .analysis import analyse_profile
from .engines.dft import PRESETS, TEST_MOLECULE, DftEngine, Level, check_level, parse_level
from .errors import InputError
from .freeenergy import rotor_and_rates
from .records import MethodDisagreement, RescoredProfile
from .thermo import is_s_cis
from .torsionfit import profile_errors
from .units import ANGSTROM_BOHR, BOHR_ANGSTROM

__all__ = ["Level", "PRESETS", "TEST_MOLECULE", "parse_level", "check_level", "check_rescoring", "single_point",
           "disagreement", "rescore_bond", "rescore_result", "DISAGREEMENT_KCAL_MOL"]

DISAGREEMENT_KCAL_MOL = 1.0  # largest point difference (after the best constant shift) that is not flagged


def check_rescoring(level_text, settings):
    """The Level of a re-scoring request, checked on a closed-shell test molecule before any scan
    runs (InputError otherwise); rescore_result checks it again on the scanned molecule."""
    level = parse_level(level_text)
    if settings.solvent:
        raise InputError("DFT re-scoring is gas phase only: drop --solvent or --rescore")
    check_level(level)
    return level


def single_point(symbols, coords_angstrom, level, charge=0, unpaired_electrons=0, threads=None):
    """DFT energy (Hartree) of one geometry (Angstrom), with the dispersion correction when the level has one
    (DftEngine.energy: the same SCF as the engine's gradients)."""
    engine = DftEngine(symbols, level, charge, unpaired_electrons, threads)
    return engine.energy(np.asarray(coords_angstrom, dtype=float) * ANGSTROM_BOHR)


def _region(minimum):
    return None if minimum is None else ("s-cis" if is_s_cis(minimum.angle_deg) else "s-trans")


def disagreement(bond, analysis, energies_hartree, method):
    """MethodDisagreement of a re-scored profile (analysis; energies_hartree per relaxed point)
    against the bond's own profile computed with `method`, at the same geometries."""
    pairs = [(p, n) for p, n in bond.points_with_frames() if math.isfinite(energies_hartree[n])]
    semi = [bond.profile.relative_kcal_mol(p.energy_hartree) for p, _ in pairs]
    rescored = [analysis.relative_kcal_mol(energies_hartree[n]) for _, n in pairs]
    rms, largest = profile_errors(semi, rescored)
    reasons = []
    if largest > DISAGREEMENT_KCAL_MOL:
        reasons.append(f"the profiles differ by up to {largest:.2f} kcal/mol")
    semi_region, rescored_region = _region(bond.profile.lowest_minimum()), _region(analysis.lowest_minimum())
    if semi_region != rescored_region:
        reasons.append(f"the lowest conformer is {semi_region} with {method} but {rescored_region} re-scored")
    if len(bond.profile.minima) != len(analysis.minima):
        reasons.append(f"{len(bond.profile.minima)} minima with {method} but {len(analysis.minima)} re-scored")
    warning = ("; ".join(reasons) + ": treat the semi-empirical numbers with caution") if reasons else None
    return MethodDisagreement(rms, largest, DISAGREEMENT_KCAL_MOL, warning)


def rescore_bond(result, bond, level, threads=None):
    """The RescoredProfile of one bond: single points at its relaxed points, analysed like the scan."""
    started = time.perf_counter()
    engine = DftEngine(result.symbols, level, result.charge, result.unpaired_electrons, threads)
    energies = tuple(engine.energy(p.coords_bohr) for p in bond.relaxed_points)
    pairs = bond.points_with_frames()
    analysis = analyse_profile([p.angle_deg for p, _ in pairs], [energies[n] for _, n in pairs], bond.symmetric,
                               result.settings.temperatures_k, result.settings.scis_window_deg)
    analysis = rotor_and_rates(analysis, result.mol, bond.dihedral_atoms, result.settings.temperatures_k,
                               result.settings.scis_window_deg, bond.profile.lowest_minimum().coords_bohr)
    return RescoredProfile(level.label, level.reference, energies, analysis,
                           disagreement(bond, analysis, energies, result.method), time.perf_counter() - started)


def rescore_result(result, level, threads=None):
    """The ScanResult with every bond's `rescored` set; level: a Level or its text (parse_level).

    Gas phase only (InputError for a scan in implicit solvent); the level is checked on the
    scanned molecule's elements, charge and spin before the first single point.
    """
    if isinstance(level, str):
        level = parse_level(level)
    if result.settings.solvent:
        raise InputError("DFT re-scoring is gas phase only: the scan used an implicit solvent; "
                         "rescore a gas-phase scan")
    check_level(level, result.symbols, result.charge, result.unpaired_electrons,
                coords_angstrom=result.start_coords_bohr * BOHR_ANGSTROM)
    bonds = tuple(replace(bond, rescored=rescore_bond(result, bond, level, threads)) for bond in result.bonds)
    return replace(result, bonds=bonds)
