"""The run-level table and overview figure of a batch, and the sentences every report shares, as
pure functions of records.

compound_rows turns one compound (its list record and, when done, its ScanResult) into table
rows; overview_figure draws the ranked s-cis populations; bond_texts and the *_text(s) helpers
are the sentences the terminal and the HTML report card print about a bond (the one population
answer first, its cross-checks, the wells, interconversion, a symmetric rotor's shape).
Reading the run database and writing the files is torsionscan.runfolder's job. Energies in
kcal/mol, angles in degrees, wavenumbers cm^-1, times s; values are rounded here, for the table.
"""

import csv
import math

import matplotlib.pyplot as plt

from ..molecule import numbered_smiles
from ..profile import FIT_TARGET_KCAL_MOL
from ..quality import FLAG_MEANINGS, flag_details, flags_text
from ..units import wrap_deg
from .summary import populations_disagree, spreadsheet_cell, spreadsheet_row

_OVERVIEW_ROWS = 40  # bars drawn in the overview; a longer run shows its highest s-cis populations
_ANGLE_DIGITS, _ENERGY_DIGITS, _BARRIER_DIGITS, _DELTA_G_DIGITS = 3, 5, 4, 4

# Half-life (s) above which interconversion of the conformers counts as slow on the bench: common
# practice, no source (a reaction set up by hand is mixed and sampled over minutes).
SLOW_INTERCONVERSION_S = 60.0
SLOW_INTERCONVERSION_NOTE = ("interconversion is slower than a bench reaction's minutes: the fast-equilibrium "
                             "assumption behind a conformational penalty fails")
SYMMETRIC_ROTOR_REASON = ("the two ring sides are equivalent: E(φ) = E(180° − φ), so an s-cis/s-trans split "
                          "has no meaning")
CLASSICAL_NAME = "classical integral"
HARMONIC_NAME = "all-harmonic, from free energies of the minima"
HARMONIC_MODEL = "harmonic free energies of the minima"  # the model when nothing better is known
_PLANAR_CLASS_DEG = 45.0  # a barrier top folded below this angle is a planar one, above it a perpendicular one


# -- sentences shared by the terminal and the report card -----------------------------------------
def folded_deg(angle_deg):
    """An angle (degrees) folded into 0-90 deg by phi -> -phi and phi -> 180 deg - phi."""
    folded = abs(float(wrap_deg(angle_deg)))
    return min(folded, 180.0 - folded)


def symmetric_rotor_shape(analysis):
    """(twist_deg, planar_barrier_kcal_mol, perpendicular_barrier_kcal_mol) of a ProfileAnalysis.

    twist: the lowest minimum folded into 0-90 deg; barriers: energy of the barrier top nearest
    0 or 180 deg (folded below 45 deg), and of the top nearest 90 deg (folded 45 deg or more),
    above that minimum, kcal/mol (the lower of tied tops). None where there is no such point.
    """
    lowest = analysis.lowest_minimum()
    if lowest is None:
        return None, None, None
    base = analysis.relative_kcal_mol(lowest.energy_hartree)
    tops = [(folded_deg(m.angle_deg), analysis.relative_kcal_mol(m.energy_hartree) - base) for m in analysis.maxima
            if math.isfinite(m.energy_hartree)]
    planar = min((t for t in tops if t[0] < _PLANAR_CLASS_DEG), key=lambda t: (round(t[0], 1), t[1]), default=None)
    perpendicular = min((t for t in tops if t[0] >= _PLANAR_CLASS_DEG), key=lambda t: (round(90.0 - t[0], 1), t[1]),
                        default=None)
    return (folded_deg(lowest.angle_deg), None if planar is None else planar[1],
            None if perpendicular is None else perpendicular[1])


def _classical_leads(analysis):
    return not (analysis.free_energies or analysis.rotor)


def leading_answer(analysis):
    """(populations per temperature, words for their model): ProfileAnalysis.leading_populations(),
    or the harmonic free energies of the minima when only stationary points are known."""
    entries = analysis.leading_populations()
    if entries:
        return entries, analysis.population_model
    return analysis.rrho_populations, (HARMONIC_MODEL if analysis.rrho_populations else "")


def angle_meaning_text(bond):
    """What the angles of a BondScan mean, with the fragments 0 deg puts syn (BondScan.scis_meaning)
    when known; for a symmetric rotor 0 and 180 deg are both planar."""
    if bond.symmetric_rotor:
        where = f"{bond.scis_meaning} at 0°; " if bond.scis_meaning else ""
        return f"{where}0° and 180° planar, 90° perpendicular"
    return f"0° = {bond.scis_meaning or 's-cis'}, 180° = s-trans"


def symmetric_rotor_texts(analysis):
    """The two sentences of a symmetric rotor: why there is no s-cis/s-trans split, and its shape."""
    twist, planar, perpendicular = symmetric_rotor_shape(analysis)

    def energy(value):
        return "—" if value is None else f"{value:.2f}"

    twist_text = "—" if twist is None else f"{twist:.1f}°"
    return [f"symmetric rotor: {SYMMETRIC_ROTOR_REASON}",
            f"twist {twist_text}; barrier at planar {energy(planar)}, "
            f"at perpendicular {energy(perpendicular)} kcal/mol"]


def _delta_g_text(delta_g):
    return f"{delta_g:+.2f} kcal/mol" if math.isfinite(delta_g) else "beyond numerical range"


def population_texts(analysis):
    """(heading naming the model, [one sentence per temperature]) of the leading populations;
    ("", []) when the profile has none."""
    entries, model = leading_answer(analysis)
    texts = []
    for p in entries:
        text = (f"{p.temperature_k:g} K: s-cis {100 * p.s_cis:.1f}%, s-trans {100 * p.s_trans:.1f}%, "
                f"ΔG(s-cis − s-trans) {_delta_g_text(p.delta_g_kcal_mol)}")
        if getattr(p, "scis_window", None) is not None:
            text += f"; |φ| ≤ {p.scis_window_deg:g}° {100 * p.scis_window:.1f}%"
        texts.append(text)
    return (f"populations ({model}):" if texts else ""), texts


def cross_check_text(analysis):
    """One sentence with the s-cis percentages of the estimates that are not the leading answer
    (classical integral, all-harmonic), each flagged where it departs from the leading answer by
    more than summary.POPULATION_DISAGREEMENT; None when there is no other estimate."""
    entries, _ = leading_answer(analysis)
    checks = []
    if not _classical_leads(analysis) and analysis.populations:
        checks.append((CLASSICAL_NAME, analysis.populations))
    if analysis.leading_populations() and analysis.rrho_populations:
        checks.append((HARMONIC_NAME, analysis.rrho_populations))
    if not entries or not checks:
        return None
    temperatures = [p.temperature_k for p in entries]
    parts = []
    for name, records in checks:
        by_temperature = {r.temperature_k: r for r in records}
        values = [f"{100 * by_temperature[t].s_cis:.1f}" if t in by_temperature else "—" for t in temperatures]
        apart = [f"{t:g}" for t, lead in zip(temperatures, entries)
                 if t in by_temperature and populations_disagree(lead, by_temperature[t])]
        part = f"{name} {' / '.join(values)}%"
        if apart:
            part += f" [disagrees with the leading answer at {' / '.join(apart)} K]"
        parts.append(part)
    return f"cross-checks, s-cis at {' / '.join(f'{t:g}' for t in temperatures)} K: " + "; ".join(parts)


def wells_text(analysis):
    """The torsional fundamental of each well (and the tunnelling splitting of a mirror pair of
    wells where finite) in one sentence, cm^-1; None without quantum-rotor wells."""
    if not analysis.wells:
        return None
    parts = []
    for well in analysis.wells:
        angle = 180.0 if abs(wrap_deg(well.angle_deg)) > 179.95 else float(wrap_deg(well.angle_deg))  # no "-180.0"
        where = f"±{abs(angle):.1f}°" if well.mirror_pair else f"{angle:.1f}°"
        part = f"{where} " + (f"{well.fundamental_cm1:.1f} cm⁻¹" if math.isfinite(well.fundamental_cm1)
                              else "not resolved (too few levels in the well)")
        if math.isfinite(well.tunnelling_splitting_cm1):
            part += f" (tunnelling splitting {well.tunnelling_splitting_cm1:.3g} cm⁻¹)"
        parts.append(part)
    return "torsional fundamental per well (quantum rotor): " + "; ".join(parts)


def is_slow(interconversion):
    """True when an Interconversion's half-life exceeds SLOW_INTERCONVERSION_S."""
    return interconversion.half_life_s > SLOW_INTERCONVERSION_S


def interconversion_texts(analysis):
    """Per temperature: the free-energy barriers (kcal/mol), rates (s^-1) and half-life (s) between
    the regions, followed by the slow-interconversion sentence where the half-life exceeds
    SLOW_INTERCONVERSION_S."""
    texts = []
    for r in analysis.interconversion:
        texts.append(f"interconversion at {r.temperature_k:g} K: "
                     f"ΔG‡ s-trans → s-cis {r.forward_barrier_kcal_mol:.2f}, "
                     f"s-cis → s-trans {r.backward_barrier_kcal_mol:.2f} kcal/mol; "
                     f"rates {r.forward_rate_per_s:.3g} and {r.backward_rate_per_s:.3g} s⁻¹; "
                     f"half-life {r.half_life_s:.3g} s")
        if is_slow(r):
            texts.append(f"at {r.temperature_k:g} K {SLOW_INTERCONVERSION_NOTE} (half-life {r.half_life_s:.3g} s "
                         f"> {SLOW_INTERCONVERSION_S:g} s)")
    return texts


def readiness_texts(analysis):
    """The planar s-cis cost of a diene per temperature (kcal/mol)."""
    return [f"diene at {r.temperature_k:g} K: planar s-cis costs ΔG {r.delta_g_kcal_mol:.2f} "
            f"(ΔE {r.delta_e_kcal_mol:.2f}) kcal/mol, Boltzmann factor {r.boltzmann_factor:.3g}"
            for r in analysis.readiness]


def bond_texts(bond):
    """The report card of a BondScan: a list of sentences, each a str or (heading, [sentences]).

    The meaning of 0 deg; then the leading populations (model named) and their cross-checks,
    or for a symmetric rotor why there is no split and its twist and barriers; the wells; the
    interconversion and the diene's planar s-cis cost (not for a symmetric rotor).
    """
    analysis = bond.profile
    texts = [angle_meaning_text(bond)]
    if bond.symmetric_rotor:
        texts += symmetric_rotor_texts(analysis)
    else:
        heading, populations = population_texts(analysis)
        if populations:
            texts.append((heading, populations))
        texts.append(cross_check_text(analysis))
    texts.append(wells_text(analysis))
    if not bond.symmetric_rotor:
        texts += interconversion_texts(analysis) + readiness_texts(analysis)
    return [t for t in texts if t]


def warning_texts(bond):
    """One sentence per raised quality flag of a BondScan: the flag, what was found, what it means."""
    return [f"{flag} ({found}): {FLAG_MEANINGS[flag]}" for flag, found in flag_details(bond)]


def key_numbers(bond):
    """[(quantity with unit, value text)] of a BondScan: the numbers a card's small table shows, in
    the report's precision (percent to 0.1, kcal/mol to 0.01, degrees to 0.1)."""
    analysis = bond.profile
    rows = [("dihedral atoms", "-".join(str(a + 1) for a in bond.dihedral_atoms))]
    lowest = analysis.lowest_minimum()
    if lowest is not None:
        rows.append(("global minimum φ (°)", angle_text(lowest.angle_deg)))
    if bond.symmetric_rotor:
        twist, planar, perpendicular = symmetric_rotor_shape(analysis)
        rows += [("twist (°)", "—" if twist is None else f"{twist:.1f}"),
                 ("barrier at planar (kcal/mol)", "—" if planar is None else f"{planar:.2f}"),
                 ("barrier at perpendicular (kcal/mol)", "—" if perpendicular is None else f"{perpendicular:.2f}")]
    else:
        entries, _ = leading_answer(analysis)
        for p in entries:
            rows.append((f"s-cis at {p.temperature_k:g} K (%)", f"{100 * p.s_cis:.1f}"))
        for p in entries:
            rows.append((f"ΔG(s-cis − s-trans) at {p.temperature_k:g} K (kcal/mol)",
                         f"{p.delta_g_kcal_mol:+.2f}" if math.isfinite(p.delta_g_kcal_mol) else "—"))
        barrier = analysis.barrier_to_other_region()
        rows.append(("barrier into the other region (kcal/mol)",
                     "none (both minima in one region)" if barrier is None else f"{barrier:.2f}"))
        for r in analysis.readiness:
            rows.append((f"ΔG to planar s-cis at {r.temperature_k:g} K (kcal/mol)", f"{r.delta_g_kcal_mol:.2f}"))
    energies = [analysis.relative_kcal_mol(r.energy_hartree) for r in (*bond.points, *analysis.maxima)]
    energies = [e for e in energies if math.isfinite(e)]
    if energies:
        rows.append(("highest energy on the circle (kcal/mol)", f"{max(energies):.2f}"))
    if analysis.fit is not None:
        rows.append(("Fourier fit RMSE (kcal/mol)", f"{analysis.fit.rmse_kcal_mol:.2f}"))
    computed = [p for p in bond.points if not p.mirrored]
    rows.append(("scan points computed", str(len(computed))))
    return rows


def angle_text(angle_deg):
    """An angle (degrees) with one decimal, 180 never shown as -180 and no "-0.0"."""
    value = float(wrap_deg(angle_deg))
    if abs(value) > 179.95:
        value = 180.0
    return f"{round(value, 1) + 0.0:.1f}"


def compound_card(result):
    """{"smiles": numbered SMILES, "bonds": [(bond label, bond_texts)], "numbers": {label: key_numbers},
    "warnings": {label: warning_texts}, "flags": {label: flag names}} of a ScanResult."""
    return {"smiles": numbered_smiles(result.mol), "bonds": [(bond.label, bond_texts(bond)) for bond in result.bonds],
            "numbers": {bond.label: key_numbers(bond) for bond in result.bonds},
            "warnings": {bond.label: warning_texts(bond) for bond in result.bonds},
            "flags": {bond.label: bond.flags for bond in result.bonds}}


def outcome_line(name, result, wall_time_s=None):
    """The batch terminal's one line for a finished compound: per bond its s-cis share (%) at the
    first temperature, its barrier (kcal/mol) and its flags."""
    took = f" ({wall_time_s:.1f} s)" if wall_time_s is not None else ""
    parts = []
    for bond in result.bonds:
        analysis = bond.profile
        text = f"bond {bond.label}: "
        if bond.symmetric_rotor:
            twist, _, _ = symmetric_rotor_shape(analysis)
            text += "symmetric rotor" + ("" if twist is None else f", twist {twist:.1f}°")
        else:
            entries, _ = leading_answer(analysis)
            text += (f"s-cis {100 * entries[0].s_cis:.1f}% at {entries[0].temperature_k:g} K" if entries
                     else "no populations")
            barrier = analysis.barrier_to_other_region()
            text += ", no barrier into the other region" if barrier is None else f", barrier {barrier:.2f} kcal/mol"
        flags = [f for f in bond.flags if f != "symmetric rotor"]
        if flags:
            text += f" [{flags_text(flags)}]"
        parts.append(text)
    parts += [f"bond {label} FAILED: {why}" for label, why in result.failed_bonds]
    return f"{name}: " + ("; ".join(parts) or "no bond scanned") + took


# -- the results table ----------------------------------------------------------------------------
def _temperature_key(temperature_k):
    return f"{temperature_k:g}K"


def _rounded(value, digits):
    """value rounded for the table (-0.0 as 0.0); None stays None, NaN and infinity become None."""
    if value is None or not math.isfinite(value):
        return None
    return round(float(value), digits) + 0.0


def table_columns(temperatures_k, extra_columns):
    """Columns of the results table, in order."""
    columns = ["name", "smiles", "bond", "dihedral_atoms", "scis_meaning", "status", "reason", "global_min_deg",
               "scis_min_deg", "scis_min_rel_kcal_mol", "strans_min_rel_kcal_mol",
               "barrier_to_other_region_kcal_mol", "rotation_max_kcal_mol", "symmetric_rotor", "twist_deg",
               "planar_barrier_kcal_mol", "perpendicular_barrier_kcal_mol", "population_model"]
    for t in temperatures_k:
        key = _temperature_key(t)
        columns += [f"s_cis_{key}", f"scis_window_{key}", f"dG_scis_minus_strans_{key}_kcal_mol",
                    f"s_cis_classical_{key}", f"s_cis_harmonic_{key}", f"dG_to_planar_scis_{key}_kcal_mol",
                    f"half_life_{key}_s"]
    columns += ["fit_rmse_kcal_mol", "fit_target_met", "hysteresis", "flags", "rescore_level", "rescored_global_min_deg",
                "rescored_barrier_to_other_region_kcal_mol"]
    columns += [f"rescored_s_cis_{_temperature_key(t)}" for t in temperatures_k] + ["rescored_population_model"]
    columns += ["method_disagreement_max_kcal_mol", "method_disagreement_warning", "refine_level", "refine_points",
                "refined_global_min_deg", "refined_scis_min_deg", "refined_scis_min_rel_kcal_mol",
                "refined_barrier_to_other_region_kcal_mol"]
    for t in temperatures_k:
        key = _temperature_key(t)
        columns += [f"refined_s_cis_{key}", f"refined_s_cis_harmonic_{key}",
                    f"refined_dG_to_planar_scis_{key}_kcal_mol"]
    columns += ["refined_population_model"]
    columns += ["refined_disagreement_max_kcal_mol", "refined_disagreement_warning", "compound_wall_time_s"]
    return columns + [c for c in extra_columns if c not in columns]


def write_table_csv(handle, columns, rows):
    """Write the results table (rows keyed by columns, extra keys ignored) as CSV to an open text
    handle; header and text cells pass through spreadsheet_cell, so a compound named "=HYPERLINK(...)"
    or a list column "@x" is read as text by spreadsheets, while numbers stay numbers."""
    writer = csv.writer(handle)
    writer.writerow([spreadsheet_cell(column) for column in columns])
    for row in rows:
        safe = spreadsheet_row(row)
        writer.writerow(["" if safe.get(column) is None else safe.get(column) for column in columns])


# columns that split the circle into s-cis and s-trans: empty for a symmetric rotor
_REGION_COLUMN_PREFIXES = ("scis_min_", "strans_min_", "barrier_to_other_region", "population_model", "s_cis_",
                           "rescored_population_model", "refined_population_model",
                           "scis_window_", "dG_", "half_life_", "rescored_s_cis_", "rescored_barrier_to_other_region",
                           "refined_scis_min_", "refined_barrier_to_other_region", "refined_s_cis_", "refined_dG_")


def _angle(record):
    return None if record is None else _rounded(record.angle_deg, _ANGLE_DIGITS)


def _extremes(analysis):
    """(global minimum angle, lowest s-cis minimum angle, barrier into the other region) of a ProfileAnalysis."""
    return (_angle(analysis.lowest_minimum()), _angle(analysis.lowest_minimum("s-cis")),
            _rounded(analysis.barrier_to_other_region(), _BARRIER_DIGITS))


def bond_row(bond):
    """The table values of one scanned bond (BondScan), and of its re-scored and refined profiles if any.

    s_cis_<T>, scis_window_<T> and dG_scis_minus_strans_<T>_kcal_mol are the leading answer
    (ProfileAnalysis.leading_populations(), model in population_model; the window from the
    quantum rotor when computed, else the classical integral); s_cis_classical_<T> and
    s_cis_harmonic_<T> the cross-checks. A symmetric rotor has no s-cis/s-trans columns but
    twist_deg and its planar and perpendicular barriers.
    """
    profile = bond.profile

    def relative(record):
        return None if record is None else _rounded(profile.relative_kcal_mol(record.energy_hartree), _ENERGY_DIGITS)

    global_min, scis_min, barrier = _extremes(profile)
    energies = [relative(r) for r in (*bond.points, *profile.maxima)]
    energies = [e for e in energies if e is not None]
    twist, planar, perpendicular = symmetric_rotor_shape(profile) if bond.symmetric_rotor else (None, None, None)
    leading, model = leading_answer(profile)
    row = {
        "bond": bond.label, "dihedral_atoms": "-".join(str(a + 1) for a in bond.dihedral_atoms),
        "scis_meaning": bond.scis_meaning,
        "global_min_deg": global_min, "scis_min_deg": scis_min,
        "scis_min_rel_kcal_mol": relative(profile.lowest_minimum("s-cis")),
        "strans_min_rel_kcal_mol": relative(profile.lowest_minimum("s-trans")),
        "barrier_to_other_region_kcal_mol": barrier,
        "rotation_max_kcal_mol": max(energies, default=None),
        "symmetric_rotor": bond.symmetric_rotor, "twist_deg": _rounded(twist, _ANGLE_DIGITS),
        "planar_barrier_kcal_mol": _rounded(planar, _BARRIER_DIGITS),
        "perpendicular_barrier_kcal_mol": _rounded(perpendicular, _BARRIER_DIGITS),
        "population_model": model or None,
        "fit_rmse_kcal_mol": _rounded(profile.fit.rmse_kcal_mol, _ENERGY_DIGITS),
        "fit_target_met": profile.fit.rmse_kcal_mol <= FIT_TARGET_KCAL_MOL,
        "hysteresis": bool(bond.hysteresis),
        "flags": flags_text(bond.flags),
    }
    for p in leading:
        key = _temperature_key(p.temperature_k)
        row[f"s_cis_{key}"] = p.s_cis
        row[f"dG_scis_minus_strans_{key}_kcal_mol"] = _rounded(p.delta_g_kcal_mol, _DELTA_G_DIGITS)
    for p in profile.rotor or profile.populations:
        row[f"scis_window_{_temperature_key(p.temperature_k)}"] = p.scis_window
    for p in profile.populations:
        row[f"s_cis_classical_{_temperature_key(p.temperature_k)}"] = p.s_cis
    for p in profile.rrho_populations:
        row[f"s_cis_harmonic_{_temperature_key(p.temperature_k)}"] = p.s_cis
    for r in profile.readiness:
        row[f"dG_to_planar_scis_{_temperature_key(r.temperature_k)}_kcal_mol"] = _rounded(r.delta_g_kcal_mol,
                                                                                          _DELTA_G_DIGITS)
    for r in profile.interconversion:
        row[f"half_life_{_temperature_key(r.temperature_k)}_s"] = _rounded_significant(r.half_life_s)
    if bond.rescored is not None:
        rescored = bond.rescored
        global_min, _, barrier = _extremes(rescored.analysis)
        row.update({"rescore_level": rescored.level, "rescored_global_min_deg": global_min,
                    "rescored_barrier_to_other_region_kcal_mol": barrier,
                    "method_disagreement_max_kcal_mol": _rounded(rescored.disagreement.max_kcal_mol, _BARRIER_DIGITS),
                    "method_disagreement_warning": rescored.disagreement.warning or ""})
        entries, row["rescored_population_model"] = leading_answer(rescored.analysis)
        for p in entries:
            row[f"rescored_s_cis_{_temperature_key(p.temperature_k)}"] = p.s_cis
    if bond.refined is not None:
        row.update(_refined_row(bond.refined))
    if bond.symmetric_rotor:
        row.update({key: None for key in row if key.startswith(_REGION_COLUMN_PREFIXES)})
    return row


def _rounded_significant(value, digits=4):
    """value to `digits` significant figures for the table; None for None, NaN and infinity."""
    if value is None or not math.isfinite(value):
        return None
    return float(f"{value:.{digits}g}") + 0.0


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
    entries, row["refined_population_model"] = leading_answer(analysis)
    for p in entries:
        row[f"refined_s_cis_{_temperature_key(p.temperature_k)}"] = p.s_cis
    for p in analysis.rrho_populations:
        row[f"refined_s_cis_harmonic_{_temperature_key(p.temperature_k)}"] = p.s_cis
    for r in analysis.readiness:
        row[f"refined_dG_to_planar_scis_{_temperature_key(r.temperature_k)}_kcal_mol"] = _rounded(
            r.delta_g_kcal_mol, _DELTA_G_DIGITS)
    if refined.disagreement is not None:
        row["refined_disagreement_max_kcal_mol"] = _rounded(refined.disagreement.max_kcal_mol, _BARRIER_DIGITS)
        row["refined_disagreement_warning"] = refined.disagreement.warning or ""
    return row


def compound_rows(record, result):
    """Table rows of one compound: record is its list record (RunStore.compound), result its
    ScanResult, None unless done. A done compound whose re-scoring failed says so in its reason.
    A done compound's smiles carries the atom numbers of its bonds (molecule.numbered_smiles)."""
    # list columns first, so a column of the same name as one of ours cannot replace our value
    base = {**record["extra"], "name": record["name"], "smiles": record["smiles"],
            "compound_wall_time_s": record["wall_time_s"]}
    if result is None:
        return [{**base, "status": record["status"], "reason": record["reason"]}]
    base["smiles"] = numbered_smiles(result.mol)
    reason = record.get("rescore_failure") or ""
    rows = [{**base, **bond_row(bond), "status": "done", "reason": reason} for bond in result.bonds]
    rows += [{**base, "bond": label, "status": "failed", "reason": why} for label, why in result.failed_bonds]
    return rows


def overview_figure(rows, temperature_k, method):
    """Ranked bars: the leading s-cis population (%) of every scanned bond at one temperature, its
    barrier (or why there is none) in a column on the right. The axis runs to the largest share
    (rounded up to 10 %), not to a fixed width. Symmetric rotors are not ranked (a note under the
    bars counts them).

    method: what computed the profiles (ScanResult.method), named in the title."""
    key = f"s_cis_{_temperature_key(temperature_k)}"
    done = sorted((r for r in rows if r.get(key) is not None and not r.get("symmetric_rotor")),
                  key=lambda r: r[key], reverse=True)
    shown = done[:_OVERVIEW_ROWS]
    left_out = sum(1 for r in rows if r.get("symmetric_rotor") and r.get("status") == "done")
    note = (f"{left_out} symmetric rotor bond{'' if left_out == 1 else 's'} not ranked: "
            f"{SYMMETRIC_ROTOR_REASON}") if left_out else ""
    height = 1.4 + 0.32 * max(len(shown), 1) + (0.4 if note else 0.0)
    fig, ax = plt.subplots(figsize=(9.0, height), dpi=110)
    labels = [f"{r['name']}  (bond {r['bond']})" for r in shown]
    values = [100.0 * r[key] for r in shown]
    positions = list(range(len(shown)))
    ax.barh(positions, values, color="#1f5fa8", height=0.65)
    right = max(10.0, min(100.0, 10.0 * math.ceil(max(values, default=10.0) * 1.12 / 10.0)))
    for y, value in zip(positions, values):
        inside = value > 0.8 * right
        ax.text(value - 0.01 * right if inside else value + 0.01 * right, y, f"{value:.1f}%", va="center",
                ha="right" if inside else "left", fontsize=8, color="white" if inside else "#333333")
    ax.set_yticks(positions, labels, fontsize=8)
    ax.set_ylim(len(shown) - 0.5, -0.5)
    ax.set_xlim(0, right)
    ax.set_xlabel(f"s-cis population (|φ| < 90°) at {temperature_k:g} K / %")
    side = ax.twinx()
    side.set_ylim(ax.get_ylim())
    side.set_yticks(positions, [_overview_barrier_text(r) for r in shown], fontsize=8, color="#333333")
    side.tick_params(axis="y", length=0)
    more = f" (highest {len(shown)} of {len(done)})" if len(done) > len(shown) else ""
    models = list(dict.fromkeys(r["population_model"] for r in shown if r.get("population_model")))
    ax.set_title(f"s-cis population by bond{more}; right: barrier from the global minimum into the other region\n"
                 f"{method} relaxed scans" + (f"; {', '.join(models)}" if models else ""), fontsize=9)
    if note:
        fig.text(0.01, 0.01, note, fontsize=7, color="#555555", ha="left", va="bottom", wrap=True)
        fig.tight_layout(rect=(0.0, 0.35 / height, 1.0, 1.0))
    else:
        fig.tight_layout()
    return fig


def _overview_barrier_text(row):
    barrier = row.get("barrier_to_other_region_kcal_mol")
    if barrier is not None:
        return f"barrier {barrier:.2f} kcal/mol"
    return "no barrier: both minima in one region"


# -- the report's table: the answer first, human headers with units -------------------------------
# kinds: how html shows a value: "pct" a fraction as percent (0.1), "kcal" kcal/mol (0.01), "deg"
# degrees (0.1), "time" seconds (3 significant figures), "yesno", "text"
def report_columns(temperatures_k, extra_columns):
    """[(table key, header with unit, kind)] of the report's results table, the answer first: the
    compound, the bond, the leading s-cis share, the barrier, ΔG to planar s-cis and the flags, then
    the rest. Keys are those of table_columns (the CSV); html drops columns with no value."""
    first = _temperature_key(temperatures_k[0])
    columns = [("name", "compound", "text"), ("bond", "bond", "text"),
               (f"s_cis_{first}", f"s-cis at {temperatures_k[0]:g} K (%)", "pct"),
               ("barrier_to_other_region_kcal_mol", "barrier into the other region (kcal/mol)", "kcal"),
               (f"dG_to_planar_scis_{first}_kcal_mol", f"ΔG to planar s-cis at {temperatures_k[0]:g} K (kcal/mol)",
                "kcal"),
               ("flags", "flags", "text"), ("status", "status", "text"), ("reason", "reason", "text")]
    for t in temperatures_k[1:]:
        key = _temperature_key(t)
        columns += [(f"s_cis_{key}", f"s-cis at {t:g} K (%)", "pct"),
                    (f"dG_to_planar_scis_{key}_kcal_mol", f"ΔG to planar s-cis at {t:g} K (kcal/mol)", "kcal")]
    columns += [("global_min_deg", "global minimum φ (°)", "deg"), ("scis_min_deg", "lowest s-cis minimum φ (°)", "deg"),
                ("scis_min_rel_kcal_mol", "s-cis minimum (kcal/mol)", "kcal"),
                ("strans_min_rel_kcal_mol", "s-trans minimum (kcal/mol)", "kcal"),
                ("rotation_max_kcal_mol", "highest energy on the circle (kcal/mol)", "kcal")]
    for t in temperatures_k:
        key, at = _temperature_key(t), f"at {t:g} K"
        columns += [(f"scis_window_{key}", f"near-planar s-cis window {at} (%)", "pct"),
                    (f"dG_scis_minus_strans_{key}_kcal_mol", f"ΔG(s-cis − s-trans) {at} (kcal/mol)", "kcal"),
                    (f"s_cis_classical_{key}", f"s-cis {at}, classical integral (%)", "pct"),
                    (f"s_cis_harmonic_{key}", f"s-cis {at}, all-harmonic (%)", "pct"),
                    (f"half_life_{key}_s", f"interconversion half-life {at} (s)", "time")]
    columns += [("population_model", "population model", "text"), ("twist_deg", "twist (°)", "deg"),
                ("planar_barrier_kcal_mol", "barrier at planar (kcal/mol)", "kcal"),
                ("perpendicular_barrier_kcal_mol", "barrier at perpendicular (kcal/mol)", "kcal"),
                ("fit_rmse_kcal_mol", "Fourier fit RMSE (kcal/mol)", "kcal"),
                ("rescore_level", "re-scored at", "text"),
                ("rescored_global_min_deg", "re-scored global minimum φ (°)", "deg"),
                ("rescored_barrier_to_other_region_kcal_mol", "re-scored barrier (kcal/mol)", "kcal")]
    columns += [(f"rescored_s_cis_{_temperature_key(t)}", f"re-scored s-cis at {t:g} K (%)", "pct")
                for t in temperatures_k]
    columns += [("method_disagreement_max_kcal_mol", "re-scored vs scan, largest difference (kcal/mol)", "kcal"),
                ("refine_level", "refined at", "text"), ("refine_points", "refined points", "text"),
                ("refined_global_min_deg", "refined global minimum φ (°)", "deg"),
                ("refined_barrier_to_other_region_kcal_mol", "refined barrier (kcal/mol)", "kcal")]
    for t in temperatures_k:
        key = _temperature_key(t)
        columns += [(f"refined_s_cis_{key}", f"refined s-cis at {t:g} K (%)", "pct"),
                    (f"refined_dG_to_planar_scis_{key}_kcal_mol", f"refined ΔG to planar s-cis at {t:g} K (kcal/mol)",
                     "kcal")]
    columns += [("refined_disagreement_max_kcal_mol", "refined vs scan, largest difference (kcal/mol)", "kcal"),
                ("smiles", "SMILES with atom numbers", "text"), ("dihedral_atoms", "dihedral atoms", "text"),
                ("scis_meaning", "0° means", "text"), ("compound_wall_time_s", "wall time (s)", "time")]
    known = {key for key, _, _ in columns}
    return columns + [(c, c, "text") for c in extra_columns if c not in known]
