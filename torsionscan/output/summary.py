"""The summary JSON (ScanResult.to_dict at full precision) and the profile table (CSV) of a scan.

Rounding happens here, in the profile table, and nowhere in the summary.
"""

import csv
import json
import math
import re
from pathlib import Path

from ..errors import InputError
from ..records import ScanResult
from ..units import KCAL_KJ

# s-cis fraction difference between the integrated and the free-energy (RRHO) populations
# reported as a disagreement of the two estimates
POPULATION_DISAGREEMENT = 0.1

# columns of the profile table, in order; the last two only when the bond was re-scored / refined
POINT_KEYS = ("angle_deg", "measured_angle_deg", "energy_rel_kcal_mol", "energy_rel_kj_mol", "fit_kcal_mol",
              "gradient_evaluations", "converged", "mirrored", "central_bond_order", "homo_lumo_gap_ev",
              "failure", "energy_rescored_rel_kcal_mol", "energy_refined_rel_kcal_mol")
_DIGITS = 5  # decimals of the energies, angles, bond orders and gaps in the table
# a text cell starting with one of these is a formula to a spreadsheet (tab and carriage return: the same
# trick behind leading white space)
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_NUMBER_TEXT = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")


def spreadsheet_cell(value):
    """A CSV cell that spreadsheets show as written: text starting with =, +, -, @, a tab or a carriage
    return gets a leading apostrophe, so it is read as text and never run as a formula. Numbers, and
    text that is just a number ("-1", "+2.5e3"), stay as they are."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS) and not _NUMBER_TEXT.fullmatch(value):
        return "'" + value
    return value


def spreadsheet_row(row):
    """A table row (dict) with every text cell made safe by spreadsheet_cell."""
    return {key: spreadsheet_cell(value) for key, value in row.items()}


def populations_disagree(integrated, rrho):
    """True when the integrated (thermo.RegionPopulations) and RRHO s-cis fractions differ by more
    than POPULATION_DISAGREEMENT."""
    return abs(rrho.s_cis - integrated.s_cis) > POPULATION_DISAGREEMENT


# a JSON list holding only numbers (or the "nan"/"inf"/"-inf" strings), as json.dumps indents it
_NUMBER_LIST = re.compile(r'\[(?:\s*(?:-?[0-9][0-9.eE+-]*|"-?(?:nan|inf)")\s*,)*\s*(?:-?[0-9][0-9.eE+-]*|"-?(?:nan|inf)")\s*\]')


def summary_text(result):
    """The summary JSON text of a ScanResult: result.to_dict() at full precision, indented, with
    lists of numbers (coordinates, frequencies) kept on one line."""
    text = json.dumps(result.to_dict(), indent=1, allow_nan=False)
    return _NUMBER_LIST.sub(lambda match: re.sub(r"\s+", "", match.group(0)).replace(",", ", "), text) + "\n"


def write_summary(result, path):
    """Write the summary JSON of a ScanResult to path."""
    Path(path).write_text(summary_text(result))


def read_summary_file(path):
    """The ScanResult of a summary.json; a one-line InputError when it is missing or not a summary."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path} not found; give the summary.json of a scan")
    try:
        data = json.loads(path.read_text())
    except UnicodeDecodeError:
        raise InputError(f"{path} is not a JSON text file; give the summary.json of a scan") from None
    except json.JSONDecodeError as error:
        raise InputError(f"{path} is not JSON ({error.msg} at line {error.lineno}); "
                         "give the summary.json of a scan") from None
    try:
        return ScanResult.from_dict(data)
    except InputError as error:
        raise InputError(f"{path}: {error}") from None


def _cell(value, digits=_DIGITS):
    """A rounded table cell: empty for NaN or infinity, -0.0 written as 0.0."""
    value = float(value)
    return round(value, digits) + 0.0 if math.isfinite(value) else ""


def profile_rows(bond):
    """One dict per point of a BondScan (full circle), keyed by POINT_KEYS, rounded for the table."""
    analysis, series = bond.profile, bond.profile.fit.series
    rescored = {}
    if bond.rescored is not None:
        level = bond.rescored
        rescored = {id(p): level.analysis.relative_kcal_mol(level.energies_hartree[frame])
                    for p, frame in bond.points_with_frames()}
    refined = {}
    if bond.refined is not None and bond.refined.points:
        refined = {r.angle_deg: bond.refined.analysis.relative_kcal_mol(r.energy_hartree) for r in bond.refined.points}
    rows = []
    for p in bond.points:
        kcal = analysis.relative_kcal_mol(p.energy_hartree)
        row = {
            "angle_deg": p.angle_deg, "measured_angle_deg": _cell(p.measured_angle_deg),
            "energy_rel_kcal_mol": _cell(kcal), "energy_rel_kj_mol": _cell(kcal * KCAL_KJ),
            "fit_kcal_mol": _cell(series.value(p.angle_deg)),
            "gradient_evaluations": p.gradient_evaluations, "converged": p.converged, "mirrored": p.mirrored,
            "central_bond_order": _cell(p.central_bond_order), "homo_lumo_gap_ev": _cell(p.homo_lumo_gap_ev),
            "failure": p.failure,
        }
        if bond.rescored is not None:
            row["energy_rescored_rel_kcal_mol"] = _cell(rescored.get(id(p), math.nan))
        if refined:
            row["energy_refined_rel_kcal_mol"] = _cell(refined.get(p.angle_deg, math.nan))
        rows.append(row)
    return rows


def profile_columns(bond):
    """The column names of a bond's profile table (the re-scored and refined energies where present)."""
    optional = {"energy_rescored_rel_kcal_mol": bond.rescored is not None,
                "energy_refined_rel_kcal_mol": bond.refined is not None and bool(bond.refined.points)}
    return tuple(key for key in POINT_KEYS if optional.get(key, True))


def write_profile_table(bond, path):
    """Write one dihedral's points (a BondScan) as CSV: relative energies in kcal/mol and kJ/mol,
    angles in degrees, gap in eV; empty cells where a value is not available."""
    with Path(path).open("w", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=profile_columns(bond))
        writer.writeheader()
        writer.writerows(spreadsheet_row(row) for row in profile_rows(bond))
