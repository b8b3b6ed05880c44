"""Torsion parameters of a scanned bond for a molecular-mechanics model: residual, fit and proof.

    residual(phi) = E_QM(phi) - E_MM,no-torsion(phi)   ->   sum_n k_n [1 + cos(n phi - phase_n)]

All fitted terms go on the scan's own dihedral (the heavy-atom quartet i-j-k-l the profile is
measured on), and the MM torsion terms of every quartet about the bond are removed first, so
the fitted terms replace all of them. MM energies are taken at the relaxed quantum geometries
(no MM relaxation). Points the scan obtained by mirror symmetry use the MM energy of their
mirror image (MM energies are mirror-invariant), so the fit sees the full circle. Energies in
kcal/mol, angles in degrees.
"""

import time

import numpy as np

from .errors import InputError
from .mm import Mmff94
from .records import FitOptions, TorsionFit
from .torsionfit import boltzmann_weights, fit_terms, profile_errors, term_energy
from .units import BOHR_ANGSTROM

QUANTUM_PROFILES = ("gfn", "rescored")


def _quantum_energies(result, bond, quantum):
    """(profile label, relative kcal/mol per entry of bond.points_with_frames()) of the fitted profile."""
    pairs = bond.points_with_frames()
    if quantum == "gfn":
        return result.method, np.array([bond.profile.relative_kcal_mol(p.energy_hartree) for p, _ in pairs])
    if quantum == "rescored":
        rescored = bond.rescored
        if rescored is None:
            raise InputError(f"bond {bond.label} has no re-scored energies; run 'torsionscan rescore' first")
        return rescored.level, np.array([rescored.analysis.relative_kcal_mol(rescored.energies_hartree[n])
                                         for _, n in pairs])
    raise InputError(f"quantum profile {quantum!r}: choose one of {', '.join(QUANTUM_PROFILES)}")


def fit_torsion(result, bond, options=FitOptions(), mm_energies=None, mm_label=None, quantum="gfn"):
    """The TorsionFit of one scanned bond of `result`.

    mm_energies: one MM energy per relaxed point (bond.relaxed_points order, kcal/mol) without the
    bond's torsion terms, from any force field, or None for the built-in MMFF94 (mm_label names
    the source). quantum: "gfn" (the scan's own energies) or "rescored" (the re-scored energies
    of the same geometries).
    """
    started = time.perf_counter()
    options.check()
    profile_label, qm = _quantum_energies(result, bond, quantum)
    frames = [p.coords_bohr * BOHR_ANGSTROM for p in bond.relaxed_points]
    if mm_energies is not None and len(mm_energies) != len(frames):
        raise InputError(f"{len(mm_energies)} MM energies for the {len(frames)} relaxed frames of bond {bond.label}; "
                         "give one energy per frame of that bond's XYZ file")
    atoms = bond.dihedral_atoms
    try:
        mmff = Mmff94(result.mol, atoms[1:3])
    except InputError:
        if mm_energies is None:
            raise
        mmff = None  # the user's own energies need no MMFF94 types
    if mm_energies is None:
        full, without = mmff.energies(frames)
        model = mmff.name
    else:
        full, without, model = None, np.asarray(mm_energies, dtype=float), mm_label or "user-supplied MM energies"
    pairs = bond.points_with_frames()
    relaxed = bond.relaxed_points
    angles = np.array([-relaxed[n].measured_angle_deg if p.mirrored else p.measured_angle_deg for p, n in pairs])
    rows = [n for _, n in pairs]
    without = without[rows]
    weights = None if options.weight_temperature_k is None else boltzmann_weights(qm, options.weight_temperature_k)
    fit = fit_terms(angles, qm - without, options.max_periodicity, options.free_phases, weights)
    with_fit = without + term_energy(fit.terms, angles)
    rmse_without, max_without = profile_errors(qm, without)
    rmse_after, max_after = profile_errors(qm, with_fit)
    if full is not None:
        full = full[rows]
        rmse_before, max_before = profile_errors(qm, full)
        before_model = f"{model} with its own torsion terms"
    else:
        rmse_before, max_before = rmse_without, max_without
        before_model = f"{model} (no torsion terms for this bond)"
    order = np.argsort(angles)

    def curve(values):  # sorted by angle, shifted by the best constant onto the quantum profile
        return tuple(float(v) for v in (values - np.mean(values - qm))[order])

    return TorsionFit(
        mm_model=model,
        quantum_profile=profile_label,
        dihedral_atoms=tuple(atoms),
        mmff_types=mmff.types(atoms) if mmff else None,
        terms=fit.terms,
        constant_kcal_mol=fit.constant_kcal_mol,
        options=options,
        removed_torsions=tuple(mmff.quartets) if mmff and mm_energies is None else (),
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
