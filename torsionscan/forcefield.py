"""Torsion parameters of a scanned bond for a molecular-mechanics model: residual, fit and proof.

    residual(phi) = E_QM(phi) - E_MM,no-torsion(phi)   ->   sum_n k_n [1 + cos(n phi - phase_n)]

All fitted terms go on the scan's own dihedral (the heavy-atom quartet i-j-k-l the profile is
measured on), and the MM torsion terms of every quartet about the bond are removed first, so
the fitted terms replace all of them. MM energies are taken at the relaxed quantum geometries
(no MM relaxation): the scan's own for the scan's and the re-scored energies, the refined
structures for the refined profile. Points the scan obtained by mirror symmetry use the MM energy
of their mirror image (MM energies are mirror-invariant), so the fit sees the full circle.
Energies in kcal/mol, angles in degrees.

bond_residual is the one place the quantum and MM profiles of a bond are put side by side; the
per-bond fit here and the fit of torsion types across molecules (torsiontypes) both start there.
"""

import math
import time
from dataclasses import dataclass

import numpy as np

from . import geometry
from .errors import InputError
from .mm import Mmff94
from .records import FitOptions, TorsionFit
from .torsionfit import boltzmann_weights, fit_terms, profile_errors, term_energy
from .units import BOHR_ANGSTROM

QUANTUM_PROFILES = ("gfn", "rescored", "refined")


@dataclass(frozen=True)
class BondResidual:
    """A bond's quantum profile beside its MM profile without the bond's torsion terms, point by point.

    angles_deg: the measured dihedral of each point (full circle, mirrored points included);
    qm_kcal_mol: the quantum profile there, relative to its own zero; mm_without_kcal_mol and
    mm_full_kcal_mol (None for user energies): absolute MM energies at the same structures.
    residual = qm - mm_without is what torsion terms on dihedral_atoms have to supply.
    frames_angstrom and mirrored: the structure of each point (a mirrored point holds its mirror
    image's structure), for the angles of other quartets at the same points (dihedral_deg).
    """

    profile_label: str  # the method or level of the quantum energies
    mm_model: str
    dihedral_atoms: tuple[int, int, int, int]
    mmff_types: tuple[int, int, int, int] | None  # of the dihedral atoms; None without MMFF94 types
    removed_torsions: tuple  # mm.Quartet records taken out of MMFF94 (empty for user energies)
    angles_deg: np.ndarray
    qm_kcal_mol: np.ndarray
    mm_without_kcal_mol: np.ndarray
    mm_full_kcal_mol: np.ndarray | None
    frames_angstrom: tuple = ()
    mirrored: tuple = ()

    def dihedral_deg(self, atoms):
        """The dihedral of any four atoms (0-based) at every point, degrees (mirrored points negated)."""
        values = [math.degrees(geometry.dihedral(frame, *atoms)) for frame in self.frames_angstrom]
        return np.array([-v if m else v for v, m in zip(values, self.mirrored)])

    @property
    def residual_kcal_mol(self):
        return self.qm_kcal_mol - self.mm_without_kcal_mol

    @property
    def mm_torsion_kcal_mol(self):
        """The MM torsion terms that were removed, per point (None for user energies)."""
        return None if self.mm_full_kcal_mol is None else self.mm_full_kcal_mol - self.mm_without_kcal_mol


def _scan_points(result, bond, quantum):
    """(profile label, relative kcal/mol, measured angles, frame per point) of the scan's structures."""
    pairs = bond.points_with_frames()
    relaxed = bond.relaxed_points
    if quantum == "gfn":
        label, qm = result.method, [bond.profile.relative_kcal_mol(p.energy_hartree) for p, _ in pairs]
    else:
        rescored = bond.rescored
        if rescored is None:
            raise InputError(f"bond {bond.label} has no re-scored energies; run 'torsionscan rescore' first")
        label, qm = rescored.level, [rescored.analysis.relative_kcal_mol(rescored.energies_hartree[n]) for _, n in pairs]
    angles = [-relaxed[n].measured_angle_deg if p.mirrored else p.measured_angle_deg for p, n in pairs]
    return label, np.array(qm), np.array(angles), [n for _, n in pairs], tuple(bool(p.mirrored) for p, _ in pairs)


def _refined_points(bond):
    """The refined profile's points with an energy (mirror images included), InputError without one."""
    refined = bond.refined
    if refined is None:
        raise InputError(f"bond {bond.label} has no refined profile; run 'torsionscan refine FOLDER --level LEVEL' "
                         "first (or use the scan's own energies)")
    if refined.points_mode != "all":
        raise InputError(f"bond {bond.label} was refined at its stationary points only, which is no profile to fit; "
                         "refine every grid point (--refine-points all)")
    return refined, [p for p in refined.points if np.isfinite(p.energy_hartree)]


def bond_residual(result, bond, quantum="gfn", mm_energies=None, mm_label=None):
    """The BondResidual of one scanned bond of `result`.

    quantum: "gfn" (the scan's own energies), "rescored" (the re-scored energies of the same
    geometries) or "refined" (the refined profile, MM energies at the refined structures).
    mm_energies: one MM energy per relaxed point (bond.relaxed_points order, kcal/mol) without the
    bond's torsion terms, from any force field, or None for the built-in MMFF94 (mm_label names
    the source).
    """
    if quantum not in QUANTUM_PROFILES:
        raise InputError(f"quantum profile {quantum!r}: choose one of {', '.join(QUANTUM_PROFILES)}")
    atoms = tuple(bond.dihedral_atoms)
    if quantum == "refined":
        if mm_energies is not None:
            raise InputError("MM energies from a table belong to the scan's frames, not to the refined structures; "
                             "fit the refined profile against MMFF94 (leave out --mm-energies)")
        refined, points = _refined_points(bond)
        label = refined.level
        qm = np.array([refined.analysis.relative_kcal_mol(p.energy_hartree) for p in points])
        angles = np.array([p.measured_angle_deg for p in points])
        frames = [p.coords_bohr * BOHR_ANGSTROM for p in points]
        rows = list(range(len(points)))
        mirrored = (False,) * len(points)  # refined mirror images are optimised from mirrored structures
    else:
        label, qm, angles, rows, mirrored = _scan_points(result, bond, quantum)
        frames = [p.coords_bohr * BOHR_ANGSTROM for p in bond.relaxed_points]
    if mm_energies is not None and len(mm_energies) != len(frames):
        raise InputError(f"{len(mm_energies)} MM energies for the {len(frames)} relaxed frames of bond {bond.label}; "
                         "give one energy per frame of that bond's XYZ file")
    try:
        mmff = Mmff94(result.mol, atoms[1:3])
    except InputError:
        if mm_energies is None:
            raise
        mmff = None  # the user's own energies need no MMFF94 types
    if mm_energies is None:
        full, without = mmff.energies(frames)
        model = mmff.name
        full = full[rows]
    else:
        full, without, model = None, np.asarray(mm_energies, dtype=float), mm_label or "user-supplied MM energies"
    return BondResidual(
        profile_label=label, mm_model=model, dihedral_atoms=atoms,
        mmff_types=mmff.types(atoms) if mmff else None,
        removed_torsions=tuple(mmff.quartets) if mmff and mm_energies is None else (),
        angles_deg=angles, qm_kcal_mol=qm, mm_without_kcal_mol=without[rows], mm_full_kcal_mol=full,
        frames_angstrom=tuple(frames[n] for n in rows), mirrored=mirrored,
    )


def fit_torsion(result, bond, options=FitOptions(), mm_energies=None, mm_label=None, quantum="gfn"):
    """The TorsionFit of one scanned bond of `result` (arguments as bond_residual's)."""
    started = time.perf_counter()
    options.check()
    data = bond_residual(result, bond, quantum, mm_energies, mm_label)
    qm, without, full, angles = data.qm_kcal_mol, data.mm_without_kcal_mol, data.mm_full_kcal_mol, data.angles_deg
    weights = None if options.weight_temperature_k is None else boltzmann_weights(qm, options.weight_temperature_k)
    fit = fit_terms(angles, qm - without, options.max_periodicity, options.free_phases, weights)
    with_fit = without + term_energy(fit.terms, angles)
    rmse_without, max_without = profile_errors(qm, without)
    rmse_after, max_after = profile_errors(qm, with_fit)
    if full is not None:
        rmse_before, max_before = profile_errors(qm, full)
        before_model = f"{data.mm_model} with its own torsion terms"
    else:
        rmse_before, max_before = rmse_without, max_without
        before_model = f"{data.mm_model} (no torsion terms for this bond)"
    order = np.argsort(angles)

    def curve(values):  # sorted by angle, shifted by the best constant onto the quantum profile
        return tuple(float(v) for v in (values - np.mean(values - qm))[order])

    return TorsionFit(
        mm_model=data.mm_model,
        quantum_profile=data.profile_label,
        dihedral_atoms=data.dihedral_atoms,
        mmff_types=data.mmff_types,
        terms=fit.terms,
        constant_kcal_mol=fit.constant_kcal_mol,
        options=options,
        removed_torsions=data.removed_torsions,
        before_model=before_model,
        rmse_before_kcal_mol=rmse_before,
        max_error_before_kcal_mol=max_before,
        rmse_without_torsion_kcal_mol=rmse_without,
        max_error_without_torsion_kcal_mol=max_without,
        rmse_after_kcal_mol=rmse_after,
        max_error_after_kcal_mol=max_after,
        profile_angles_deg=tuple(float(a) for a in angles[order]),
        qm_kcal_mol=tuple(float(v) for v in qm[order]),
        mm_without_torsion_kcal_mol=curve(without),
        mm_with_fit_kcal_mol=curve(with_fit),
        mm_full_kcal_mol=curve(full) if full is not None else None,
        fit_seconds=time.perf_counter() - started,
    )
