"""Refinement of a finished scan at a higher level: the scan's structures re-optimised with the
dihedral held exactly, and the refined profile analysed exactly like the scan's.

points "all": every computed grid point is re-optimised, then the profile goes through the
scan driver's own analysis (driver.BondScanner.analyse: Fourier fit, minima by free
optimisation and barrier tops constrained at the fitted angle, refined off-grid at the new
level, flat pairs merged, barriers, populations). points "stationary": only the scan's minima
(free optimisation), barrier tops (held at the scan's angle) and, for dienes, the planar s-cis
structure (held at 0 deg); no profile is fitted.

Every optimisation starts from the scan's relaxed structure and the scan level's own
finite-difference Hessian there (start_hessians; cheap beside one DFT gradient). On a symmetric
profile each mirror pair is optimised once. Independent optimisations run in parallel processes
when `processes` > 1, each process building its own engine from the picklable `engine_factory`;
finished ones go to an optional checkpoint cache (relaxcache), so an interrupted refinement
resumes where it stopped. Free energies carry the scan's thermal corrections over
(THERMAL_NOTE): a Hessian at a DFT level costs 6N gradients per stationary point.
"""

import logging
import math
import multiprocessing
import time
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import replace

import numpy as np

from .analysis import barriers_between, display_angle
from .bonding import graph_bonds
from .coordinate import DihedralConstraint, mirror
from .driver import BondScanner
from .engines import make_engine
from .errors import CalculationError, InputError
from .freeenergy import crossing_tops, finite_difference_hessian, readiness, rotor_and_rates, rrho_populations
from .geometry import dihedral
from .molecule import Molecule, TorsionBond, is_diene_bond
from .records import ProfileAnalysis, ReferencePoint, RefinedProfile, ScanPoint, StationaryRecord
from .reference import LABEL as REFERENCE_LABEL
from .reference import check_reference, focal_point_energy
from .relax import Relaxer, RelaxJob
from .relaxcache import relaxation_key
from .rescore import disagreement
from .units import wrap_deg
from .version import __version__

log = logging.getLogger(__name__)
POINT_MODES = ("all", "stationary")
THERMAL_NOTE = ("thermal corrections (G - E) and frequencies of the scan's stationary point of the same kind "
                "nearest in angle, carried over: no Hessian is computed at the refined level")


def _relax(task):
    """One relaxation at the refined level (in this or a worker process): the OptimizationResult,
    or a CalculationError with the gradients it used as `evaluations`."""
    engine_factory, numbers, bonds, job = task
    engine = engine_factory()
    try:
        return Relaxer(engine, numbers, bonds=bonds).relax(job.coords_bohr, job.convergence, job.hessian,
                                                           job.constraints)
    except CalculationError as error:
        error.evaluations = engine.evaluations
        return error
    except Exception as error:  # a fault of the calculation library fails this point only
        failure = CalculationError(f"{type(error).__name__} in the calculation: {error}")
        failure.evaluations = engine.evaluations
        return failure


class Relaxations:
    """relax_many for a refinement (see driver.BondScanner): finished relaxations read from the
    checkpoint cache, the others run in parallel spawned processes (each building its own engine
    from the picklable engine_factory) and stored as they finish. Use as a context manager.

    identity: what besides the job determines a result (level, charge, spin, program version);
    start_engine: the scan-level engine whose finite-difference Hessian starts jobs given with
    scan_level_start (computed only for jobs not in the cache).
    """

    def __init__(self, engine_factory, numbers, bonds, identity, processes=1, cache=None, start_engine=None):
        self.engine_factory, self.numbers, self.bonds, self.identity = engine_factory, numbers, bonds, identity
        self.processes, self.cache, self.start_engine = processes, cache, start_engine
        self.evaluations = 0  # refined-level gradients of every relaxation returned, read from the cache or not
        self._pool = None

    def __enter__(self):
        return self

    def __exit__(self, kind, *exc):
        if self._pool is not None:
            if kind is not None:  # do not wait for the other optimisations of a failed refinement
                for process in list(getattr(self._pool, "_processes", {}).values()):
                    process.terminate()
            self._pool.shutdown(wait=kind is None, cancel_futures=True)
        return False

    def _run(self, jobs):
        tasks = [(self.engine_factory, self.numbers, self.bonds, job) for job in jobs]
        if self.processes <= 1 or len(tasks) <= 1:
            yield from map(_relax, tasks)
            return
        if self._pool is None:
            self._pool = ProcessPoolExecutor(max_workers=self.processes,
                                             mp_context=multiprocessing.get_context("spawn"))
        try:
            yield from self._pool.map(_relax, tasks)
        except BrokenProcessPool:
            raise CalculationError("a refinement process died (out of memory, or a crash in the calculation "
                                   "library); finished optimisations are kept: rerun with fewer --processes") from None

    def _start_hessian(self, coords):
        """The scan level's finite-difference Hessian at coords, or None (model Hessian) if it fails."""
        try:
            return start_hessians(self.start_engine, [coords])[0]
        except CalculationError as error:
            log.warning("no %s start Hessian (%s); the model Hessian starts this optimisation",
                        self.start_engine.method, error)
            return None

    def __call__(self, jobs, scan_level_start=False):
        """Results of the jobs in order (OptimizationResult or CalculationError); scan_level_start:
        the jobs' start Hessians are to be the start engine's (job.hessian is ignored)."""
        start = (f"start Hessian: {self.start_engine.method} finite differences" if scan_level_start
                 else "start Hessian: given")
        keys = [relaxation_key(self.identity, self.numbers, job, start) for job in jobs]
        results = [self.cache.get(key) if self.cache else None for key in keys]
        todo = [n for n, result in enumerate(results) if result is None]
        if scan_level_start:
            jobs = [replace(job, hessian=self._start_hessian(job.coords_bohr)) if n in todo else job
                    for n, job in enumerate(jobs)]
        for n, result in zip(todo, self._run([jobs[n] for n in todo])):
            results[n] = result
            if self.cache and not isinstance(result, CalculationError):
                self.cache.put(keys[n], self.identity, result)
        self.evaluations += sum(getattr(r, "evaluations", 0) for r in results)
        return results


def start_hessians(engine, coords_list):
    """Finite-difference Hessians (Hartree/Bohr^2) of engine at each structure (N, 3) Bohr: the
    scan level's curvature starts each refinement (measured on butadiene at the standard preset:
    3 DFT gradients per grid point against 3-6 from the model Hessian)."""
    return [finite_difference_hessian(lambda c: engine.energy_and_gradient(c)[1], coords) for coords in coords_list]


def _carried_over(records, scanned, needed=()):
    """records with the thermal corrections (and frequencies, for rates) of the scanned record of the
    same kind nearest in angle among those whose nature was checked (a top verified without a full
    Hessian carries its verdict alone; a record in needed, a top the rates use, takes the nearest
    with corrections); records whose refinement failed (no finite energy) are left out."""
    records = tuple(r for r in records if math.isfinite(r.energy_hartree))
    carried = []
    for record in records:
        same = [s for s in scanned if s.kind == record.kind and s.imaginary_count is not None]
        if any(record is n for n in needed):
            same = [s for s in same if s.gibbs_corrections_kcal_mol]
        if not same:
            return records, False
        source = min(same, key=lambda s: abs(wrap_deg(s.angle_deg - record.angle_deg)))
        carried.append(replace(record, gibbs_corrections_kcal_mol=source.gibbs_corrections_kcal_mol,
                               other_modes_gibbs_kcal_mol=source.other_modes_gibbs_kcal_mol,
                               frequencies_cm1=source.frequencies_cm1, imaginary_count=source.imaginary_count,
                               imaginary_along_torsion=source.imaginary_along_torsion, flat_region=source.flat_region))
    return tuple(carried), True


def _with_free_energies(analysis, scanned, planar, temperatures_k):
    """The analysis with carried-over corrections, free-energy populations and (dienes) readiness."""
    minima, ok = _carried_over(analysis.minima, scanned.minima)
    maxima, _ = _carried_over(analysis.maxima, scanned.maxima, crossing_tops(analysis))
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


def _refine_all(result, bond, relaxations):
    """(points, analysis, disagreement) with every computed grid point re-optimised."""
    settings, numbers = result.settings, relaxations.numbers
    sources = bond.relaxed_points
    molecule = Molecule(result.name, result.mol, result.charge, result.unpaired_electrons)
    scanner = BondScanner(molecule, TorsionBond(bond.dihedral_atoms, bond.conjugated), settings, relaxations)
    jobs = [RelaxJob(p.coords_bohr, settings.point_convergence, None,
                     (DihedralConstraint(bond.dihedral_atoms, math.radians(p.angle_deg)),)) for p in sources]
    energies = []
    for source, outcome in zip(sources, relaxations(jobs, scan_level_start=True)):
        index = (int(round(source.angle_deg / settings.step_deg)),)
        if isinstance(outcome, CalculationError):
            point = replace(source, measured_angle_deg=math.nan, energy_hartree=math.nan, converged=False,
                            gradient_evaluations=getattr(outcome, "evaluations", 0), max_gradient=math.nan,
                            failure=str(outcome), central_bond_order=math.nan, homo_lumo_gap_ev=math.nan)
            hessian = np.eye(3 * len(numbers))
        else:
            coords = outcome.x.reshape(-1, 3)
            point = ScanPoint(
                angle_deg=source.angle_deg, measured_angle_deg=scanner.coordinate.measure_deg(coords)[0],
                energy_hartree=outcome.energy, converged=outcome.converged, gradient_evaluations=outcome.evaluations,
                max_gradient=outcome.max_gradient, coords_bohr=coords,
            )
            hessian = outcome.hessian
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
    return points, analysis, disagreement(bond, analysis, tuple(energies), result.method)


def _stationary_targets(result, bond):
    """(record, held angle or None, how) of the scan's minima, barrier tops and (dienes) planar
    s-cis (mirror images included: _refine_stationary optimises each pair once)."""
    scanned = bond.profile
    targets = [(m, None, "free optimisation") for m in scanned.minima]
    targets += [(m, m.angle_deg, "held at the scan's angle") for m in scanned.maxima]
    if is_diene_bond(result.mol, bond.dihedral_atoms):
        start = scanned.planar_scis or min(bond.relaxed_points, key=lambda p: abs(wrap_deg(p.angle_deg)))
        targets.append((_planar_record(start.energy_hartree, start.coords_bohr, True, ""), 0.0, "held at 0 deg"))
    missing = [t[0].kind for t in targets if t[0].coords_bohr is None]
    if missing:
        raise InputError(f"bond {bond.label}: the scan has no structure for its {missing[0]}; rerun the scan")
    return targets


def _job_key(kind, angle, held, symmetric):
    """Which target a stationary record shares its optimisation with: a mirror image, or the
    planar s-cis structure and a barrier top both held at 0 deg."""
    if held is not None and abs(wrap_deg(held)) < 1e-6:
        return ("held", 0.0)
    angle = abs(angle) if symmetric else angle
    return ("held", round(angle, 6)) if held is not None else ("free", kind, round(angle, 6))


def _refine_stationary(result, bond, relaxations):
    """The analysis with only the scan's stationary points (and planar s-cis) re-optimised; on a
    symmetric profile each mirror pair costs one optimisation."""
    settings = result.settings
    targets = _stationary_targets(result, bond)
    distinct = {}
    for record, held, _ in targets:
        key = _job_key(record.kind, record.angle_deg, held, bond.symmetric)
        if key not in distinct or (record.angle_deg >= 0 and distinct[key][0].angle_deg < 0):
            distinct[key] = (record, held)
    keys = list(distinct)
    jobs = []
    for key in keys:
        record, held = distinct[key]
        held_at = () if held is None else (DihedralConstraint(bond.dihedral_atoms, math.radians(held)),)
        jobs.append(RelaxJob(record.coords_bohr, settings.refine_convergence, None, held_at))
    outcomes = dict(zip(keys, relaxations(jobs, scan_level_start=True)))
    records, planar = [], None
    for record, held, how in targets:
        key = _job_key(record.kind, record.angle_deg, held, bond.symmetric)
        outcome, source = outcomes[key], distinct[key][0]
        if isinstance(outcome, CalculationError):
            refined = replace(record, energy_hartree=math.nan, converged=False,
                              refinement=f"refinement failed ({outcome})", frequencies_cm1=(),
                              imaginary_count=None, imaginary_along_torsion=None, gibbs_corrections_kcal_mol=())
        else:
            coords = outcome.x.reshape(-1, 3)
            if bond.symmetric and (record.angle_deg < 0) != (source.angle_deg < 0) and abs(record.angle_deg) > 1e-6:
                coords, how = mirror(coords), f"{how} (mirror image)"
            angle = display_angle(math.degrees(dihedral(coords, *bond.dihedral_atoms)))
            refined = StationaryRecord(record.kind, angle, record.fit_angle_deg, outcome.energy, how,
                                       outcome.converged, coords)
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
    return _with_free_energies(analysis, bond.profile, planar, settings.temperatures_k)


def scan_level_engine(result):
    """A fresh engine of the scan's own method for result's molecule (gas phase)."""
    numbers = [a.GetAtomicNum() for a in result.mol.GetAtoms()]
    return make_engine(numbers, charge=result.charge, unpaired_electrons=result.unpaired_electrons,
                       method=result.settings.method, backend=result.settings.engine)


def refine_result(result, engine_factory, level_label, level_reference="", points_mode="all", processes=1,
                  start_engine=None, cache=None):
    """The ScanResult with every bond's `refined` profile at the level engine_factory() computes.

    engine_factory: picklable callable returning a fresh engine for this molecule (e.g.
    functools.partial of a DFT engine class); processes: parallel optimisations; start_engine:
    the engine whose finite-difference Hessian starts each optimisation (default: the scan's
    own method, scan_level_engine); cache: a relaxcache.RelaxationCache that makes an
    interrupted refinement resume.
    """
    if points_mode not in POINT_MODES:
        raise InputError(f"--refine-points {points_mode!r}: choose {' or '.join(POINT_MODES)}")
    start_engine = start_engine or scan_level_engine(result)
    numbers = np.array([a.GetAtomicNum() for a in result.mol.GetAtoms()])
    identity = (f"{level_label}; charge {result.charge}; unpaired {result.unpaired_electrons}; "
                f"torsionscan {__version__}")
    bonds, failures = [], []
    for bond in result.bonds:
        started = time.perf_counter()
        try:
            with Relaxations(engine_factory, numbers, graph_bonds(result.mol), identity, processes, cache,
                             start_engine) as relaxations:
                if points_mode == "all":
                    points, analysis, verdict = _refine_all(result, bond, relaxations)
                else:
                    points, analysis, verdict = (), _refine_stationary(result, bond, relaxations), None
        except CalculationError as error:  # this bond keeps its scan; the others are still refined
            log.warning("bond %s: refinement at %s failed: %s", bond.label, level_label, error)
            failures.append(f"bond {bond.label}: {error}")
            bonds.append(bond)
            continue
        refined = RefinedProfile(level_label, level_reference, points_mode, points, analysis, verdict,
                                 relaxations.evaluations, time.perf_counter() - started, THERMAL_NOTE)
        bonds.append(replace(bond, refined=refined))
    if len(failures) == len(result.bonds):
        raise CalculationError("; ".join(failures))
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
