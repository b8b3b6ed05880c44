"""Free energies of a scanned bond's conformers: harmonic frequencies at the refined stationary
points, RRHO/quasi-RRHO thermochemistry, conformer populations from free energies, and for
dienes the free-energy cost of holding the bond planar s-cis.

Hessians are finite differences of the engine's analytic gradients along model normal modes
(symmetry.symmetric_hessian: about 3.5N gradients instead of 6N); a barrier top whose free energy nothing uses is only verified, by a
lowest-eigenvalue search with the dihedral frozen (stable_with_torsion_frozen). Thermochemistry
follows the ideal-gas rigid-rotor/harmonic-oscillator model
with Grimme's quasi-RRHO entropy for modes below 100 cm^-1 (S. Grimme, Chem. Eur. J. 2012, 18,
9955), rotational symmetry number 1 for every conformer (mirror-image conformers are listed
separately instead), 1 atm. Energies in Hartree inside, kcal/mol in the records.
"""

import logging
import math
from dataclasses import dataclass, replace

import numpy as np

from . import geometry
from .coordinate import DihedralConstraint
from .errors import CalculationError, InputError
from .molecule import side_atoms
from .records import Interconversion, Readiness, RrhoPopulations, StationaryRecord
from .relax import RelaxJob
from .rotor import (
    BOLTZMANN_WINDOW_RT, conformer_free_energies, eyring_rate, half_life_s, reduced_moment_of_inertia, region_weights,
    rotor_populations, torsional_levels, well_fundamentals, wigner_transmission,
)
from .modelhessian import lindh_hessian
from .thermo import is_s_cis
from .rrho import conformer_populations, harmonic_frequencies, internal_basis, rrho_thermo
from .symmetry import TOLERANCE_BOHR, mass_weighted_products, symmetric_hessian
from .units import HARTREE_KCAL_MOL, rt_kcal_mol

log = logging.getLogger(__name__)

FD_STEP_BOHR = 0.005
PLANAR_DEG = 0.05  # a stationary point this close to 0 deg is the planar s-cis structure
# largest atom displacement between two structures that share one Hessian: the tolerance within
# which a structure already counts as its symmetric image (the planar minima at 0 and 180 deg of a
# phenyl-vinyl bond, one left 0.37 deg off planar by its flat optimisation, are 0.015 Bohr apart)
SAME_STRUCTURE_BOHR = TOLERANCE_BOHR
QUASI_HARMONIC_CUTOFF_CM1 = 100.0


@dataclass(frozen=True)
class Vibrations:
    """Harmonic analysis of one structure."""

    frequencies_cm1: tuple[float, ...]  # ascending; imaginary ones negative
    imaginary_count: int
    imaginary_along_torsion: bool | None  # freezing the dihedral removes an imaginary mode; None if none
    gibbs_corrections_kcal_mol: tuple[float, ...]  # G - E_el per temperature (quasi-RRHO)
    other_modes_gibbs_kcal_mol: tuple[float, ...]  # the same with the torsion projected out of the Hessian


def finite_difference_hessian(gradient_of, coords_bohr, step_bohr=FD_STEP_BOHR, symmetrise=True):
    """(3N, 3N) Hessian in Hartree/Bohr^2 from central differences of gradient_of(coords), symmetrised
    (H + H^T)/2 unless symmetrise is False."""
    x = np.asarray(coords_bohr, dtype=float).ravel()
    columns = []
    for index in range(len(x)):
        displaced = x.copy()
        displaced[index] += step_bohr
        plus = gradient_of(displaced.reshape(-1, 3)).ravel()
        displaced[index] -= 2 * step_bohr
        minus = gradient_of(displaced.reshape(-1, 3)).ravel()
        columns.append((plus - minus) / (2 * step_bohr))
    hessian = np.array(columns).T
    return 0.5 * (hessian + hessian.T) if symmetrise else hessian


class Hessians:
    """Finite-difference Hessians through an engine's gradient, one per distinct structure: a
    structure that lies within SAME_STRUCTURE_BOHR of one already done, once turned (or mirrored)
    onto it and with equivalent atoms exchanged, reuses its Hessian, reordered and turned with it
    (the planar s-cis structure and a stationary point at 0 deg; the lowest minimum reached from
    the scans of two bonds, each in its own frame; the two planar minima of a phenyl ring's bond,
    one the other flipped; never moving an isotope label: molecule.atom_orders); each new one is
    built along the symmetry-adapted modes of the Lindh model Hessian (symmetry.symmetric_hessian,
    zero along translations and rotations)."""

    def __init__(self, gradients_at, numbers, masses_amu, atom_orders=None):
        """gradients_at(reference, structures): gradients (Hartree/Bohr) at displaced structures (Bohr);
        atom_orders: molecule.atom_orders of the molecule (None: atoms are never exchanged)."""
        self.gradients_at, self.masses = gradients_at, np.asarray(masses_amu, dtype=float)
        self.numbers = np.asarray(numbers)
        count = len(self.masses)
        self.orders, self.parents = atom_orders or ([np.arange(count)], np.full(count, -1))
        self.done = []  # (coords given, coords used, hessian)

    def __call__(self, coords_bohr):
        """(Hessian (3N, 3N) Hartree/Bohr^2, the structure it belongs to (N, 3) Bohr)."""
        coords_bohr = np.asarray(coords_bohr, dtype=float)
        for given, used, hessian in self.done:
            order, rotation, distance = geometry.matched_superposition(given, coords_bohr, self.orders, self.parents)
            if distance < SAME_STRUCTURE_BOHR:
                components = (3 * order[:, None] + np.arange(3)).ravel()
                turn = np.kron(np.eye(len(coords_bohr)), rotation.T)  # each atom's displacement turned
                reordered = hessian[np.ix_(components, components)]
                return (turn @ reordered @ turn.T,
                        (used[order] - given.mean(axis=0)) @ rotation + coords_bohr.mean(axis=0))
        hessian, used, _ = symmetric_hessian(self.gradients_at, self.numbers, self.masses, coords_bohr,
                                             lindh_hessian(self.numbers, coords_bohr), FD_STEP_BOHR)
        self.done.append((np.array(coords_bohr, dtype=float), used, hessian))
        return hessian, used


TOP_SEARCH_START_VECTORS = 6  # lowest model-Hessian modes the search starts from
TOP_SEARCH_ROUNDS = 8  # rounds (the first, then two new directions each) before a full Hessian decides
TOP_SEARCH_RESIDUAL_SHARE = 0.25  # accepted when the residual is below this share of the eigenvalue


def stable_with_torsion_frozen(gradients_at, numbers, masses_amu, coords_bohr, dihedral_atoms, step_bohr=FD_STEP_BOHR):
    """True when the lowest eigenvalue of the mass-weighted Hessian with the dihedral frozen is
    found positive by finite-difference Hessian-vector products (block Davidson steps from the
    TOP_SEARCH_START_VECTORS softest modes of the Lindh model Hessian, which also preconditions
    them); None when it is found negative or not settled within TOP_SEARCH_ROUNDS (a full Hessian
    decides). At a top of the relaxed profile (relaxed curvature negative) a positive frozen block
    means exactly one imaginary mode, along the torsion: the inertia of the Hessian is that of the
    frozen block plus the sign of the relaxed curvature. The search bounds the lowest eigenvalue
    from above only, so a negative mode outside everything it explores would be missed; checked
    against full Hessians at 15 GFN2-xTB tops, every verdict agreed."""
    coords = np.asarray(coords_bohr, dtype=float).reshape(-1, 3)
    inv_sqrt_m = np.repeat(1.0 / np.sqrt(np.asarray(masses_amu, dtype=float)), 3)
    frozen = internal_basis(masses_amu, coords, [geometry.dihedral_gradient(coords, *dihedral_atoms)])

    def images_of(vectors):  # frozen^T F frozen @ vectors, F the mass-weighted Hessian
        return frozen.T @ mass_weighted_products(gradients_at, masses_amu, coords, frozen @ vectors, step_bohr)

    model = frozen.T @ (lindh_hessian(numbers, coords) * np.outer(inv_sqrt_m, inv_sqrt_m)) @ frozen
    basis = np.linalg.eigh(model)[1][:, :TOP_SEARCH_START_VECTORS]
    images = images_of(basis)
    for round_ in range(TOP_SEARCH_ROUNDS):
        small = basis.T @ images
        values, vectors = np.linalg.eigh(0.5 * (small + small.T))
        if values[0] < 0:
            return None  # a negative eigenvalue with the torsion frozen: not a simple top
        residuals = images @ vectors[:, :2] - (basis @ vectors[:, :2]) * values[:2]
        if np.linalg.norm(residuals[:, 0]) < TOP_SEARCH_RESIDUAL_SHARE * values[0]:
            return True
        if round_ == TOP_SEARCH_ROUNDS - 1:
            break
        shifted = [np.linalg.lstsq(model - value * np.eye(len(model)), residual, rcond=None)[0]
                   for value, residual in zip(values[:2], residuals.T)]
        new = np.array(shifted).T
        for _ in range(2):  # orthogonalised twice against the basis
            new -= basis @ (basis.T @ new)
        new = geometry.orthonormal_rows(new.T).T
        if not new.shape[1]:
            break
        basis = np.hstack([basis, new])
        images = np.hstack([images, images_of(new)])
    return None


def analyse(hessians, masses_amu, coords_bohr, dihedral_atoms, temperatures_k, freeze_torsion=False,
            moving_atoms=None, flat_torsion=False):
    """Vibrations of one structure (hessians: a Hessians of the engine); freeze_torsion projects the
    dihedral out (a constrained point). The other-modes corrections leave out the internal rotation
    of moving_atoms about the bond (the hindered rotor's own motion; the frozen dihedral if not given).
    flat_torsion (a minimum in a flat region of the profile, StationaryRecord.flat_region): a single
    imaginary mode along the torsion is a soft mode of either sign, counted at its magnitude in the
    corrections (it stays negative in frequencies_cm1)."""
    hessian, coords = hessians(np.asarray(coords_bohr, dtype=float).reshape(-1, 3))
    coords_bohr = coords
    torsion = [geometry.dihedral_gradient(coords, *dihedral_atoms).ravel()]
    frequencies, _ = harmonic_frequencies(hessian, masses_amu, coords, torsion if freeze_torsion else None)
    frozen = frequencies if freeze_torsion else harmonic_frequencies(hessian, masses_amu, coords, torsion)[0]
    imaginary = int(np.sum(frequencies < 0))
    along = None if not imaginary or freeze_torsion else int(np.sum(frozen < 0)) < imaginary
    others, thermal = frozen, frequencies
    if flat_torsion and imaginary == 1 and along:
        thermal = np.abs(frequencies)
    if moving_atoms is not None:
        # a motion d is removed as the constraint gradient M d (rrho.harmonic_frequencies)
        motion = geometry.internal_rotation(coords, dihedral_atoms[1], dihedral_atoms[2], moving_atoms)
        others = harmonic_frequencies(hessian, masses_amu, coords, [(np.asarray(masses_amu)[:, None] * motion).ravel()])[0]

    def corrections(modes):
        return tuple(rrho_thermo(modes, masses_amu, coords_bohr, t,
                                 quasi_harmonic_cutoff_cm1=QUASI_HARMONIC_CUTOFF_CM1).gibbs_correction_kcal_mol
                     for t in temperatures_k)

    return Vibrations(tuple(float(f) for f in frequencies), imaginary, along, corrections(thermal),
                      corrections(others))


def _with_vibrations(records, analysed):
    return tuple(
        replace(r, frequencies_cm1=v.frequencies_cm1, imaginary_count=v.imaginary_count,
                imaginary_along_torsion=v.imaginary_along_torsion, gibbs_corrections_kcal_mol=v.gibbs_corrections_kcal_mol,
                other_modes_gibbs_kcal_mol=v.other_modes_gibbs_kcal_mol)
        for r, v in zip(records, analysed)
    )


def _analyse_all(records, hessians, masses, atoms, temperatures, symmetric, moving, verified=None):
    """Vibrations of each record; a mirror-image record (symmetric profile) reuses its partner's.
    verified(record): True when a barrier top is shown simple without a full Hessian (its
    Vibrations then carry the verdict alone: no frequencies, no free energies)."""
    done, results = {}, []
    for record in records:
        key = _key(record, symmetric)
        if key not in done:
            if verified is not None and verified(record):
                done[key] = Vibrations((), 1, True, (), ())
            else:
                # a flat top's imaginary torsion mode is its reaction coordinate, left out as at any top
                done[key] = analyse(hessians, masses, record.coords_bohr, atoms, temperatures, moving_atoms=moving,
                                    flat_torsion=record.flat_region and record.kind == "minimum")
        results.append(done[key])
    return results


def _key(record, symmetric):
    return round(abs(record.angle_deg), 1) if symmetric else round(record.angle_deg, 1)


def _top_check(profile, hessians, atoms, symmetric, diene):
    """verified(record) for _analyse_all: a barrier top whose free energy nothing uses (not the top
    of the lowest way between the s-cis and s-trans regions, not a diene's planar s-cis structure)
    with a negative relaxed curvature on the fit is verified by stable_with_torsion_frozen."""
    if profile.fit is None:
        return None
    needed = {_key(top, symmetric) for top in crossing_tops(profile)}
    if diene:
        needed |= {_key(r, symmetric) for r in profile.maxima if abs(r.angle_deg) < PLANAR_DEG}

    def verified(record):
        if _key(record, symmetric) in needed or record.coords_bohr is None or not record.converged:
            return False
        if profile.fit.series.second_derivative(record.angle_deg) >= 0:
            return False
        return bool(stable_with_torsion_frozen(hessians.gradients_at, hessians.numbers, hessians.masses,
                                               record.coords_bohr, atoms))

    return verified


def rrho_populations(minima, temperatures_k):
    """Populations of the s-cis and s-trans minima from E_el + (G - E_el) at each temperature."""
    populations = []
    for n, t in enumerate(temperatures_k):
        free = [m.energy_hartree * HARTREE_KCAL_MOL + m.gibbs_corrections_kcal_mol[n] for m in minima]
        fractions = conformer_populations(free, t)
        s_cis = float(sum(f for f, m in zip(fractions, minima) if is_s_cis(m.angle_deg)))
        s_trans = 1.0 - s_cis
        delta_g = -rt_kcal_mol(t) * math.log(s_cis / s_trans) if 0 < s_cis < 1 else float("nan")
        populations.append(RrhoPopulations(t, s_cis, s_trans, delta_g))
    return tuple(populations)


def readiness(minima, planar, temperatures_k):
    """Readiness records: planar s-cis (a StationaryRecord with torsion-frozen corrections) vs the minima."""
    lowest_e = min(m.energy_hartree for m in minima)
    records = []
    for n, t in enumerate(temperatures_k):
        lowest_g = min(m.energy_hartree * HARTREE_KCAL_MOL + m.gibbs_corrections_kcal_mol[n] for m in minima)
        delta_g = planar.energy_hartree * HARTREE_KCAL_MOL + planar.gibbs_corrections_kcal_mol[n] - lowest_g
        records.append(Readiness(t, delta_g, (planar.energy_hartree - lowest_e) * HARTREE_KCAL_MOL,
                                 math.exp(-delta_g / rt_kcal_mol(t))))
    return tuple(records)


def add_free_energies(profile, dihedral_atoms, symmetric, workers, hessians, settings, planar_scis_start=None,
                      moving_atoms=None):
    """The ProfileAnalysis with vibrations at its minima and maxima (a top no free energy needs
    carries only its verified nature: _top_check), RRHO populations and, when
    planar_scis_start (coords, hessian) is given (dienes), the planar s-cis record and readiness.
    workers: a parallel.ParallelRelaxations (for the planar s-cis relaxation); hessians: the
    molecule's Hessians (Hessians(workers.gradients_from_reference, numbers, masses)), shared by its bonds:
    the lowest minimum is often one structure for every bond."""
    masses_amu = hessians.masses
    atoms, temperatures = dihedral_atoms, settings.temperatures_k
    minima = _with_vibrations(profile.minima, _analyse_all(profile.minima, hessians, masses_amu, atoms,
                                                           temperatures, symmetric, moving_atoms))
    verified = _top_check(profile, hessians, atoms, symmetric, planar_scis_start is not None)
    maxima = _with_vibrations(profile.maxima, _analyse_all(profile.maxima, hessians, masses_amu, atoms,
                                                           temperatures, symmetric, moving_atoms, verified))
    update = dict(minima=minima, maxima=maxima, rrho_populations=rrho_populations(minima, temperatures))
    if planar_scis_start is not None and minima:
        # a converged stationary point at 0 deg already is the planar s-cis structure: its Hessian serves
        at_zero = next((r for r in (*profile.minima, *profile.maxima) if abs(r.angle_deg) < PLANAR_DEG
                        and r.converged and r.coords_bohr is not None), None)
        if at_zero is not None:
            energy, coords, converged = at_zero.energy_hartree, at_zero.coords_bohr, True
            how = f"the {at_zero.kind} at 0 deg, torsion frozen in the frequencies"
        else:
            start, hessian = planar_scis_start
            (result,) = workers.relax_jobs([RelaxJob(start, settings.refine_convergence, hessian,
                                                     (DihedralConstraint(atoms, 0.0),))])
            if isinstance(result, CalculationError):
                raise result
            if not np.isfinite(result.energy):
                raise CalculationError("the planar s-cis structure could not be optimised")
            energy, coords, converged = result.energy, result.x.reshape(-1, 3), result.converged
            how = "constrained at 0 deg, torsion frozen in the frequencies"
        vib = analyse(hessians, masses_amu, coords, atoms, temperatures, freeze_torsion=True)
        planar = StationaryRecord(
            "planar s-cis", 0.0, 0.0, energy, how, converged, coords, frequencies_cm1=vib.frequencies_cm1,
            imaginary_count=vib.imaginary_count, imaginary_along_torsion=vib.imaginary_along_torsion,
            gibbs_corrections_kcal_mol=vib.gibbs_corrections_kcal_mol,
        )
        update.update(planar_scis=planar, readiness=readiness(minima, planar, temperatures))
    return replace(profile, **update)


ROTOR_MOMENT = "projected"  # rotor.reduced_moment_of_inertia definition: the rigorous one (see README)


def _region_minimum(minima, s_cis):
    chosen = [m for m in minima if is_s_cis(m.angle_deg) == s_cis and m.other_modes_gibbs_kcal_mol]
    return min(chosen, key=lambda m: m.energy_hartree, default=None)


def rotor_and_rates(profile, mol, dihedral_atoms, temperatures_k, window_deg, structure_bohr=None):
    """torsion_as_rotor and interconversion of a profile of the dihedral of an RDKit molecule (with
    hydrogens); structure_bohr: where to take the moment of inertia when the profile's minima have
    no structure (interpolated); the profile unchanged, with a warning, when the rotor cannot be solved."""
    masses = [atom.GetMass() for atom in mol.GetAtoms()]
    moving = side_atoms(mol, dihedral_atoms[1], dihedral_atoms[2])
    try:
        profile = torsion_as_rotor(profile, masses, dihedral_atoms, moving, temperatures_k, window_deg,
                                   structure_bohr)
        return replace(profile, interconversion=interconversion(profile, temperatures_k))
    except (InputError, ValueError, np.linalg.LinAlgError) as error:
        log.warning("hindered-rotor treatment failed (%s); classical populations lead", error)
        return profile


def torsion_as_rotor(profile, masses_amu, dihedral_atoms, moving_atoms, temperatures_k, window_deg,
                     structure_bohr=None):
    """The ProfileAnalysis with the torsion treated as a 1-D quantum hindered rotor on its fit.

    The reduced moment of inertia is taken at the global minimum (ROTOR_MOMENT); per temperature
    the rotor's region populations, the torsional fundamental of every well and, when the minima
    carry frequencies, the region free energies of rotor levels plus all other modes (harmonic /
    quasi-harmonic, torsion projected out at each region's lowest minimum, ZPE included).
    """
    lowest = profile.lowest_minimum()
    coords = lowest.coords_bohr if lowest is not None and lowest.coords_bohr is not None else structure_bohr
    if profile.fit is None or coords is None:
        return profile
    _, j, k, _ = dihedral_atoms
    inertia = reduced_moment_of_inertia(masses_amu, coords, j, k, moving_atoms, definition=ROTOR_MOMENT)
    series = profile.fit.series
    rotor = tuple(rotor_populations(series, inertia, t, window_deg) for t in temperatures_k)
    free = ()
    cis, trans = _region_minimum(profile.minima, True), _region_minimum(profile.minima, False)
    if cis is not None and trans is not None:
        free = []
        for n, t in enumerate(temperatures_k):
            levels, vectors = torsional_levels(series, inertia, window_kcal_mol=BOLTZMANN_WINDOW_RT * rt_kcal_mol(t))
            free.append(conformer_free_energies(levels, region_weights(vectors), cis.other_modes_gibbs_kcal_mol[n],
                                                trans.other_modes_gibbs_kcal_mol[n], t))
        free = tuple(free)
    return replace(profile, rotor_inertia_amu_bohr2=inertia, rotor=rotor, wells=well_fundamentals(series, inertia),
                   free_energies=free)


def crossing_tops(profile):
    """The barrier tops of the lowest ways out of each region's lowest minimum into the other
    region (those whose free energies the interconversion rates use; none, one or two records)."""
    return [pair[1] for pair in (_crossing(profile, False), _crossing(profile, True)) if pair]


def _crossing(profile, from_cis):
    """(minimum, barrier top) of the lowest way out of a region's lowest minimum into the other region."""
    start = profile.lowest_minimum("s-cis" if from_cis else "s-trans")
    if start is None:
        return None
    tops = {round(m.angle_deg, 6): m for m in profile.maxima}
    ways = [b for b in profile.barriers if abs(b.from_minimum_deg - start.angle_deg) < 1e-3
            and is_s_cis(b.to_minimum_deg) != from_cis and round(b.over_maximum_deg, 6) in tops]
    if not ways:
        return None
    way = min(ways, key=lambda b: b.height_kcal_mol)
    return start, tops[round(way.over_maximum_deg, 6)]


def interconversion(profile, temperatures_k):
    """Eyring rates (records.Interconversion per temperature) between the regions from free-energy
    barriers G = E + (G - E)_quasi-RRHO (the top's imaginary mode left out), with the Wigner factor of
    the top's imaginary frequency; () when the stationary points carry no frequencies."""
    forward, backward = _crossing(profile, False), _crossing(profile, True)
    if forward is None or backward is None:
        return ()
    if not all(r.gibbs_corrections_kcal_mol and r.frequencies_cm1 for pair in (forward, backward) for r in pair):
        return ()
    records = []
    for n, t in enumerate(temperatures_k):
        def barrier(pair):
            start, top = pair
            return ((top.energy_hartree - start.energy_hartree) * HARTREE_KCAL_MOL
                    + top.gibbs_corrections_kcal_mol[n] - start.gibbs_corrections_kcal_mol[n])

        def imaginary(pair):
            lowest = pair[1].frequencies_cm1[0]
            return -lowest if lowest < 0 else None

        rates = [eyring_rate(barrier(pair), t, imaginary(pair)) for pair in (forward, backward)]
        kappas = [wigner_transmission(imaginary(pair), t) if imaginary(pair) else 1.0 for pair in (forward, backward)]
        records.append(Interconversion(t, barrier(forward), barrier(backward), rates[0], rates[1], kappas[0], kappas[1],
                                       half_life_s(rates[0] + rates[1])))
    return tuple(records)
