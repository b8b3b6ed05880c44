"""Refinement of a finished scan at a higher level: the scan's structures re-optimised with the
dihedral held exactly, and the refined profile analysed exactly like the scan's.

points "all": every computed grid point is re-optimised, then the profile goes through the
scan driver's own analysis (driver.BondScanner.analyse: Fourier fit, minima by free
optimisation and barrier tops constrained at the fitted angle, refined off-grid at the new
level, flat pairs merged, barriers, populations). points "stationary": only the scan's minima
(free optimisation), barrier tops (held at the scan's angle) and, for dienes, the planar s-cis
structure (held at 0 deg); no profile is fitted.

Every optimisation starts from the scan's relaxed structure and Lindh's model Hessian (the
scan's final quasi-Newton Hessians are not kept in the records). Independent optimisations run
in parallel processes when `processes` > 1; each process builds its own engine from the
picklable `engine_factory`. Free energies carry the scan's thermal corrections over
(THERMAL_NOTE): a Hessian at a DFT level costs 6N gradients per stationary point.
"""

import math
import multiprocessing
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import replace

import numpy as np

from .analysis import barriers_between, display_angle
from .coordinate import DihedralConstraint
from .driver import BondScanner
from .errors import CalculationError, InputError
from .freeenergy import readiness, rotor_and_rates, rrho_populations
from .geometry import dihedral
from .molecule import Molecule, TorsionBond, is_diene_bond
from .records import ProfileAnalysis, ReferencePoint, RefinedProfile, ScanPoint, StationaryRecord
from .reference import LABEL as REFERENCE_LABEL
from .reference import check_reference, focal_point_energy
from .relax import Relaxer
from .rescore import disagreement
from .units import wrap_deg

POINT_MODES = ("all", "stationary")
THERMAL_NOTE = ("thermal corrections (G - E) and frequencies of the scan's stationary point of the same kind "
                "nearest in angle, carried over: no Hessian is computed at the refined level")


def _optimise(job):
    """One optimisation at the refined level (in this or a worker process): a plain-data outcome."""
    engine_factory, numbers, coords, angle_deg, atoms, convergence = job
    engine = engine_factory()
    constraints = [] if angle_deg is None else [DihedralConstraint(atoms, math.radians(angle_deg))]
    try:
        result = Relaxer(engine, numbers).relax(coords, convergence, None, constraints)
    except CalculationError as error:
        return {"failure": str(error), "evaluations": engine.evaluations}
    return {"coords": result.x.reshape(-1, 3), "energy": result.energy, "converged": result.converged,
            "evaluations": result.evaluations, "max_gradient": result.max_gradient, "hessian": result.hessian}


def _optimise_all(jobs, processes):
    """Outcomes of the jobs, in order; in parallel spawned processes when processes > 1."""
    if processes <= 1 or len(jobs) <= 1:
        return [_optimise(job) for job in jobs]
    with ProcessPoolExecutor(max_workers=min(processes, len(jobs)),
                             mp_context=multiprocessing.get_context("spawn")) as pool:
        return list(pool.map(_optimise, jobs))


def _carried_over(records, scanned):
    """records with the thermal corrections (and frequencies, for rates) of the scanned record of the
    same kind nearest in angle; records whose refinement failed (no finite energy) are left out."""
    records = tuple(r for r in records if math.isfinite(r.energy_hartree))
    carried = []
    for record in records:
        same = [s for s in scanned if s.kind == record.kind and s.gibbs_corrections_kcal_mol]
        if not same:
            return records, False
        source = min(same, key=lambda s: abs(wrap_deg(s.angle_deg - record.angle_deg)))
        carried.append(replace(record, gibbs_corrections_kcal_mol=source.gibbs_corrections_kcal_mol,
                               other_modes_gibbs_kcal_mol=source.other_modes_gibbs_kcal_mol,
                               frequencies_cm1=source.frequencies_cm1, imaginary_count=source.imaginary_count,
                               imaginary_along_torsion=source.imaginary_along_torsion))
    return tuple(carried), True


def _with_free_energies(analysis, scanned, planar, temperatures_k):
    """The analysis with carried-over corrections, free-energy populations and (dienes) readiness."""
    minima, ok = _carried_over(analysis.minima, scanned.minima)
    maxima, _ = _carried_over(analysis.maxima, scanned.maxima)
    if not ok or not minima:
        return replace(analysis, minima=minima, maxima=maxima, planar_scis=planar)
    update = dict(minima=minima, maxima=maxima, rrho_populations=rrho_populations(minima, temperatures_k),
                  planar_scis=planar)
    if planar is not None and math.isfinite(planar.energy_hartree) and scanned.planar_scis is not None:
        planar = replace(planar, gibbs_corrections_kcal_mol=scanned.planar_scis.gibbs_corrections_kcal_mol)
        update.update(planar_scis=planar, readiness=readiness(minima, planar, temperatures_k))
    return replace(analysis, **update)


def _planar_record(energy, coords, converged, how):
    return StationaryRecord("planar s-cis", 0.0, 0.0, energy, how, converged, coords)


def _refine_all(result, bond, engine_factory, processes):
    """(points, analysis, disagreement, evaluations) with every computed grid point re-optimised."""
    settings, numbers = result.settings, np.array([a.GetAtomicNum() for a in result.mol.GetAtoms()])
    sources = bond.relaxed_points
    jobs = [(engine_factory, numbers, p.coords_bohr, p.angle_deg, bond.dihedral_atoms, settings.point_convergence)
            for p in sources]
    outcomes = _optimise_all(jobs, processes)
    engine = engine_factory()
    molecule = Molecule(result.name, result.mol, result.charge, result.unpaired_electrons)
    scanner = BondScanner(molecule, TorsionBond(bond.dihedral_atoms, bond.conjugated), Relaxer(engine, numbers),
                          settings)
    energies = []
    for source, outcome in zip(sources, outcomes):
        index = (int(round(source.angle_deg / settings.step_deg)),)
        if "failure" in outcome:
            point = replace(source, measured_angle_deg=math.nan, energy_hartree=math.nan, converged=False,
                            gradient_evaluations=outcome["evaluations"], max_gradient=math.nan,
                            failure=outcome["failure"], central_bond_order=math.nan, homo_lumo_gap_ev=math.nan)
            hessian = np.eye(3 * len(numbers))
        else:
            point = ScanPoint(
                angle_deg=source.angle_deg, measured_angle_deg=scanner.coordinate.measure_deg(outcome["coords"])[0],
                energy_hartree=outcome["energy"], converged=outcome["converged"],
                gradient_evaluations=outcome["evaluations"], max_gradient=outcome["max_gradient"],
                coords_bohr=outcome["coords"],
            )
            hessian = outcome["hessian"]
        energies.append(point.energy_hartree)
        scanner.record_visit(index, point, hessian)
    circle, points, analysis, _ = scanner.analyse()
    planar = None
    if is_diene_bond(result.mol, bond.dihedral_atoms):
        at_zero, _ = scanner.nearest(circle, 0.0)
        if abs(wrap_deg(at_zero.angle_deg)) < 1e-9:
            planar = _planar_record(at_zero.energy_hartree, at_zero.coords_bohr, at_zero.converged,
                                    "grid point held at 0 deg")
    analysis = _with_free_energies(analysis, bond.profile, planar, settings.temperatures_k)
    analysis = rotor_and_rates(analysis, result.mol, bond.dihedral_atoms, settings.temperatures_k,
                               settings.scis_window_deg)
    verdict = disagreement(bond, analysis, tuple(energies), result.method)
    evaluations = sum(o["evaluations"] for o in outcomes) + engine.evaluations
    return points, analysis, verdict, evaluations


def _refine_stationary(result, bond, engine_factory, processes):
    """(analysis, evaluations) with only the scan's stationary points (and planar s-cis) re-optimised."""
    settings, numbers = result.settings, np.array([a.GetAtomicNum() for a in result.mol.GetAtoms()])
    scanned = bond.profile
    targets = [(m, None, "free optimisation") for m in scanned.minima]
    targets += [(m, m.angle_deg, "held at the scan's angle") for m in scanned.maxima]
    if is_diene_bond(result.mol, bond.dihedral_atoms):
        start = scanned.planar_scis or min(bond.relaxed_points, key=lambda p: abs(wrap_deg(p.angle_deg)))
        targets.append((_planar_record(start.energy_hartree, start.coords_bohr, True, ""), 0.0, "held at 0 deg"))
    missing = [t[0].kind for t in targets if t[0].coords_bohr is None]
    if missing:
        raise InputError(f"bond {bond.label}: the scan has no structure for its {missing[0]}; rerun the scan")
    jobs = [(engine_factory, numbers, record.coords_bohr, angle, bond.dihedral_atoms, settings.refine_convergence)
            for record, angle, _ in targets]
    outcomes = _optimise_all(jobs, processes)
    coordinate_atoms = bond.dihedral_atoms
    records, planar = [], None
    for (record, _, how), outcome in zip(targets, outcomes):
        if "failure" in outcome:
            refined = replace(record, energy_hartree=math.nan, converged=False,
                              refinement=f"refinement failed ({outcome['failure']})", frequencies_cm1=(),
                              imaginary_count=None, imaginary_along_torsion=None, gibbs_corrections_kcal_mol=())
        else:
            angle = display_angle(math.degrees(dihedral(outcome["coords"], *coordinate_atoms)))
            refined = StationaryRecord(record.kind, angle, record.fit_angle_deg, outcome["energy"], how,
                                       outcome["converged"], outcome["coords"])
        if record.kind == "planar s-cis":
            planar = refined
        else:
            records.append(refined)
    minima = tuple(r for r in records if r.kind == "minimum")
    maxima = tuple(r for r in records if r.kind == "maximum")
    usable = [m.energy_hartree for m in minima if m.converged and math.isfinite(m.energy_hartree)]
    if not usable:
        raise CalculationError(f"bond {bond.label}: no minimum could be refined")
    analysis = ProfileAnalysis(reference_energy_hartree=min(usable), fit=None, minima=minima, maxima=maxima,
                               barriers=tuple(barriers_between(list(minima), list(maxima))), populations=())
    analysis = _with_free_energies(analysis, scanned, planar, settings.temperatures_k)
    return analysis, sum(o["evaluations"] for o in outcomes)


def refine_result(result, engine_factory, level_label, level_reference="", points_mode="all", processes=1):
    """The ScanResult with every bond's `refined` profile at the level engine_factory() computes.

    engine_factory: picklable callable returning a fresh engine for this molecule (e.g.
    functools.partial of a DFT engine class); processes: parallel optimisations.
    """
    if points_mode not in POINT_MODES:
        raise InputError(f"--refine-points {points_mode!r}: choose {' or '.join(POINT_MODES)}")
    bonds = []
    for bond in result.bonds:
        started = time.perf_counter()
        if points_mode == "all":
            points, analysis, verdict, evaluations = _refine_all(result, bond, engine_factory, processes)
        else:
            (analysis, evaluations), points, verdict = _refine_stationary(result, bond, engine_factory, processes), (), None
        refined = RefinedProfile(level_label, level_reference, points_mode, points, analysis, verdict, evaluations,
                                 time.perf_counter() - started, THERMAL_NOTE)
        bonds.append(replace(bond, refined=refined))
    return replace(result, bonds=tuple(bonds))


def _reference_job(job):
    symbols, coords, charge, threads = job
    return focal_point_energy(symbols, coords, charge, threads)


def add_reference(result, processes=1, threads=None):
    """The ScanResult with coupled-cluster reference energies at every refined bond's minima,
    barrier tops and planar s-cis structure (refine_result first); InputError above the size limit."""
    check_reference(result.symbols, result.charge, result.unpaired_electrons)
    bonds = []
    for bond in result.bonds:
        if bond.refined is None:
            raise InputError(f"bond {bond.label}: the reference tier needs a refined profile; add --refine LEVEL")
        analysis = bond.refined.analysis
        records = [r for r in (*analysis.minima, *analysis.maxima, analysis.planar_scis)
                   if r is not None and r.coords_bohr is not None and r.converged]
        # a mirror image has the same energy: one calculation per |angle| on a symmetric profile
        key = (lambda r: (r.kind, round(abs(r.angle_deg), 1))) if bond.symmetric else (lambda r: (r.kind, r.angle_deg))
        distinct = list({key(r): r for r in records}.values())
        jobs = [(result.symbols, r.coords_bohr, result.charge, threads) for r in distinct]
        if processes > 1 and len(jobs) > 1:
            with ProcessPoolExecutor(max_workers=min(processes, len(jobs)),
                                     mp_context=multiprocessing.get_context("spawn")) as pool:
                energies = list(pool.map(_reference_job, jobs))
        else:
            energies = [_reference_job(job) for job in jobs]
        by_key = {key(r): e for r, e in zip(distinct, energies)}
        points = tuple(ReferencePoint(r.kind, r.angle_deg, by_key[key(r)]) for r in records)
        bonds.append(replace(bond, refined=replace(bond.refined, reference=points, reference_label=REFERENCE_LABEL)))
    return replace(result, bonds=tuple(bonds))
