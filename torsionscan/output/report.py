"""The run-level table and overview figure of a batch, as pure functions of records.

compound_rows turns one compound (its list record and, when done, its ScanResult) into table
rows; overview_figure draws the ranked s-cis populations. Reading the run database and writing
the files is torsionscan.runfolder's job. Energies in kcal/mol, angles in degrees; values are
rounded here, for the table.
"""

import math

import matplotlib.pyplot as plt

from ..profile import FIT_TARGET_KCAL_MOL

_OVERVIEW_ROWS = 40  # bars drawn in the overview; a longer run shows its highest s-cis populations
_ANGLE_DIGITS, _ENERGY_DIGITS, _BARRIER_DIGITS, _DELTA_G_DIGITS = 3, 5, 4, 4


def _temperature_key(temperature_k):
    return f"{temperature_k:g}K"


def _rounded(value, digits):
    """value rounded for the table (-0.0 as 0.0); None stays None, NaN and infinity become None."""
    if value is None or not math.isfinite(value):
        return None
    return round(float(value), digits) + 0.0


def table_columns(temperatures_k, extra_columns):
    """Columns of the results table, in order."""
    columns = ["name", "smiles", "bond", "dihedral_atoms", "status", "reason", "global_min_deg",
               "scis_min_deg", "scis_min_rel_kcal_mol", "strans_min_rel_kcal_mol",
               "barrier_to_other_region_kcal_mol", "rotation_max_kcal_mol"]
    for t in temperatures_k:
        key = _temperature_key(t)
        columns += [f"s_cis_{key}", f"scis_window_{key}", f"dG_scis_minus_strans_{key}_kcal_mol",
                    f"s_cis_rrho_{key}", f"dG_to_planar_scis_{key}_kcal_mol"]
    columns += ["fit_rmse_kcal_mol", "fit_target_met", "hysteresis", "rescore_level", "rescored_global_min_deg",
                "rescored_barrier_to_other_region_kcal_mol"]
    columns += [f"rescored_s_cis_{_temperature_key(t)}" for t in temperatures_k]
    columns += ["method_disagreement_max_kcal_mol", "method_disagreement_warning", "refine_level", "refine_points",
                "refined_global_min_deg", "refined_scis_min_deg", "refined_scis_min_rel_kcal_mol",
                "refined_barrier_to_other_region_kcal_mol"]
    for t in temperatures_k:
        key = _temperature_key(t)
        columns += [f"refined_s_cis_{key}", f"refined_s_cis_rrho_{key}", f"refined_dG_to_planar_scis_{key}_kcal_mol"]
    columns += ["refined_disagreement_max_kcal_mol", "refined_disagreement_warning", "compound_wall_time_s"]
    return columns + [c for c in extra_columns if c not in columns]


def _angle(record):
    return None if record is None else _rounded(record.angle_deg, _ANGLE_DIGITS)


def _extremes(analysis):
    """(global minimum angle, lowest s-cis minimum angle, barrier into the other region) of a ProfileAnalysis."""
    return (_angle(analysis.lowest_minimum()), _angle(analysis.lowest_minimum("s-cis")),
            _rounded(analysis.barrier_to_other_region(), _BARRIER_DIGITS))


def bond_row(bond):
    """The table values of one scanned bond (BondScan), and of its re-scored profile if any."""
    profile = bond.profile

    def relative(record):
        return None if record is None else _rounded(profile.relative_kcal_mol(record.energy_hartree), _ENERGY_DIGITS)

    global_min, scis_min, barrier = _extremes(profile)
    energies = [relative(r) for r in (*bond.points, *profile.maxima)]
    energies = [e for e in energies if e is not None]
    row = {
        "bond": bond.label, "dihedral_atoms": "-".join(str(a + 1) for a in bond.dihedral_atoms),
        "global_min_deg": global_min, "scis_min_deg": scis_min,
        "scis_min_rel_kcal_mol": relative(profile.lowest_minimum("s-cis")),
        "strans_min_rel_kcal_mol": relative(profile.lowest_minimum("s-trans")),
        "barrier_to_other_region_kcal_mol": barrier,
        "rotation_max_kcal_mol": max(energies, default=None),
        "fit_rmse_kcal_mol": _rounded(profile.fit.rmse_kcal_mol, _ENERGY_DIGITS),
        "fit_target_met": profile.fit.rmse_kcal_mol <= FIT_TARGET_KCAL_MOL,
        "hysteresis": bool(bond.hysteresis),
    }
    rrho = {p.temperature_k: p for p in profile.rrho_populations}
    for p in profile.populations:
        key = _temperature_key(p.temperature_k)
        row[f"s_cis_{key}"] = p.s_cis
        row[f"scis_window_{key}"] = p.scis_window
        row[f"dG_scis_minus_strans_{key}_kcal_mol"] = _rounded(p.delta_g_kcal_mol, _DELTA_G_DIGITS)
        row[f"s_cis_rrho_{key}"] = rrho[p.temperature_k].s_cis if p.temperature_k in rrho else None
    for r in profile.readiness:
        row[f"dG_to_planar_scis_{_temperature_key(r.temperature_k)}_kcal_mol"] = _rounded(r.delta_g_kcal_mol,
                                                                                          _DELTA_G_DIGITS)
    if bond.rescored is not None:
        rescored = bond.rescored
        global_min, _, barrier = _extremes(rescored.analysis)
        row.update({"rescore_level": rescored.level, "rescored_global_min_deg": global_min,
                    "rescored_barrier_to_other_region_kcal_mol": barrier,
                    "method_disagreement_max_kcal_mol": _rounded(rescored.disagreement.max_kcal_mol, _BARRIER_DIGITS),
                    "method_disagreement_warning": rescored.disagreement.warning or ""})
        for p in rescored.analysis.populations:
            row[f"rescored_s_cis_{_temperature_key(p.temperature_k)}"] = p.s_cis
    if bond.refined is not None:
        row.update(_refined_row(bond.refined))
    return row


def _refined_row(refined):
    """The table values of a refined profile (RefinedProfile)."""
    analysis = refined.analysis
    global_min, scis_min, barrier = _extremes(analysis)
    scis = analysis.lowest_minimum("s-cis")
    row = {"refine_level": refined.level, "refine_points": refined.points_mode, "refined_global_min_deg": global_min,
           "refined_scis_min_deg": scis_min,
           "refined_scis_min_rel_kcal_mol": None if scis is None else _rounded(
               analysis.relative_kcal_mol(scis.energy_hartree), _ENERGY_DIGITS),
           "refined_barrier_to_other_region_kcal_mol": barrier}
    for p in analysis.populations:
        row[f"refined_s_cis_{_temperature_key(p.temperature_k)}"] = p.s_cis
    for p in analysis.rrho_populations:
        row[f"refined_s_cis_rrho_{_temperature_key(p.temperature_k)}"] = p.s_cis
    for r in analysis.readiness:
        row[f"refined_dG_to_planar_scis_{_temperature_key(r.temperature_k)}_kcal_mol"] = _rounded(
            r.delta_g_kcal_mol, _DELTA_G_DIGITS)
    if refined.disagreement is not None:
        row["refined_disagreement_max_kcal_mol"] = _rounded(refined.disagreement.max_kcal_mol, _BARRIER_DIGITS)
        row["refined_disagreement_warning"] = refined.disagreement.warning or ""
    return row


def compound_rows(record, result):
    """Table rows of one compound: record is its list record (RunStore.compound), result its
    ScanResult, None unless done. A done compound whose re-scoring failed says so in its reason."""
    # list columns first, so a column of the same name as one of ours cannot replace our value
    base = {**record["extra"], "name": record["name"], "smiles": record["smiles"],
            "compound_wall_time_s": record["wall_time_s"]}
    if result is None:
        return [{**base, "status": record["status"], "reason": record["reason"]}]
    base["smiles"] = result.smiles
    reason = record.get("rescore_failure") or ""
    rows = [{**base, **bond_row(bond), "status": "done", "reason": reason} for bond in result.bonds]
    rows += [{**base, "bond": label, "status": "failed", "reason": why} for label, why in result.failed_bonds]
    return rows


def overview_figure(rows, temperature_k, method):
    """Ranked bars: s-cis population of every scanned bond at one temperature, barrier beside it.

    method: what computed the profiles (ScanResult.method), named in the title."""
    key = f"s_cis_{_temperature_key(temperature_k)}"
    done = sorted((r for r in rows if r.get(key) is not None), key=lambda r: r[key], reverse=True)
    shown = done[:_OVERVIEW_ROWS]
    fig, ax = plt.subplots(figsize=(8.0, 1.2 + 0.32 * max(len(shown), 1)), dpi=110)
    labels = [f"{r['name']}  (bond {r['bond']})" for r in shown]
    values = [100.0 * r[key] for r in shown]
    positions = range(len(shown))
    ax.barh(positions, values, color="#1f5fa8", height=0.65)
    for y, row, value in zip(positions, shown, values):
        barrier = row["barrier_to_other_region_kcal_mol"]
        note = f"{value:.1f}%" + (f"   barrier {barrier:.1f} kcal/mol" if barrier is not None else "")
        ax.text(value + 1.0, y, note, va="center", fontsize=7, color="#333333")
    ax.set_yticks(list(positions), labels, fontsize=8)
    ax.invert_yaxis()
    ax.set_xlim(0, 150)
    ax.set_xticks(range(0, 101, 20))
    ax.set_xlabel(f"s-cis population (|φ| < 90°) at {temperature_k:g} K / %")
    more = f" (highest {len(shown)} of {len(done)})" if len(done) > len(shown) else ""
    ax.set_title(f"s-cis population by bond{more}; barrier from the global minimum into the other region\n"
                 f"{method} relaxed scans", fontsize=9)
    fig.tight_layout()
    return fig
