"""Torsion parameters of a scanned bond for a molecular-mechanics model: residual, fit and proof.

    residual(phi) = E_QM(phi) - E_MM,no-torsion(phi)   ->   sum_n k_n [1 + cos(n phi - phase_n)]

All fitted terms go on the scan's own dihedral (the heavy-atom quartet i-j-k-l the profile is
measured on), and the MM torsion terms of every quartet about the bond are removed first, so
the fitted terms replace all of them. Exports list that one quartet. Points the scan obtained by
mirror symmetry use the MM energy of their mirror image (MM energies are mirror-invariant), so
the fit sees the full circle. Energies in kcal/mol, angles in degrees.
"""

import time
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .mm import Mmff94
from .torsionfit import (
    DEFAULT_MAX_PERIODICITY, MAX_PERIODICITY, RIDGE, boltzmann_weights, fit_terms, profile_errors, term_energy,
)
from .entries import computed_points, points_with_frames

TERM_SHARING = ("all terms on the scanned dihedral's quartet (dihedral_atoms); the MM torsion terms of every "
                "atom quartet about the bond were removed before fitting, so these terms replace them all")
MM_GEOMETRY = "MM energies at the relaxed quantum scan geometries (no MM relaxation)"


@dataclass(frozen=True)
class FitOptions:
    """How the terms are fitted: periodicities 1..max_periodicity, phases 0/180 unless free_phases,
    Boltzmann weights exp(-E_QM/RT) at weight_temperature_k if given."""

    max_periodicity: int = DEFAULT_MAX_PERIODICITY
    free_phases: bool = False
    weight_temperature_k: float | None = None

    def check(self):
        if not 1 <= self.max_periodicity <= MAX_PERIODICITY:
            raise InputError(f"--periodicities must be 1 to {MAX_PERIODICITY}")
        if self.weight_temperature_k is not None and not self.weight_temperature_k > 0:
            raise InputError("--weight-temperature must be above 0 K")


def _circle(entry, frame_values, energy_key):
    """Every profile point's measured angle, quantum energy (entry[energy_key]) and per-frame values."""
    pairs = points_with_frames(entry)
    computed = computed_points(entry)
    angles = [p["measured_angle_deg"] if not p["mirrored"] else -computed[n]["measured_angle_deg"] for p, n in pairs]
    energies = [p[energy_key] for p, _ in pairs]
    rows = [n for _, n in pairs]
    return np.array(angles), np.array(energies, dtype=float), [np.asarray(v)[rows] for v in frame_values]


def fit_torsion(mol, entry, frames_angstrom, options=FitOptions(), mm_energies=None, mm_label=None,
                quantum="gfn"):
    """The torsion_fit record of one scanned bond.

    mol: RDKit molecule with hydrogens in the scan's atom order; entry: the bond's summary entry;
    frames_angstrom: relaxed coordinates of the computed frames, in XYZ-file order;
    mm_energies: per-frame MM energies without the bond's torsion terms (kcal/mol) from any force
    field, or None for the built-in MMFF94. quantum: "gfn" (the scan's energies) or "rescored"
    (the DFT re-scored energies of the same geometries).
    """
    started = time.perf_counter()
    options.check()
    if len(frames_angstrom) != len(computed_points(entry)):
        raise InputError(
            f"bond {entry['bond']}: {len(frames_angstrom)} relaxed frames for {len(computed_points(entry))} scan "
            "points; the scan folder is incomplete: rerun the scan"
        )
    energy_key = "energy_rel_kcal_mol"
    if quantum == "rescored":
        if "rescored" not in entry:
            raise InputError(f"bond {entry['bond']} has no re-scored energies; run 'torsionscan rescore' first")
        energy_key = "energy_rescored_rel_kcal_mol"
    atoms = tuple(a - 1 for a in entry["dihedral_atoms"])
    try:
        mmff = Mmff94(mol, atoms[1:3])
    except InputError:
        if mm_energies is None:
            raise
        mmff = None  # the user's own energies need no MMFF94 types
    if mm_energies is None:
        full, without = mmff.energies(frames_angstrom)
        model = mmff.name
    else:
        full, without, model = None, np.asarray(mm_energies, dtype=float), mm_label or "user-supplied MM energies"
    angles, qm, (without,) = _circle(entry, [without], energy_key)
    weights = None if options.weight_temperature_k is None else boltzmann_weights(qm, options.weight_temperature_k)
    fit = fit_terms(angles, qm - without, options.max_periodicity, options.free_phases, weights)
    with_fit = without + term_energy(fit.terms, angles)
    rmse_without, max_without = profile_errors(qm, without)
    rmse_after, max_after = profile_errors(qm, with_fit)
    record = {
        "mm_model": model,
        "quantum_profile": entry.get("rescore_level") if quantum == "rescored" else entry["method"],
        "mm_geometry": MM_GEOMETRY,
        "form": "E = sum_n k_n [1 + cos(n phi - phase_n)], phi the dihedral of dihedral_atoms",
        "dihedral_atoms": list(entry["dihedral_atoms"]),
        "term_sharing": TERM_SHARING,
        "terms": [
            {"periodicity": t.periodicity, "phase_deg": t.phase_deg, "k_kcal_mol": round(t.k_kcal_mol, 6),
             "k_kj_mol": round(t.k_kj_mol, 6), "atoms": list(entry["dihedral_atoms"]),
             "mmff_types": list(mmff.types(atoms)) if mmff else None}
            for t in fit.terms
        ],
        "constant_kcal_mol": round(fit.constant_kcal_mol, 6),
        "max_periodicity": options.max_periodicity,
        "free_phases": options.free_phases,
        "weighting": (None if options.weight_temperature_k is None
                      else {"boltzmann_temperature_k": options.weight_temperature_k}),
        "ridge": RIDGE,
        "removed_mm_torsions": [
            {"atoms": [a + 1 for a in q.atoms], "mmff_types": list(q.mmff_types),
             "v1_kcal_mol": q.v_kcal_mol[0], "v2_kcal_mol": q.v_kcal_mol[1], "v3_kcal_mol": q.v_kcal_mol[2]}
            for q in mmff.quartets
        ] if mmff and mm_energies is None else None,
        "errors_note": "RMS and largest error against the quantum profile after the best constant shift",
        "rmse_without_torsion_kcal_mol": round(rmse_without, 5),
        "max_error_without_torsion_kcal_mol": round(max_without, 5),
        "rmse_after_kcal_mol": round(rmse_after, 5),
        "max_error_after_kcal_mol": round(max_after, 5),
    }
    curves = {"mm_without_torsion_kcal_mol": without, "mm_with_fit_kcal_mol": with_fit}
    if full is not None:
        (full,) = _circle(entry, [full], energy_key)[2]
        rmse_full, max_full = profile_errors(qm, full)
        record.update(before_model=f"{model} with its own torsion terms", rmse_before_kcal_mol=round(rmse_full, 5),
                      max_error_before_kcal_mol=round(max_full, 5))
        curves["mm_full_kcal_mol"] = full
    else:
        record.update(before_model=f"{model} (no torsion terms for this bond)",
                      rmse_before_kcal_mol=round(rmse_without, 5), max_error_before_kcal_mol=round(max_without, 5))
    order = np.argsort(angles)
    record["profile"] = [
        {"angle_deg": round(float(angles[i]), 4), "qm_kcal_mol": round(float(qm[i]), 5),
         **{key: round(float(values[i] - np.mean(values - qm)), 5) for key, values in curves.items()}}
        for i in order
    ]
    record["profile_note"] = "MM curves shifted by their best constant onto the quantum profile"
    record["fit_seconds"] = round(time.perf_counter() - started, 4)
    return record
