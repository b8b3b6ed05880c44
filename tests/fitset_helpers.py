"""Synthetic runs for the torsion-type tests: model-potential scans (real relaxed frames in a few
tenths of a second) whose energies are replaced by MMFF94 without the bonds' torsion terms plus
known terms, stored in a real run database."""

from dataclasses import replace

import numpy as np

import torsionscan
from torsionscan import geometry
from torsionscan.analysis import analyse_profile
from torsionscan.compounds import CompoundEntry
from torsionscan.engines.model import ModelEngine
from torsionscan.mm import Mmff94
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.records import MethodDisagreement, RefinedProfile, RescoredProfile
from torsionscan.settings import ScanSettings
from torsionscan.store import RunStore
from torsionscan.torsionfit import TorsionTerm, term_energy
from torsionscan.units import BOHR_ANGSTROM, HARTREE_KCAL_MOL

TRUTH = (TorsionTerm(1, 0.0, 0.4), TorsionTerm(2, 180.0, 2.5), TorsionTerm(3, 0.0, 0.3))
OTHER_TRUTH = (TorsionTerm(1, 180.0, 1.1), TorsionTerm(2, 180.0, 1.6), TorsionTerm(3, 0.0, 0.05))
SETTINGS = ScanSettings(step_deg=30.0, conformers=1, frequencies=False)
# three molecules whose scanned bond has the MMFF94 atom types 2-2-2-2 (hexatriene has two such bonds)
DIENES = {"butadiene": "C=CC=C", "isoprene": "C=CC(C)=C", "hexatriene": "C=C/C=C/C=C"}
ENONE = {"acrolein": "C=CC=O"}  # types 2-2-3-7: a type of one molecule
# type 2-2-37-37 on both ortho quartets C1-C2-C3-C4 and C1-C2-C3-C8 (0-based: 0-1-2-3, 0-1-2-7)
STYRENES = {"styrene": "C=Cc1ccccc1", "4-methylstyrene": "C=Cc1ccc(C)cc1"}
# even periodicities only: odd ones nearly cancel between the two quartets and cannot be recovered
STYRENE_TRUTH = (TorsionTerm(2, 180.0, 1.8), TorsionTerm(4, 180.0, 0.15))


def model_scan(name, smiles):
    """A 30-degree scan on the analytic model potential: every conjugated bond modelled."""
    molecule = load_molecule(smiles)
    series = FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0))
    engine = ModelEngine(molecule.mol, [(b.atoms, series) for b in find_conjugated_bonds(molecule)])
    return torsionscan.scan(smiles, name=name, engine=engine, settings=SETTINGS)


def pseudo_energies(mol, bond, frames_angstrom, angles_deg, truth, quartets=None):
    """MMFF94 without the bond's torsion terms + truth, kcal/mol, shifted to a minimum of 0; truth on
    the scanned dihedral (angles_deg) or, given quartets, summed over those quartets."""
    _, without = Mmff94(mol, bond.dihedral_atoms[1:3]).energies(frames_angstrom)
    if quartets is None:
        values = without + term_energy(truth, angles_deg)
    else:
        values = without + sum(term_energy(truth, [np.degrees(geometry.dihedral(f, *q)) for f in frames_angstrom])
                               for q in quartets)
    return values - values.min()


def _frames(points):
    return [p.coords_bohr * BOHR_ANGSTROM for p in points]


def with_truth(result, truth=TRUTH, where="scan", offset_hartree=-150.0, quartets=None):
    """The result with every bond's profile replaced by pseudo_energies(truth), in the scan's own
    energies ("scan"), as a re-scored profile ("rescored") or as a refined profile ("refined") whose
    structures are the scan's scaled by 1.01 (same dihedrals, other MMFF94 energies). quartets:
    {bond label: quartets the truth acts on} ("scan" only; default the scanned dihedral)."""
    bonds = []
    for bond in result.bonds:
        relaxed = bond.relaxed_points
        if where == "refined":
            points = [replace(p, coords_bohr=p.coords_bohr * 1.01) for p in bond.points if np.isfinite(p.energy_hartree)]
            kcal = pseudo_energies(result.mol, bond, _frames(points), [p.measured_angle_deg for p in points], truth)
            points = tuple(replace(p, energy_hartree=offset_hartree + e / HARTREE_KCAL_MOL) for p, e in zip(points, kcal))
            analysis = analyse_profile([p.angle_deg for p in points], [p.energy_hartree for p in points], bond.symmetric,
                                       result.settings.temperatures_k, result.settings.scis_window_deg)
            refined = RefinedProfile(level="synthetic refined", level_reference="", points_mode="all", points=points,
                                     analysis=analysis, disagreement=None, gradient_evaluations=0, wall_time_s=0.0,
                                     thermal_note="")
            bonds.append(replace(bond, refined=refined))
            continue
        kcal = pseudo_energies(result.mol, bond, _frames(relaxed), [p.measured_angle_deg for p in relaxed], truth,
                               (quartets or {}).get(bond.label))
        hartree = offset_hartree + kcal / HARTREE_KCAL_MOL
        pairs = bond.points_with_frames()
        if where == "rescored":
            analysis = analyse_profile([p.angle_deg for p, _ in pairs], [hartree[n] for _, n in pairs], bond.symmetric,
                                       result.settings.temperatures_k, result.settings.scis_window_deg)
            rescored = RescoredProfile(level="synthetic level", level_reference="", energies_hartree=tuple(hartree),
                                       analysis=analysis, disagreement=MethodDisagreement(0.0, 0.0, 1.0, None),
                                       wall_time_s=0.0)
            bonds.append(replace(bond, rescored=rescored))
            continue
        energies = {id(p): float(hartree[n]) for p, n in pairs}
        points = tuple(replace(p, energy_hartree=energies[id(p)]) if id(p) in energies else p for p in bond.points)
        profile = analyse_profile([p.angle_deg for p in points], [p.energy_hartree for p in points], bond.symmetric,
                                  result.settings.temperatures_k, result.settings.scis_window_deg)
        bonds.append(replace(bond, points=points, profile=profile))
    return replace(result, bonds=tuple(bonds))


def write_run(folder, results):
    """A batch run folder (run.sqlite) holding the given ScanResults as done compounds."""
    with RunStore(folder) as store:
        store.claim_settings(SETTINGS.as_dict(), "list.csv")
        store.add_compounds([CompoundEntry(name=r.name, where=f"line {n + 2}", smiles=r.smiles)
                             for n, r in enumerate(results)])
        session = store.start_session("test")
        for r in results:
            store.record_done(r.name, r, session, 1.0)
    return folder
