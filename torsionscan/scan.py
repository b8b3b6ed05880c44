"""The relaxed dihedral scan: start structure, two-way sweeps, fit, refinement, populations.

Sweeps. From the start minimum the dihedral is driven around the circle on a grid, each point
warm-started from its neighbour (geometry rigidly turned about the bond and the neighbour's
quasi-Newton Hessian turned with it). Every grid angle is reached once from each direction;
where the two arrivals differ the lower energy is kept and a difference above the hysteresis
threshold is recorded. Molecules without stereocentres have E(phi) = E(-phi): one sweep
downwards round the whole circle is then folded onto 0..180 deg (going down through -phi is
the mirror image of going up through +phi), which reaches every angle in 0..180 from both
directions at half the cost; the other half of the circle is filled by mirror images.
"""

import logging
import math
import time
from dataclasses import asdict, dataclass, field, replace

import numpy as np

from . import geometry
from .engines import make_engine, solvation_model
from .errors import CalculationError, InputError, TimeLimitExceeded
from .modelhessian import lindh_hessian
from .freeenergy import add_free_energies
from .molecule import (
    find_conjugated_bonds, is_diene_bond, load_molecule, select_bond, side_atoms, starting_structures,
)
from .optimize import Convergence, minimize
from .profile import fit_profile, stationary_points
from .records import Barrier, BondScan, Hysteresis, ScanPoint, ScanResult, StationaryRecord
from .thermo import region_populations
from .units import ANGSTROM_BOHR, HARTREE_KCAL_MOL, wrap_deg, wrap_rad

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class ScanSettings:
    """How a scan is run. Angles in degrees, temperatures in kelvin, energies in kcal/mol."""

    step_deg: float = 15.0
    conformers: int = 5
    seed: int = 61453
    method: str = "GFN2-xTB"
    engine: str = "auto"
    temperatures_k: tuple[float, ...] = (298.15,)
    scis_window_deg: float = 30.0
    solvent: str | None = None  # implicit solvent (engines.SOLVENTS) or None for the gas phase
    solvation_model: str | None = None  # "alpb" or "gbsa"; None = ALPB when a solvent is given
    frequencies: bool = True  # harmonic frequencies and free energies at the stationary points
    temperature_range_k: tuple[float, float] = (200.0, 450.0)  # of the populations-vs-temperature plot
    hysteresis_kcal_mol: float = 0.3
    point_convergence: Convergence = field(default_factory=Convergence)
    start_convergence: Convergence = field(
        default_factory=lambda: Convergence(max_gradient=1.5e-4, rms_gradient=1.0e-4)
    )
    # minima and maxima: tight, because torsional gradients near a shallow minimum are tiny
    refine_convergence: Convergence = field(
        default_factory=lambda: Convergence(max_gradient=2.0e-5, rms_gradient=1.5e-5)
    )

    def check(self):
        """Raise InputError for settings that cannot work."""
        steps = 180.0 / self.step_deg if self.step_deg > 0 else 0.0
        if not 1.0 <= self.step_deg <= 90.0 or abs(steps - round(steps)) > 1e-9:
            raise InputError(
                f"--step {self.step_deg:g}: the grid step must be 1 to 90 degrees and divide 180 (e.g. 5, 10, 15, 30)"
            )
        if self.conformers < 1:
            raise InputError("--conformers must be at least 1")
        if not self.temperatures_k or not all(math.isfinite(t) and t > 0 for t in self.temperatures_k):
            raise InputError("--temperature values must be finite numbers above 0 K")
        low, high = self.temperature_range_k
        if not 0.0 < low < high:
            raise InputError("--temperature-range needs 0 < TMIN < TMAX (kelvin)")
        if not 0.0 < self.scis_window_deg <= 90.0:
            raise InputError("--scis-window must be between 0 and 90 degrees")
        solvation_model(self.solvent, self.solvation_model)

    def as_dict(self):
        """Plain-data form for summaries (every field, nested settings included)."""
        return asdict(self)


class DihedralConstraint:
    """Holds dihedral i-j-k-l at `target_rad` (flat coordinate vectors in Bohr)."""

    def __init__(self, atoms, target_rad):
        self.atoms = atoms
        self.target_rad = target_rad

    def residual(self, x):
        return wrap_rad(geometry.dihedral(x.reshape(-1, 3), *self.atoms) - self.target_rad)

    def jacobian(self, x):
        return geometry.dihedral_gradient(x.reshape(-1, 3), *self.atoms).ravel()


class Relaxer:
    """Geometry optimisations of one molecule with one engine (Bohr, Hartree)."""

    def __init__(self, engine, numbers, deadline=None):
        self.engine = engine
        self.numbers = numbers
        self.deadline = deadline  # time.monotonic() value after which no new gradient is started

    def _objective(self, x):
        if self.deadline is not None and time.monotonic() > self.deadline:
            raise TimeLimitExceeded(f"time limit reached after {self.engine.evaluations} gradient evaluations")
        energy, gradient = self.engine.energy_and_gradient(x.reshape(-1, 3))
        return energy, gradient.ravel()

    def gradient(self, coords_bohr):
        """Gradient (N, 3) in Hartree/Bohr at coords (N, 3) in Bohr, within the deadline."""
        return self._objective(np.ravel(coords_bohr))[1].reshape(-1, 3)

    @staticmethod
    def _rigid(x):
        return geometry.rigid_body_directions(x.reshape(-1, 3))

    def relax(self, coords_bohr, convergence, hessian=None, dihedral_atoms=None, target_rad=None):
        """Minimise from coords (N, 3); hold dihedral_atoms at target_rad if given."""
        if hessian is None:
            hessian = lindh_hessian(self.numbers, coords_bohr)
        constraints = [] if dihedral_atoms is None else [DihedralConstraint(dihedral_atoms, target_rad)]
        return minimize(
            self._objective, coords_bohr.ravel(), hessian, constraints=constraints,
            invariant_directions=self._rigid, convergence=convergence,
        )


def _mirror(coords):
    mirrored = np.array(coords, dtype=float)
    mirrored[..., 0] *= -1.0
    return mirrored


def _mirror_hessian(hessian):
    signs = np.tile([-1.0, 1.0, 1.0], len(hessian) // 3)
    return hessian * np.outer(signs, signs)


def _turn(coords, hessian, atoms, moving, target_rad):
    """Rigidly turn the moving side so the dihedral reaches target; turn the Hessian with it."""
    delta = wrap_rad(target_rad - geometry.dihedral(coords, *atoms))
    turned, rotation = geometry.rotate_about_bond(coords, atoms[1], atoms[2], moving, delta)
    block = np.eye(len(hessian))
    for atom in moving:
        block[3 * atom:3 * atom + 3, 3 * atom:3 * atom + 3] = rotation
    return turned, block @ hessian @ block.T


def relax_start(molecule, relaxer, settings):
    """Lowest GFN-xTB minimum among the seeded start structures: (coords_bohr, energy, hessian, evaluations)."""
    best = None
    evaluations = 0
    errors = []
    for coords in starting_structures(molecule, settings.conformers, settings.seed):
        try:
            result = relaxer.relax(coords * ANGSTROM_BOHR, settings.start_convergence)
        except CalculationError as error:
            errors.append(str(error))
            continue
        evaluations += result.evaluations
        if best is None or (result.converged, -result.energy) > (best.converged, -best.energy):
            best = result
    if best is None:
        raise CalculationError(errors[0] if errors else "no start structure could be optimised")
    return best.x.reshape(-1, 3), best.energy, best.hessian, evaluations


def _dihedral_deg(coords, atoms):
    """Dihedral of coords ((N, 3) or flat, Bohr) in degrees, (-180, 180]."""
    return float(np.degrees(geometry.dihedral(np.reshape(coords, (-1, 3)), *atoms)))


def _point(result, atoms, target_deg):
    coords = result.x.reshape(-1, 3)
    return ScanPoint(
        angle_deg=float(target_deg), measured_angle_deg=_dihedral_deg(coords, atoms),
        energy_hartree=result.energy, converged=result.converged,
        gradient_evaluations=result.evaluations, max_gradient=result.max_gradient, coords_bohr=coords,
    )


def _failed_point(target_deg, coords, evaluations, reason):
    return ScanPoint(
        angle_deg=float(target_deg), measured_angle_deg=float("nan"), energy_hartree=float("nan"),
        converged=False, gradient_evaluations=evaluations, max_gradient=float("nan"),
        coords_bohr=coords, failure=reason,
    )


def sweep_plan(start_index, steps_per_turn, symmetric):
    """Legs of grid indices (angle = index * step) visited after the start point, each leg
    continuing from the start point; see the module docstring for the folded symmetric sweep."""
    if symmetric:
        half = steps_per_turn // 2
        down = list(range(start_index - 1, -1, -1))
        up = list(range(1, half + 1))
        back = list(range(half - 1, start_index - 1, -1))
        return [down + up + back]
    forward = [start_index + s for s in range(1, steps_per_turn)]
    backward = [start_index - s for s in range(1, steps_per_turn)]
    return [forward, backward]


class _BondScanner:
    """Carries the state of one bond's scan (visits with their Hessians) between its stages."""

    def __init__(self, molecule, bond, relaxer, settings):
        self.atoms = bond.atoms
        self.bond = bond
        self.relaxer = relaxer
        self.settings = settings
        self.moving = side_atoms(molecule, bond.atoms[1], bond.atoms[2])
        self.symmetric = not molecule.has_stereocentres
        self.steps_per_turn = int(round(360.0 / settings.step_deg))
        self.visits = {}  # grid index -> list of (ScanPoint, hessian)

    def _index_angle(self, index):
        return wrap_deg(index * self.settings.step_deg)

    def relax_at(self, coords, hessian, angle_deg, convergence):
        turned, turned_hessian = _turn(coords, hessian, self.atoms, self.moving, np.radians(angle_deg))
        result = self.relaxer.relax(
            turned, convergence, turned_hessian, self.atoms, np.radians(angle_deg)
        )
        return result, _point(result, self.atoms, angle_deg)

    def _visit(self, index, coords, hessian):
        angle = self._index_angle(index)
        evaluations_before = self.relaxer.engine.evaluations
        try:
            result, point = self.relax_at(coords, hessian, angle, self.settings.point_convergence)
            order, gap = self.relaxer.engine.conjugation(point.coords_bohr, self.atoms[1], self.atoms[2])
        except CalculationError as error:
            used = self.relaxer.engine.evaluations - evaluations_before
            self.visits.setdefault(index % self.steps_per_turn, []).append(
                (_failed_point(angle, coords, used, str(error)), hessian)
            )
            log.warning("dihedral %s: point %.1f deg failed: %s", self.bond.label, angle, error)
            return coords, hessian
        point = replace(point, central_bond_order=order, homo_lumo_gap_ev=gap)
        self.visits.setdefault(index % self.steps_per_turn, []).append((point, result.hessian))
        return point.coords_bohr, result.hessian

    def sweep(self, start_coords, start_hessian):
        """Run all sweeps from the start structure."""
        phi0 = _dihedral_deg(start_coords, self.atoms)
        if self.symmetric and phi0 < 0:
            start_coords, start_hessian = _mirror(start_coords), _mirror_hessian(start_hessian)
            phi0 = -phi0
        start_index = int(round(phi0 / self.settings.step_deg))
        if not self.symmetric:
            start_index %= self.steps_per_turn
        first = self._visit(start_index, start_coords, start_hessian)
        for leg in sweep_plan(start_index, self.steps_per_turn, self.symmetric):
            coords, hessian = first
            for index in leg:
                coords, hessian = self._visit(index, coords, hessian)

    def chosen_points(self):
        """Best visit per grid angle (converged first, then lowest energy), plus hysteresis records."""
        chosen, hysteresis = {}, []
        for index, visits in sorted(self.visits.items()):
            ok = [v for v in visits if v[0].converged]
            pool = ok or [v for v in visits if np.isfinite(v[0].energy_hartree)] or visits
            chosen[index] = min(pool, key=lambda v: v[0].energy_hartree if np.isfinite(v[0].energy_hartree) else np.inf)
            if len(ok) > 1:
                energies = [v[0].energy_hartree for v in ok]
                spread = (max(energies) - min(energies)) * HARTREE_KCAL_MOL
                if spread > self.settings.hysteresis_kcal_mol:
                    hysteresis.append(Hysteresis(self._index_angle(index), spread))
        return chosen, hysteresis

    def full_circle(self, chosen):
        """Points around the whole circle (mirror images added for symmetric profiles), by angle."""
        points = {}
        for index, (point, hessian) in chosen.items():
            points[index] = (point, hessian)
            if self.symmetric and 0 < index < self.steps_per_turn // 2:
                mirrored = replace(
                    point, angle_deg=-point.angle_deg, measured_angle_deg=-point.measured_angle_deg,
                    coords_bohr=_mirror(point.coords_bohr), mirrored=True,
                )
                points[-index] = (mirrored, _mirror_hessian(hessian))
        return sorted(points.values(), key=lambda item: _display_angle(item[0].angle_deg))

    def nearest(self, circle, angle_deg):
        """The usable circle entry (point, hessian) nearest to angle_deg."""
        usable = [item for item in circle if np.isfinite(item[0].energy_hartree)]
        return min(usable, key=lambda item: abs(wrap_deg(item[0].angle_deg - angle_deg)))

    def refine(self, circle, stationary, basin):
        """Refine one fitted stationary point: minima by free optimisation, maxima constrained."""
        fit_angle = stationary.angle_deg
        if self.symmetric and fit_angle < -1e-9:
            mirrored = self.refine(circle, replace(stationary, angle_deg=-fit_angle), (-basin[1], -basin[0]))
            return replace(
                mirrored, angle_deg=_display_angle(-mirrored.angle_deg), fit_angle_deg=fit_angle,
                coords_bohr=_mirror(mirrored.coords_bohr),
            )
        point, hessian = self.nearest(circle, fit_angle)
        convergence = self.settings.refine_convergence
        if stationary.kind == "minimum":
            result = self.relaxer.relax(point.coords_bohr, convergence, hessian)
            angle = _dihedral_deg(result.x, self.atoms)
            if _in_arc(angle, *basin):
                return _stationary(result, self.atoms, "minimum", fit_angle, "free optimisation")
            how = "constrained at the fitted angle (free optimisation left the basin)"
        else:
            if abs(wrap_deg(point.angle_deg - fit_angle)) < 0.05 and point.converged:
                return StationaryRecord(
                    "maximum", _display_angle(point.measured_angle_deg), fit_angle, point.energy_hartree,
                    "grid point", point.converged, point.coords_bohr,
                )
            how = "constrained at the fitted angle"
        result, _ = self.relax_at(point.coords_bohr, hessian, fit_angle, convergence)
        return _stationary(result, self.atoms, stationary.kind, fit_angle, how)


def _display_angle(angle_deg):
    """Angle in (-180, 180] so that s-trans prints as 180."""
    wrapped = wrap_deg(angle_deg)
    if wrapped <= -180.0 + 1e-3:
        return 180.0
    return 0.0 if abs(wrapped) < 5e-4 else wrapped


def _in_arc(angle, low, high):
    """Is angle within the arc going up from low to high (degrees, circular)?"""
    return (angle - low) % 360.0 <= (high - low) % 360.0 or (high - low) % 360.0 == 0.0


def _stationary(result, atoms, kind, fit_angle, how):
    coords = result.x.reshape(-1, 3)
    return StationaryRecord(
        kind, _display_angle(_dihedral_deg(coords, atoms)), fit_angle,
        result.energy, how, result.converged, coords,
    )


FIT_WIGGLE_KCAL_MOL = 0.001  # extrema pairs of the fit shallower than this are not refined
FLAT_KCAL_MOL = 0.01  # refined minimum/maximum pairs closer than this are one flat region


def _on_mirror_plane(angle_deg):
    return min(abs(wrap_deg(angle_deg)), 180.0 - abs(wrap_deg(angle_deg))) < 0.05


def merge_flat_extrema(records, symmetric, flat_hartree):
    """Remove neighbouring minimum/maximum pairs whose refined energies differ by less than
    flat_hartree (or the wrong way round): they are one flat region, not two stationary points.

    records alternate in kind around the circle. On a symmetric profile a flat pair that
    touches a mirror plane (0 or 180 deg) is merged together with its mirror image, leaving
    one stationary point on the plane, so the result stays mirror symmetric.
    """
    records = sorted(records, key=lambda r: wrap_deg(r.angle_deg))
    while len(records) > 2:
        n = len(records)

        def depth(i):
            a, b = records[i], records[(i + 1) % n]
            low, high = (a, b) if a.kind == "minimum" else (b, a)
            return high.energy_hartree - low.energy_hartree

        i = min(range(n), key=depth)
        if depth(i) >= flat_hartree:
            break
        pair = [i, (i + 1) % n]
        on_plane = [j for j in pair if _on_mirror_plane(records[j].angle_deg)]
        if symmetric and on_plane:
            centre = on_plane[0]
            other = pair[1] if centre == pair[0] else pair[0]
            mirror = (2 * centre - other) % n  # the neighbour on the far side of the plane
            kept = records[centre]
            kind = records[other].kind
            merged = replace(kept, kind=kind, refinement=f"{kept.refinement} (flat {kind} region merged)")
            drop = {other, mirror}
            records = [merged if j == centre else r for j, r in enumerate(records) if j not in drop]
        else:
            records = [r for j, r in enumerate(records) if j not in pair]
    return records


def _neighbours(angle, others):
    """(previous, next) angles from `others` around the circle from `angle`."""
    below = min(others, key=lambda o: (angle - o) % 360.0 or 360.0)
    above = min(others, key=lambda o: (o - angle) % 360.0 or 360.0)
    return below, above


def barriers_between(minima, maxima):
    """Barriers (records.Barrier) from each minimum over its neighbouring maximum in both directions."""
    barriers = []
    if not minima or not maxima:
        return barriers
    min_angles = [m.fit_angle_deg for m in minima]
    max_by_angle = {m.fit_angle_deg: m for m in maxima}
    for minimum in minima:
        below, above = _neighbours(minimum.fit_angle_deg, list(max_by_angle))
        for top in (above, below):
            across = _neighbours(top, min_angles)
            to = across[1] if top == above else across[0]
            to_angle = next(m.angle_deg for m in minima if m.fit_angle_deg == to)
            height = (max_by_angle[top].energy_hartree - minimum.energy_hartree) * HARTREE_KCAL_MOL
            converged = minimum.converged and max_by_angle[top].converged
            barriers.append(Barrier(minimum.angle_deg, max_by_angle[top].angle_deg, to_angle, height, converged))
    return barriers


def scan_bond(molecule, bond, relaxer, start, settings):
    """Relaxed scan of one dihedral from the start minimum `start` = (coords, energy, hessian)."""
    began = time.perf_counter()
    evaluations_before = relaxer.engine.evaluations
    scanner = _BondScanner(molecule, bond, relaxer, settings)
    scanner.sweep(start[0], start[2])
    chosen, hysteresis = scanner.chosen_points()
    circle = scanner.full_circle(chosen)
    good = [p for p, _ in circle if p.converged]
    if len(good) < 5:
        raise CalculationError(
            f"dihedral {bond.label}: only {len(good)} scan points converged; try another --engine or check the structure"
        )
    grid_reference = min(p.energy_hartree for p in good)
    angles = np.array([p.angle_deg for p in good])
    energies = np.array([(p.energy_hartree - grid_reference) * HARTREE_KCAL_MOL for p in good])
    fit = fit_profile(angles, energies, symmetric=scanner.symmetric)
    fitted = stationary_points(fit.series, min_depth_kcal_mol=FIT_WIGGLE_KCAL_MOL)
    refined = []
    for s in fitted:
        others = [o.angle_deg for o in fitted if o.kind != s.kind] or [s.angle_deg + 180.0]
        try:
            refined.append(scanner.refine(circle, s, _neighbours(s.angle_deg, others)))
        except CalculationError as error:
            point, _ = scanner.nearest(circle, s.angle_deg)
            refined.append(StationaryRecord(
                s.kind, point.angle_deg, s.angle_deg, point.energy_hartree,
                f"refinement failed ({error}); nearest grid point used", False, point.coords_bohr,
            ))
    refined = merge_flat_extrema(refined, scanner.symmetric, FLAT_KCAL_MOL / HARTREE_KCAL_MOL)
    minima = [r for r in refined if r.kind == "minimum"]
    maxima = [r for r in refined if r.kind == "maximum"]
    refined_minima = [m.energy_hartree for m in minima if m.converged]
    reference = min([grid_reference, *refined_minima])
    shift = (grid_reference - reference) * HARTREE_KCAL_MOL
    fit = replace(fit, series=replace(fit.series, constant=fit.series.constant + shift))
    populations = tuple(
        region_populations(fit.series.value, t, settings.scis_window_deg) for t in settings.temperatures_k
    )
    points = tuple(replace(p, angle_deg=_display_angle(p.angle_deg)) for p, _ in circle)
    bond_scan = BondScan(
        dihedral_atoms=bond.atoms, conjugated=bond.conjugated, symmetric=scanner.symmetric,
        points=tuple(sorted(points, key=lambda p: p.angle_deg)), reference_energy_hartree=reference,
        fit=fit, minima=tuple(minima), maxima=tuple(maxima),
        barriers=tuple(barriers_between(minima, maxima)), populations=populations,
        hysteresis=tuple(hysteresis),
        gradient_evaluations_total=relaxer.engine.evaluations - evaluations_before,
        wall_time_s=time.perf_counter() - began,
    )
    if settings.frequencies:
        masses = [atom.GetMass() for atom in molecule.mol.GetAtoms()]
        planar_start = None
        if is_diene_bond(molecule.mol, bond.atoms):
            point, hessian = scanner.nearest(circle, 0.0)
            planar_start = (point.coords_bohr, hessian)
        scanned, started = relaxer.engine.evaluations, time.perf_counter()
        try:
            bond_scan = add_free_energies(bond_scan, relaxer, masses, settings, planar_start)
        except (CalculationError, ValueError, np.linalg.LinAlgError) as error:
            log.warning("dihedral %s: frequencies failed (%s); free energies left out", bond.label, error)
        bond_scan = replace(bond_scan, frequency_gradient_evaluations=relaxer.engine.evaluations - scanned,
                            frequency_wall_time_s=time.perf_counter() - started)
    return bond_scan


def scan(source, *, bond=None, name=None, charge=None, unpaired_electrons=0, record=1, settings=None,
         time_limit_s=None):
    """Relaxed torsion scan of every conjugated single bond of a molecule (or the one `bond` names).

    source: SMILES string, MOL/SDF/XYZ path or RDKit molecule; bond: 1-based "j-k" or "i-j-k-l".
    time_limit_s: wall-clock seconds allowed for the whole molecule (checked before each gradient).
    Returns a ScanResult; raises InputError, CalculationError or TimeLimitExceeded.
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
    engine = make_engine(
        molecule.numbers, charge=molecule.charge, unpaired_electrons=molecule.unpaired_electrons,
        method=settings.method, backend=settings.engine, solvent=settings.solvent,
        solvation=settings.solvation_model,
    )
    relaxer = Relaxer(engine, molecule.numbers, deadline)
    coords, energy, hessian, start_evaluations = relax_start(molecule, relaxer, settings)
    scans, failed = [], []
    for b in bonds:
        try:
            scans.append(scan_bond(molecule, b, relaxer, (coords, energy, hessian), settings))
        except CalculationError as error:
            log.warning("dihedral %s failed: %s", b.label, error)
            failed.append((b.label, str(error)))
    if not scans:
        raise CalculationError("; ".join(f"bond {label}: {reason}" for label, reason in failed))
    return ScanResult(
        name=molecule.name, smiles=molecule.smiles, mol=molecule.mol, symbols=tuple(molecule.symbols),
        charge=molecule.charge, unpaired_electrons=molecule.unpaired_electrons,
        method=settings.method, engine=engine.backend, settings=settings.as_dict(),
        start_energy_hartree=energy, start_coords_bohr=coords,
        start_gradient_evaluations=start_evaluations, bonds=tuple(scans), failed_bonds=tuple(failed),
    )
