"""The summary JSON and the profile table (CSV) of a scan."""

import csv
import json
import math
import statistics

from .. import __version__
from ..profile import FIT_TARGET_KCAL_MOL
from ..records import SCHEMA_VERSION
from ..units import HARTREE_KCAL_MOL, KCAL_KJ

METHOD_CAUTION = (
    "Semi-empirical estimate: GFN2-xTB (Bannwarth, Ehlert, Grimme, J. Chem. Theory Comput. 2019, 15, 1652) "
    "torsion energies are typically within about 1 kcal/mol of high-level references and sometimes worse. "
    "Confirm decisions with higher-level calculations or experiment; this is not a safety assessment."
)
POPULATION_NOTE = (
    "Classical Boltzmann populations over the 1-D relaxed energy profile (electronic energy, with implicit "
    "solvation when a solvent is set): "
    "s_cis is |dihedral| < 90 deg, s_trans is |dihedral| > 90 deg, scis_window is |dihedral| <= the window. "
    "Zero-point energy, vibrational entropy differences between conformers and quantum effects are not included."
)


RRHO_NOTE = (
    " s_cis_rrho/s_trans_rrho: Boltzmann populations of the located minima from free energies "
    "G = E + (G - E)_RRHO (harmonic frequencies, quasi-RRHO entropy below 100 cm-1, Grimme 2012); "
    "'disagree' marks a difference of more than 0.1 in s-cis fraction between the two estimates "
    "(the integrated one counts the whole width of each well, the RRHO one its vibrations)."
)
POPULATION_DISAGREEMENT = 0.1  # s-cis fraction difference reported as disagreement
READINESS_NOTE = (
    "Dienes: cost of reaching the planar s-cis geometry (dihedral held at 0 deg, its torsion frozen in the "
    "frequencies) from the most stable conformer; add dG_to_planar_scis to a cycloaddition barrier computed from "
    "the planar s-cis diene. boltzmann_factor = exp(-dG/RT); scis_window is the integrated |phi| <= window fraction."
)


def _round(value, digits):
    """value rounded to `digits` decimals, with -0.0 written as 0.0."""
    return round(float(value), digits) + 0.0


def _num(value, digits):
    """A JSON-safe rounded number: None for NaN or infinity (JSON has no such values)."""
    value = float(value)
    return _round(value, digits) if math.isfinite(value) else None


def _rel(energy_hartree, reference_hartree):
    """(kcal/mol, kJ/mol) relative energies, None for a failed point."""
    if not math.isfinite(energy_hartree):
        return None, None
    kcal = (energy_hartree - reference_hartree) * HARTREE_KCAL_MOL
    return _round(kcal, 5), _round(kcal * KCAL_KJ, 5)


def bond_label(atoms):
    """1-based label "j-k" of the central bond of 0-based dihedral atoms."""
    return f"{atoms[1] + 1}-{atoms[2] + 1}"


def _stationary_dict(record, reference):
    kcal, kj = _rel(record.energy_hartree, reference)
    entry = {
        "angle_deg": _round(record.angle_deg, 3), "fit_angle_deg": _round(record.fit_angle_deg, 3),
        "energy_rel_kcal_mol": kcal, "energy_rel_kj_mol": kj,
        "refinement": record.refinement, "converged": record.converged,
    }
    if record.frequencies_cm1:
        entry.update(
            frequencies_cm1=[_round(f, 1) for f in record.frequencies_cm1],
            imaginary_count=record.imaginary_count,
            gibbs_correction_kcal_mol=[_round(g, 4) for g in record.gibbs_corrections_kcal_mol],
        )
        if record.kind == "maximum":
            entry["imaginary_along_torsion"] = record.imaginary_along_torsion
    return entry


def _populations(bond):
    """Integrated populations per temperature, with the free-energy (RRHO) ones beside them when computed."""
    entries = []
    for n, p in enumerate(bond.populations):
        entry = {"temperature_k": p.temperature_k, "s_cis": p.s_cis, "s_trans": p.s_trans,
                 "scis_window": p.scis_window, "scis_window_deg": p.scis_window_deg,
                 "delta_g_scis_minus_strans_kcal_mol": _num(p.delta_g_kcal_mol, 4)}
        if bond.rrho_populations:
            rrho = bond.rrho_populations[n]
            entry.update(
                s_cis_rrho=rrho.s_cis, s_trans_rrho=rrho.s_trans,
                delta_g_rrho_scis_minus_strans_kcal_mol=_num(rrho.delta_g_kcal_mol, 4),
                disagree=abs(rrho.s_cis - p.s_cis) > POPULATION_DISAGREEMENT,
            )
        entries.append(entry)
    return entries


def _readiness(bond):
    """The cycloaddition_readiness list of a diene bond (empty otherwise)."""
    return [
        {"temperature_k": r.temperature_k, "dG_to_planar_scis_kcal_mol": _num(r.delta_g_kcal_mol, 4),
         "dE_to_planar_scis_kcal_mol": _num(r.delta_e_kcal_mol, 4), "boltzmann_factor": _num(r.boltzmann_factor, 8),
         "scis_window": p.scis_window, "scis_window_deg": p.scis_window_deg}
        for r, p in zip(bond.readiness, bond.populations)
    ]


def solvent_dict(settings):
    """{"name", "model"} of the implicit solvent of a run's settings, or None in the gas phase."""
    if not settings.get("solvent"):
        return None
    return {"name": settings["solvent"], "model": (settings.get("solvation_model") or "alpb").upper()}


def profile_analysis_dict(analysis, ref):
    """The fit, minima, maxima, barriers and populations of a profile (a BondScan, or any object with
    fit, minima, maxima, barriers, populations and rrho_populations); energies relative to ref (Hartree)."""
    series = analysis.fit.series
    return {
        "fourier": {
            "order": series.order,
            "symmetric": analysis.fit.symmetric,
            "rmse_kcal_mol": _round(analysis.fit.rmse_kcal_mol, 5),
            "target_rmse_kcal_mol": FIT_TARGET_KCAL_MOL,
            "target_met": analysis.fit.rmse_kcal_mol <= FIT_TARGET_KCAL_MOL,
            "max_residual_kcal_mol": _round(analysis.fit.max_residual_kcal_mol, 5),
            "series_kcal_mol": {
                "form": "E = constant + sum_n [cos_n cos(n phi) + sin_n sin(n phi)]",
                "constant": series.constant, "cos": list(series.cos), "sin": list(series.sin),
            },
            "force_field": {
                "form": "E = constant + sum_n V_n/2 [1 + cos(n phi - phase_n)]",
                "constant_kcal_mol": series.force_field_constant,
                "terms": [
                    {"periodicity": t.periodicity, "v_kcal_mol": t.barrier_kcal_mol,
                     "v_kj_mol": t.barrier_kj_mol, "phase_deg": t.phase_deg}
                    for t in series.force_field_terms()
                ],
            },
        },
        "minima": [_stationary_dict(m, ref) for m in analysis.minima],
        "maxima": [_stationary_dict(m, ref) for m in analysis.maxima],
        "barriers": [
            {"from_minimum_deg": _round(b.from_minimum_deg, 3), "over_maximum_deg": _round(b.over_maximum_deg, 3),
             "to_minimum_deg": _round(b.to_minimum_deg, 3), "height_kcal_mol": _round(b.height_kcal_mol, 4),
             "height_kj_mol": _round(b.height_kcal_mol * KCAL_KJ, 4), "converged": b.converged}
            for b in analysis.barriers
        ],
        "populations": _populations(analysis),
    }


def bond_dict(result, bond):
    """The summary entry of one scanned dihedral."""
    ref = bond.reference_energy_hartree
    computed = [p for p in bond.points if not p.mirrored]
    series = bond.fit.series
    points = []
    for p in bond.points:
        kcal, kj = _rel(p.energy_hartree, ref)
        entry = {
            "angle_deg": p.angle_deg, "measured_angle_deg": _num(p.measured_angle_deg, 5),
            "energy_rel_kcal_mol": kcal, "energy_rel_kj_mol": kj,
            "fit_kcal_mol": _round(float(series.value(p.angle_deg)), 5),
            "gradient_evaluations": p.gradient_evaluations, "converged": p.converged, "mirrored": p.mirrored,
            "central_bond_order": _num(p.central_bond_order, 5), "homo_lumo_gap_ev": _num(p.homo_lumo_gap_ev, 5),
        }
        if p.failure:
            entry["failure"] = p.failure
        points.append(entry)
    return {
        "bond": bond_label(bond.dihedral_atoms),
        "dihedral_atoms": [a + 1 for a in bond.dihedral_atoms],
        "conjugated": bond.conjugated,
        "symmetric_profile": bond.symmetric,
        "method": result.method,
        "engine": result.engine,
        "solvent": solvent_dict(result.settings),
        "reference_energy_hartree": ref,
        "points": points,
        **profile_analysis_dict(bond, ref),
        "populations_note": POPULATION_NOTE + (RRHO_NOTE if bond.rrho_populations else ""),
        "planar_scis": _stationary_dict(bond.planar_scis, ref) if bond.planar_scis else None,
        "cycloaddition_readiness": _readiness(bond),
        "cycloaddition_readiness_note": READINESS_NOTE if bond.readiness else None,
        "hysteresis": {
            "threshold_kcal_mol": result.settings.get("hysteresis_kcal_mol"),
            "flagged": bool(bond.hysteresis),
            "points": [
                {"angle_deg": h.angle_deg, "energy_difference_kcal_mol": _round(h.energy_difference_kcal_mol, 4)}
                for h in bond.hysteresis
            ],
        },
        "gradient_evaluations_total": bond.gradient_evaluations_total,
        "gradient_evaluations_per_point_median": statistics.median(p.gradient_evaluations for p in computed),
        "wall_time_s": _round(bond.wall_time_s, 3),
        "frequency_gradient_evaluations": bond.frequency_gradient_evaluations,
        "frequency_wall_time_s": _round(bond.frequency_wall_time_s, 3),
    }


def summary_dict(result):
    """The whole summary as plain data (see README for the fields)."""
    return {
        "schema_version": SCHEMA_VERSION,
        "program": f"torsionscan {__version__}",
        "name": result.name,
        "smiles": result.smiles,
        "charge": result.charge,
        "unpaired_electrons": result.unpaired_electrons,
        "method": result.method,
        "engine": result.engine,
        "solvent": solvent_dict(result.settings),
        "caution": METHOD_CAUTION,
        "settings": result.settings,
        "start": {
            "energy_hartree": result.start_energy_hartree,
            "gradient_evaluations": result.start_gradient_evaluations,
        },
        "bonds": [bond_dict(result, b) for b in result.bonds],
        "failed_bonds": [{"bond": label, "reason": reason} for label, reason in result.failed_bonds],
    }


def write_summary(summary, path):
    """Write a summary (from summary_dict) as JSON."""
    path.write_text(json.dumps(summary, indent=2, allow_nan=False) + "\n")


# every field a profile point can carry, in the order of the summary (the run database uses it too)
POINT_KEYS = ("angle_deg", "measured_angle_deg", "energy_rel_kcal_mol", "energy_rel_kj_mol", "fit_kcal_mol",
              "gradient_evaluations", "converged", "mirrored", "central_bond_order", "homo_lumo_gap_ev",
              "failure", "energy_rescored_rel_kcal_mol")


def write_profile_table(bond_entry, path):
    """Write one dihedral's points (from its summary entry) as CSV."""
    with path.open("w", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=POINT_KEYS, extrasaction="ignore")
        writer.writeheader()
        writer.writerows(bond_entry["points"])
