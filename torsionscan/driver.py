"""The scan driver: start structure, two-way sweeps over a scan coordinate, refinement of the
stationary points, frequencies, and the scan() entry point.

From the start minimum the coordinate is driven over its grid along the two chains of its visit
plan (coordinate.ScanCoordinate), each point warm-started from its neighbour (geometry rigidly
turned about the bond and the neighbour's quasi-Newton Hessian turned with it). Every grid point
is reached once from each direction; where the two arrivals differ the lower energy is kept and
a difference above the hysteresis threshold is recorded. The profile is then analysed by
analysis.analyse_profile with the refinement of its minima and maxima done here. Independent
pieces (start structures, the two chains, the relaxations of a refinement stage, shares of the
displaced gradients) run side by side through parallel.ParallelRelaxations.
"""

import functools
import logging
import time
from dataclasses import replace

import numpy as np

from .version import __version__
from . import geometry
from .analysis import analyse_profile, display_angle, in_arc, is_symmetric_rotor_profile
from .bonding import graph_bonds
from .coordinate import ScanCoordinate, mirror, mirror_hessian
from .engines import CHARGE, CONJUGATION, SOLVENT, SPIN, make_engine
from .errors import CalculationError, InputError
from .freeenergy import Hessians, add_free_energies, rotor_and_rates
from .molecule import (
    atom_orders, find_conjugated_bonds, is_diene_bond, load_molecule, select_bond, side_atoms, starting_structures,
)
from .parallel import ParallelRelaxations
from .records import BondScan, Hysteresis, ScanPoint, ScanResult, StationaryRecord
from .relax import RelaxJob, bonding_change
from .settings import ScanSettings
from .units import ANGSTROM_BOHR, HARTREE_KCAL_MOL, wrap_deg

log = logging.getLogger(__name__)
MAX_GAP_DEG = 90.0  # widest arc without a converged point that a profile may be fitted across
# Start structures this close are one: the force-field minimum that several seeded embeddings reach
# (on the demo list, 33 of 50 embeddings repeat an earlier one within 0.0013 Bohr; the others are
# at least 1.7 Bohr from each other)
SAME_START_BOHR = 0.01


def relax_start(molecule, workers, settings, orders):
    """Lowest minimum among the seeded start structures, relaxed side by side (workers:
    parallel.ParallelRelaxations), each only once: a structure that matches an earlier one (orders:
    molecule.atom_orders; equivalent atoms exchanged, mirror images allowed, within
    SAME_START_BOHR) is left out. Returns (coords_bohr, energy, hessian, gradient evaluations)."""
    before = workers.evaluations
    structures = [coords * ANGSTROM_BOHR for coords in starting_structures(molecule, settings.conformers, settings.seed)]
    jobs = [RelaxJob(structures[n], settings.start_convergence)
            for n in geometry.distinct_structures(structures, *orders, SAME_START_BOHR)]
    results = workers.relax_jobs(jobs)
    done = [r for r in results if not isinstance(r, CalculationError)]
    if not done:
        raise CalculationError(str(results[0]) if results else "no start structure could be optimised")
    best = max(done, key=lambda r: (r.converged, -r.energy))  # the first of equals, as in order
    return best.x.reshape(-1, 3), best.energy, best.hessian, workers.evaluations - before


def _fell_apart(point):
    """Whether a ScanPoint failed because its bonding changed during relaxation."""
    return bool(bonding_change(point.failure))


def _failed_point(target_deg, coords, evaluations, reason):
    return ScanPoint(
        angle_deg=float(target_deg), measured_angle_deg=float("nan"), energy_hartree=float("nan"),
        converged=False, gradient_evaluations=evaluations, max_gradient=float("nan"),
        coords_bohr=coords, failure=reason,
    )


class BondScanner:
    """Carries the state of one bond's scan (visits with their Hessians) between its stages."""

    def __init__(self, molecule, bond, settings, relax_many, conjugation=False):
        """relax_many(jobs) -> results runs the refinement's independent relaxations (jobs:
        RelaxJob; results: OptimizationResult or the CalculationError, in order); conjugation:
        the sweeps' engines offer engines.CONJUGATION (bond order and gap at every point)."""
        self.bond = bond
        self.settings = settings
        self.relax_many = relax_many
        self.coordinate = ScanCoordinate(
            dihedrals=(bond.atoms,), moving=(tuple(int(a) for a in side_atoms(molecule, *bond.atoms[1:3])),),
            step_deg=settings.step_deg, mirror_symmetric=not molecule.has_stereocentres,
        )
        self.symmetric = self.coordinate.mirror_symmetric
        self.conjugation = conjugation
        self.visits = {}  # canonical grid point -> list of (ScanPoint, hessian)

    def _point(self, result, index):
        coords = result.x.reshape(-1, 3)
        (target,) = self.coordinate.angles_deg(index)
        (measured,) = self.coordinate.measure_deg(coords)
        return ScanPoint(
            angle_deg=float(wrap_deg(target)), measured_angle_deg=measured, energy_hartree=result.energy,
            converged=result.converged, gradient_evaluations=result.evaluations, max_gradient=result.max_gradient,
            coords_bohr=coords,
        )

    def held_job(self, coords, hessian, angles_deg, convergence):
        """The RelaxJob of a structure turned to the angles and held there."""
        turned, turned_hessian = self.coordinate.turn(coords, hessian, angles_deg)
        return RelaxJob(turned, convergence, turned_hessian, tuple(self.coordinate.constraints(angles_deg)))

    def _visit(self, relaxer, index, coords, hessian):
        """(index, ScanPoint, Hessian) of grid point index relaxed from coords turned to it."""
        angle = float(wrap_deg(self.coordinate.angles_deg(index)[0]))
        evaluations_before = relaxer.engine.evaluations
        try:
            job = self.held_job(coords, hessian, self.coordinate.angles_deg(index), self.settings.point_convergence)
            result = relaxer.relax(job.coords_bohr, job.convergence, job.hessian, job.constraints)
            point = self._point(result, index)
            if self.conjugation:
                order, gap = relaxer.engine.conjugation(point.coords_bohr, *self.bond.atoms[1:3])
                point = replace(point, central_bond_order=order, homo_lumo_gap_ev=gap)
        except CalculationError as error:
            used = relaxer.engine.evaluations - evaluations_before
            log.warning("dihedral %s: point %.1f deg failed: %s", self.bond.label, angle, error)
            return index, _failed_point(angle, coords, used, str(error)), hessian
        return index, point, result.hessian

    def sweep(self, start_coords, start_hessian, workers):
        """Run both chains of the visit plan from the start structure, side by side (workers:
        parallel.ParallelRelaxations); the visits recorded in chain order."""
        start, coords, hessian = self.coordinate.start_point(start_coords, start_hessian)

        def run_chain(relaxer, chain):
            visits, here = [], (coords, hessian)
            for index in chain:
                visits.append(self._visit(relaxer, index, *here))
                point, point_hessian = visits[-1][1:]
                if np.isfinite(point.energy_hartree):
                    here = (point.coords_bohr, point_hessian)
            return visits

        for visits in workers.map(run_chain, self.coordinate.sweep_chains(start)):
            for index, point, hessian in visits:
                self.record_visit(index, point, hessian)

    def chosen_points(self):
        """Best visit per grid point (converged first, then lowest energy; of failed ones, one whose
        bonding changed), plus hysteresis records."""
        chosen, hysteresis = {}, []
        for index, visits in sorted(self.visits.items()):
            ok = [v for v in visits if v[0].converged]
            pool = ok or [v for v in visits if np.isfinite(v[0].energy_hartree)] or visits
            # among failed visits only, one whose structure fell apart says the most
            chosen[index] = min(pool, key=lambda v: (v[0].energy_hartree if np.isfinite(v[0].energy_hartree) else np.inf,
                                                     not _fell_apart(v[0])))
            if len(ok) > 1:
                energies = [v[0].energy_hartree for v in ok]
                spread = (max(energies) - min(energies)) * HARTREE_KCAL_MOL
                if spread > self.settings.hysteresis_kcal_mol:
                    hysteresis.append(Hysteresis(chosen[index][0].angle_deg, spread))
        return chosen, hysteresis

    def full_circle(self, chosen):
        """Points around the whole circle (mirror images added for symmetric profiles), by angle."""
        points = dict(chosen)
        if self.symmetric:
            for index, (point, hessian) in chosen.items():
                image = self.coordinate.mirror_index(index)
                if image not in chosen:
                    points[image] = (replace(
                        point, angle_deg=-point.angle_deg, measured_angle_deg=-point.measured_angle_deg,
                        coords_bohr=mirror(point.coords_bohr), mirrored=True,
                    ), mirror_hessian(hessian))
        return sorted(points.values(), key=lambda item: display_angle(item[0].angle_deg))

    def analyse(self):
        """(circle of (point, hessian), points by angle, ProfileAnalysis, hysteresis) of the visits made:
        the profile fitted and its minima and maxima refined with this scanner's engine."""
        chosen, hysteresis = self.chosen_points()
        circle = self.full_circle(chosen)
        changed = [p for p, _ in circle if _fell_apart(p)]
        if 2 * len(changed) > len(circle):
            raise CalculationError(
                f"dihedral {self.bond.label}: {bonding_change(changed[0].failure)} at "
                f"{changed[0].angle_deg:.0f} deg ({len(changed)} of {len(circle)} points changed their bonding); "
                "this structure is not stable as given: check --charge and --unpaired-electrons")
        good = [p for p, _ in circle if p.converged]
        if len(good) < 5:
            raise CalculationError(f"dihedral {self.bond.label}: only {len(good)} scan points converged; "
                                   "try another --engine or check the structure")
        angles = sorted(p.angle_deg % 360.0 for p in good)
        gaps = [((b - a) % 360.0, a) for a, b in zip(angles, angles[1:] + angles[:1])]
        widest, after = max(gaps)
        if widest > MAX_GAP_DEG:
            inside = [p for p, _ in circle if in_arc(p.angle_deg, after, after + widest) and p.failure]
            # a structure that fell apart there explains the others best (their constraints may fail first)
            failed = next((p for p in inside if _fell_apart(p)), inside[0] if inside else None)
            raise CalculationError(
                f"dihedral {self.bond.label}: no converged point from {display_angle(after):.0f} to "
                f"{display_angle(after + widest):.0f} deg, so the profile cannot be fitted there"
                + (f" (at {failed.angle_deg:.0f} deg: {failed.failure})" if failed else ""))
        profile = analyse_profile(
            [p.angle_deg for p in good], [p.energy_hartree for p in good], self.symmetric,
            self.settings.temperatures_k, self.settings.scis_window_deg,
            refine=lambda requests: self.refine(circle, requests),
        )
        points = tuple(sorted((replace(p, angle_deg=display_angle(p.angle_deg)) for p, _ in circle),
                              key=lambda p: p.angle_deg))
        return circle, points, profile, tuple(hysteresis)

    def record_visit(self, index, point, hessian):
        """Add a point computed elsewhere (a refinement) as a visit of grid point index."""
        self.visits.setdefault(self.coordinate.canonical(index), []).append((point, hessian))

    def nearest(self, circle, angle_deg):
        """The usable circle entry (point, hessian) nearest to angle_deg."""
        usable = [item for item in circle if np.isfinite(item[0].energy_hartree)]
        return min(usable, key=lambda item: abs(wrap_deg(item[0].angle_deg - angle_deg)))

    def refine(self, circle, requests):
        """Records of fitted stationary points, requests: (stationary, basin) pairs. Minima by free
        optimisation (constrained at the fitted angle if that leaves the basin), maxima constrained;
        on a symmetric profile a point at a negative angle is the mirror image of its partner, so
        each pair costs one optimisation. All relaxations of a stage go to relax_many together. A
        failed refinement falls back to the nearest grid point, flagged."""
        unique = {}
        for stationary, basin in requests:
            if self.symmetric and stationary.angle_deg < -1e-9:
                stationary, basin = replace(stationary, angle_deg=-stationary.angle_deg), (-basin[1], -basin[0])
            unique.setdefault((stationary.kind, round(stationary.angle_deg, 9)), (stationary, basin))
        refined = self._refine_unique(circle, list(unique.values()))
        records = []
        for stationary, _ in requests:
            fit_angle = stationary.angle_deg
            if self.symmetric and fit_angle < -1e-9:
                image = refined[(stationary.kind, round(-fit_angle, 9))]
                records.append(replace(image, angle_deg=display_angle(-image.angle_deg), fit_angle_deg=fit_angle,
                                       coords_bohr=None if image.coords_bohr is None else mirror(image.coords_bohr)))
            else:
                records.append(refined[(stationary.kind, round(fit_angle, 9))])
        return records

    def _refine_unique(self, circle, items):
        """{(kind, fit angle): StationaryRecord} of distinct (stationary, basin) items, in two stages
        of relaxations: free minima and held maxima, then held minima that left their basin."""
        convergence = self.settings.refine_convergence
        done, first, second = {}, [], []
        for stationary, basin in items:
            key = (stationary.kind, round(stationary.angle_deg, 9))
            point, hessian = self.nearest(circle, stationary.angle_deg)
            if stationary.kind == "minimum":
                first.append((key, stationary, basin, RelaxJob(point.coords_bohr, convergence, hessian, ())))
            else:
                first.append((key, stationary, basin, self.held_job(point.coords_bohr, hessian, (stationary.angle_deg,), convergence)))
        for (key, stationary, basin, _), result in zip(first, self.relax_many([item[3] for item in first])):
            if isinstance(result, CalculationError):
                done[key] = self._fallback(circle, stationary, result)
            elif stationary.kind == "maximum":
                done[key] = self._stationary(result, "maximum", stationary.angle_deg, "constrained at the fitted angle")
            elif in_arc(self.coordinate.measure_deg(result.x)[0], *basin):
                done[key] = self._stationary(result, "minimum", stationary.angle_deg, "free optimisation")
            else:
                point, hessian = self.nearest(circle, stationary.angle_deg)
                second.append((key, stationary, self.held_job(point.coords_bohr, hessian, (stationary.angle_deg,), convergence)))
        for (key, stationary, _), result in zip(second, self.relax_many([item[2] for item in second])):
            done[key] = (self._fallback(circle, stationary, result) if isinstance(result, CalculationError) else
                         self._stationary(result, "minimum", stationary.angle_deg,
                                          "constrained at the fitted angle (free optimisation left the basin)"))
        return done

    def _fallback(self, circle, stationary, error):
        point, _ = self.nearest(circle, stationary.angle_deg)
        return StationaryRecord(
            stationary.kind, point.angle_deg, stationary.angle_deg, point.energy_hartree,
            f"refinement failed ({error}); nearest grid point used", False, point.coords_bohr,
        )

    def _stationary(self, result, kind, fit_angle, how):
        coords = result.x.reshape(-1, 3)
        return StationaryRecord(kind, display_angle(self.coordinate.measure_deg(coords)[0]), fit_angle,
                                result.energy, how, result.converged, coords)


def scan_bond(molecule, bond, workers, start, settings, conjugation, hessians):
    """Relaxed scan of one dihedral from the start minimum `start` = (coords, energy, hessian);
    workers: parallel.ParallelRelaxations; conjugation: its engines offer engines.CONJUGATION;
    hessians: the molecule's freeenergy.Hessians, shared between its bonds."""
    began = time.perf_counter()
    evaluations_before = workers.evaluations
    scanner = BondScanner(molecule, bond, settings, workers.relax_jobs, conjugation)
    scanner.sweep(start[0], start[2], workers)
    swept = workers.evaluations - evaluations_before
    circle, points, profile, hysteresis = scanner.analyse()
    bond_scan = BondScan(
        dihedral_atoms=bond.atoms, conjugated=bond.conjugated, symmetric=scanner.symmetric,
        points=points, profile=profile, hysteresis=hysteresis,
        hysteresis_threshold_kcal_mol=settings.hysteresis_kcal_mol,
        gradient_evaluations_total=workers.evaluations - evaluations_before,
        wall_time_s=time.perf_counter() - began, sweep_gradient_evaluations=swept,
    )
    if settings.frequencies:
        planar_start = None
        if is_diene_bond(molecule.mol, bond.atoms):
            planar_start = scanner.nearest(circle, 0.0)
        scanned, started = workers.evaluations, time.perf_counter()
        try:
            bond_scan = replace(bond_scan, profile=add_free_energies(
                bond_scan.profile, bond.atoms, bond_scan.symmetric, workers, hessians, settings,
                planar_start and (planar_start[0].coords_bohr, planar_start[1]), scanner.coordinate.moving[0]))
        except (CalculationError, ValueError, np.linalg.LinAlgError) as error:
            log.warning("dihedral %s: frequencies failed (%s); free energies left out", bond.label, error)
        bond_scan = replace(bond_scan, frequency_gradient_evaluations=workers.evaluations - scanned,
                            frequency_wall_time_s=time.perf_counter() - started)
    profile = rotor_and_rates(bond_scan.profile, molecule.mol, bond.atoms, settings.temperatures_k,
                              settings.scis_window_deg)
    return replace(bond_scan, profile=profile, scis_meaning=bond.scis_meaning,
                   symmetric_rotor=bond.symmetric_rotor_candidate and is_symmetric_rotor_profile(profile.fit))


def _check_capabilities(engine, molecule, settings):
    """InputError when a given engine cannot do what the molecule and settings ask."""
    needed = [(SOLVENT, settings.solvent, f"an implicit solvent ({settings.solvent})"),
              (CHARGE, molecule.charge, f"a charge of {molecule.charge}"),
              (SPIN, molecule.unpaired_electrons, f"{molecule.unpaired_electrons} unpaired electron(s)")]
    for capability, asked, what in needed:
        if asked and capability not in engine.capabilities:
            raise InputError(f"the {engine.name} engine cannot handle {what}; choose another engine or drop it")


def scan(source, *, bond=None, name=None, charge=None, unpaired_electrons=0, record=1, settings=None,
         time_limit_s=None, engine=None, cores=1):
    """Relaxed torsion scan of every conjugated single bond of a molecule (or the one `bond` names).

    source: SMILES string, MOL/SDF/XYZ path or RDKit molecule; bond: 1-based "j-k" or "i-j-k-l".
    time_limit_s: wall-clock seconds allowed for the whole molecule (checked before each gradient).
    engine: an engine object for this molecule (engines.Engine), used for everything in turn;
    default: a fresh GFN-xTB engine of the settings' kind for each independent piece of work.
    cores: threads for those pieces (start structures, the two sweep chains, refinement stages,
    displaced gradients; the default engines only), results identical for any number. Returns a
    ScanResult; raises InputError, CalculationError or TimeLimitExceeded.
    """
    deadline = None if time_limit_s is None else time.monotonic() + time_limit_s
    settings = settings or ScanSettings()
    settings.check()
    molecule = load_molecule(source, name=name, charge=charge, unpaired_electrons=unpaired_electrons, record=record)
    bonds = [select_bond(molecule, bond)] if bond else find_conjugated_bonds(molecule)
    if not bonds:
        raise InputError(
            f"{molecule.smiles}: no conjugated single bond found; pick a bond with --bond j-k (1-based atom numbers)"
        )
    if engine is not None:
        _check_capabilities(engine, molecule, settings)
        factory, cores = (lambda: engine), 1
    else:
        factory = functools.partial(
            make_engine, molecule.numbers, charge=molecule.charge, unpaired_electrons=molecule.unpaired_electrons,
            method=settings.method, backend=settings.engine, solvent=settings.solvent,
            solvation=settings.solvation_model,
        )
        engine = factory()
    conjugation = CONJUGATION in engine.capabilities
    scans, failed = [], []
    with ParallelRelaxations(factory, molecule.numbers, cores, deadline, graph_bonds(molecule.mol)) as workers:
        orders = atom_orders(molecule.mol)
        hessians = Hessians(workers.gradients_from_reference, molecule.numbers,
                             [a.GetMass() for a in molecule.mol.GetAtoms()], orders)
        coords, energy, hessian, start_evaluations = relax_start(molecule, workers, settings, orders)
        for b in bonds:
            try:
                scans.append(scan_bond(molecule, b, workers, (coords, energy, hessian), settings, conjugation,
                                       hessians))
            except CalculationError as error:
                log.warning("dihedral %s failed: %s", b.label, error)
                failed.append((b.label, str(error)))
    if not scans:
        raise CalculationError("; ".join(f"bond {label}: {reason}" for label, reason in failed))
    return ScanResult(
        name=molecule.name, smiles=molecule.smiles, mol=molecule.mol, symbols=tuple(molecule.symbols),
        charge=molecule.charge, unpaired_electrons=molecule.unpaired_electrons,
        method=engine.method, engine=engine.name, caution=engine.caution, program=f"torsionscan {__version__}",
        settings=settings,
        start_energy_hartree=energy, start_coords_bohr=coords,
        start_gradient_evaluations=start_evaluations, bonds=tuple(scans), failed_bonds=tuple(failed),
    )
