"""Files of torsion types fitted across molecules (a records.TorsionParameterSet).

One writer per MD format, each in that format's units and conventions. Our terms are

    E(phi) = sum_n k_n [1 + cos(n phi - delta_n)],   k_n in kcal/mol, delta_n in degrees,

with phi the IUPAC dihedral (0 = cis, 180 = trans), which all four formats use too. Every term of
a type is written, zero force constants included, so each file holds periodicities 1..N:

- AMBER parameter-modification file (frcmod), DIHE section: E = (PK / IDIVF) [1 + cos(PN phi - PHASE)],
  PK in kcal/mol, PHASE in degrees; we write IDIVF = 1, so PK = k_n and PHASE = delta_n; a negative
  PN means another term of the same quartet follows. Atom types have at most two characters.
- GROMACS [ dihedraltypes ], function type 9: V = k_phi [1 + cos(n phi - phi_s)], k_phi in kJ/mol
  (k_n * 4.184), phi_s in degrees, one line per term, the lines of one type consecutive.
- CHARMM parameter file, DIHEDRALS section: V = Kchi [1 + cos(n chi - delta)], Kchi in kcal/mol,
  delta in degrees, one line per term (multiple terms of one quartet on consecutive lines).
- OpenMM force-field XML, PeriodicTorsionForce with atom classes: E = k [1 + cos(n theta - theta0)],
  k in kJ/mol, theta0 (phaseN) in radians, all terms of a type in one Proper element.

Atom types in the files are the types' atom classes (torsiontypes: "A2" for MMFF94 type 2 and so
on, or the classes of a SMARTS table). No file is a complete force field: each holds torsion terms
only, meant to replace every torsion term about the bonds of these types in a model whose atoms
carry those classes. An MD engine puts a type's terms on every quartet of its four classes, and
the fit summed them over every such quartet about each member bond (styrene's two ortho quartets);
the other quartets about a member bond had their MMFF94 terms removed in the fit, which a file
keyed by classes cannot express, and classes do not tell a conjugated single bond from a double
bond. Every file's header says so (GENERAL_NOTES); with the BondQuartets of the members
(torsiontypes.parameter_quartets) each type's notes also list how many quartets it acts on, the
other class quartets about its bonds and the other bonds its classes match. Numbers are written
in fixed-point notation (AMBER readers take no exponents) with 8 decimals for force constants,
full precision in the OpenMM XML.

Besides those: torsion_parameters.json (the record, full precision), torsion_types.csv (one row per
type), torsion_members.csv (one row per bond, left-out bonds with the reason), a figure per type
(every member's quantum profile with the fitted model) and, per member bond, the type's terms on
every class-matching quartet about it (the scanned dihedral only without the BondQuartets) as a
serialized OpenMM force (0-based atom indices of that molecule).
"""

import json
import math
import re
from collections import Counter
from pathlib import Path
from xml.sax.saxutils import escape, quoteattr

import matplotlib.pyplot as plt

from ..errors import InputError
from ..records import to_plain
from ..units import KCAL_KJ
from . import atomic_write, bond_stem, check_output_folder, storage_error
from .forcefield import openmm_quartets_xml
from .report import write_table_csv

FILE_NAMES = {"amber": "torsions.frcmod", "gromacs": "torsions_gromacs.itp", "charmm": "torsions_charmm.prm",
              "openmm": "torsions_openmm.xml"}
FORMATS = tuple(FILE_NAMES)
JSON_NAME = "torsion_parameters.json"
TYPES_TABLE = "torsion_types.csv"
MEMBERS_TABLE = "torsion_members.csv"
MEMBER_FORCES = "member_forces"  # folder of the per-bond serialized OpenMM forces
AMBER_TYPE_LENGTH = 2
GENERAL_NOTES = (
    "each type's terms act on every dihedral whose four atom classes are the type's (either direction), as "
    "fitted: summed over every such quartet about each member bond (class_quartets in torsion_members.csv)",
    "use them with no other torsion terms about the member bonds: the fit removed the torsion terms of {mm} on "
    "every quartet about those bonds, so zero the force field's own terms there (other_quartets in "
    "torsion_members.csv)",
    "atom classes do not tell bonds apart: a quartet of a type's classes about any other bond (e.g. a C=C double "
    "bond) gets these terms too; check the dihedrals your MD engine assigns",
)
_LISTED = 6  # bonds named per type in the notes, the rest counted


def parse_formats(text):
    """The formats named in a comma-separated list, in FORMATS order; InputError for an unknown one."""
    names = [n.strip().lower() for n in (text or "").split(",") if n.strip()]
    if not names:
        raise InputError(f"--formats is empty; give one or more of {', '.join(FORMATS)}")
    unknown = [n for n in names if n not in FILE_NAMES]
    if unknown:
        raise InputError(f"--formats {', '.join(unknown)}: unknown format; choose from {', '.join(FORMATS)}")
    return tuple(f for f in FORMATS if f in names)


def check_classes(formats, classes):
    """InputError when an atom-class name cannot be written in one of the formats (AMBER: two characters)."""
    if "amber" in formats:
        long = sorted({c for c in classes if len(c) > AMBER_TYPE_LENGTH})
        if long:
            raise InputError(f"atom classes {', '.join(long)} are longer than AMBER's {AMBER_TYPE_LENGTH} characters; "
                             "give shorter classes in the types table or leave amber out of --formats")


def _comment(text):
    """Free text made safe for a one-line comment in any of the formats."""
    return re.sub(r"[\x00-\x1f\x7f]+", " ", str(text)).replace("--", "- -")


def _type_note(fit):
    return _comment(f"type {fit.label} ({fit.definition}): {len(fit.members)} bonds of {fit.molecule_count} "
                    f"molecules; RMSE fit {fit.rmse_fit_kcal_mol:.3f}, MMFF94 as is {fit.rmse_mm_kcal_mol:.3f} kcal/mol")


def _header(parameters):
    levels = sorted({m.quantum_profile for t in parameters.types for m in t.members})
    return (f"{parameters.program}: torsion terms of {len(parameters.types)} torsion types fitted to "
            f"{', '.join(levels)} profiles against {parameters.mm_model} without the bonds' torsion terms; "
            "torsion terms only, not a complete force field")


def general_notes(parameters):
    """The header notes every file carries: how the terms act and what the force field must leave out."""
    return [_comment(n.format(mm=parameters.mm_model)) for n in GENERAL_NOTES]


def _bond_key(bond):
    """A bond label "j-k" with j < k."""
    j, k = sorted(int(a) for a in bond.split("-"))
    return f"{j}-{k}"


def _plural(count, word):
    return f"{count} {word}{'' if count == 1 else 's'}"


def type_quartet_notes(fit, quartets, types=()):
    """Notes on one type from the members' BondQuartets ({(compound, bond): BondQuartets}, None: none):
    the quartets it acts on per bond, the other class quartets about its bonds (and which of them
    carry the classes of another of the types), the other bonds its classes match in the member
    molecules."""
    if quartets is None:
        return []
    found = [(m, quartets[(m.compound, m.bond)]) for m in fit.members if (m.compound, m.bond) in quartets]
    if not found:
        return []
    counts = sorted(Counter(len(q.matching) for _, q in found).items())
    acting = ", ".join(f"{_plural(n, 'quartet')} about {'each of ' if len(counts) == 1 and c > 1 else ''}"
                       f"{_plural(c, 'bond')}" for n, c in counts)
    notes = [f"type {fit.label} acts on {acting}"]
    others = sorted({words for _, q in found for _, _, words in q.others})
    notes.append(f"type {fit.label}: other quartets about its bonds (their torsion terms must be zero): "
                 + ("; ".join(others) if others else "none"))
    classes = {c for _, q in found for _, c, _ in q.others if c is not None}
    clashes = [t.label for t in types if t is not fit and (tuple(t.classes) in classes
                                                          or tuple(reversed(t.classes)) in classes)]
    if clashes:
        notes.append(f"type {fit.label}: some other quartets about its bonds carry the classes of type "
                     f"{', '.join(clashes)}, whose terms the files put there too although this fit assumed none")
    members = {(m.compound, _bond_key(m.bond)) for m in fit.members}
    elsewhere = list(dict.fromkeys(f"{m.compound} {words}" for m, q in found for bond, words in q.elsewhere
                                   if (m.compound, _bond_key(bond)) not in members))
    if elsewhere:
        listed = "; ".join(elsewhere[:_LISTED])
        if len(elsewhere) > _LISTED:
            listed += f"; and {len(elsewhere) - _LISTED} more"
        notes.append(f"type {fit.label}: its classes also match dihedrals about other bonds, which get these terms "
                     f"too: {listed}")
    return [_comment(n) for n in notes]


def _type_notes(fit, parameters, quartets):
    return [_type_note(fit), *type_quartet_notes(fit, quartets, parameters.types)]


def amber_frcmod(parameters, quartets=None):
    """The types as an AMBER frcmod file: title line (with the general notes: frcmod has no comment
    lines) and a DIHE section, IDIVF = 1, PHASE in degrees, each type's notes after its term lines."""
    lines = [_comment("; ".join([_header(parameters), *general_notes(parameters)])), "DIHE"]
    for fit in parameters.types:
        names = "-".join(f"{c:<2s}" for c in fit.classes)
        notes = _type_notes(fit, parameters, quartets)
        notes = notes[:len(fit.terms) - 1] + ["; ".join(notes[len(fit.terms) - 1:])]  # one note per term line
        for number, term in enumerate(fit.terms):
            last = number == len(fit.terms) - 1
            periodicity = term.periodicity if last else -term.periodicity
            note = f"  {notes[number]}" if number < len(notes) and notes[number] else ""
            lines.append(f"{names} {1:3d} {term.k_kcal_mol:14.8f} {term.phase_deg:12.6f} {periodicity:6.1f}{note}")
    lines += ["", ""]
    return "\n".join(lines)


def gromacs_dihedraltypes(parameters, quartets=None):
    """The types as a GROMACS [ dihedraltypes ] section, function type 9, k in kJ/mol, phase in degrees."""
    lines = [f"; {_comment(_header(parameters))}",
             *(f"; {n}" for n in general_notes(parameters)),
             "; V = k [1 + cos(n phi - phi_s)] per line, function type 9; include it after the force field's own "
             "[ dihedraltypes ]",
             "[ dihedraltypes ]",
             ";      i        j        k        l  func      phi_s (deg)     k (kJ/mol)   n"]
    for fit in parameters.types:
        lines += [f"; {n}" for n in _type_notes(fit, parameters, quartets)]
        for term in fit.terms:
            lines.append(f"{fit.classes[0]:>8s} {fit.classes[1]:>8s} {fit.classes[2]:>8s} {fit.classes[3]:>8s}     9 "
                         f"{term.phase_deg:16.6f} {term.k_kcal_mol * KCAL_KJ:14.8f} {term.periodicity:3d}")
    return "\n".join(lines) + "\n"


def charmm_parameters(parameters, quartets=None):
    """The types as a CHARMM parameter file: a DIHEDRALS section, Kchi in kcal/mol, delta in degrees."""
    lines = [f"* {_comment(_header(parameters))}", *(f"! {n}" for n in general_notes(parameters)), "*", "",
             "DIHEDRALS", "!V(dihedral) = Kchi(1 + cos(n(chi) - delta))",
             "!Kchi: kcal/mole, n: multiplicity, delta: degrees", "!atom types                   Kchi    n      delta"]
    for fit in parameters.types:
        lines += [f"! {n}" for n in _type_notes(fit, parameters, quartets)]
        for term in fit.terms:
            lines.append(f"{fit.classes[0]:<6s} {fit.classes[1]:<6s} {fit.classes[2]:<6s} {fit.classes[3]:<6s} "
                         f"{term.k_kcal_mol:14.8f} {term.periodicity:2d} {term.phase_deg:12.6f}")
    lines += ["", "END", ""]
    return "\n".join(lines)


def openmm_forcefield_xml(parameters, quartets=None):
    """The types as an OpenMM force-field XML file: one Proper per type (classes, k in kJ/mol, phase in rad)."""
    lines = ['<?xml version="1.0" encoding="utf-8"?>', f"<!-- {escape(_comment(_header(parameters)))} -->",
             *(f"<!-- {escape(n)} -->" for n in general_notes(parameters)), "<ForceField>", " <PeriodicTorsionForce>"]
    for fit in parameters.types:
        attributes = " ".join(f"class{n + 1}={quoteattr(c)}" for n, c in enumerate(fit.classes))
        for n, term in enumerate(fit.terms, start=1):
            attributes += (f' periodicity{n}="{term.periodicity}" phase{n}={quoteattr(repr(math.radians(term.phase_deg)))}'
                           f" k{n}={quoteattr(repr(term.k_kj_mol))}")
        lines += [f"  <!-- {escape(n)} -->" for n in _type_notes(fit, parameters, quartets)]
        lines.append(f"  <Proper {attributes}/>")
    lines += [" </PeriodicTorsionForce>", "</ForceField>", ""]
    return "\n".join(lines)


WRITERS = {"amber": amber_frcmod, "gromacs": gromacs_dihedraltypes, "charmm": charmm_parameters,
           "openmm": openmm_forcefield_xml}


def _rounded(value, digits=6):
    return "" if value is None or not math.isfinite(value) else round(value, digits)


def type_rows(parameters):
    """One row per torsion type: classes, members, terms and the errors (kcal/mol, rounded)."""
    periodicities = sorted({t.periodicity for fit in parameters.types for t in fit.terms})
    columns = ["type", "classes", "definition", "molecules", "bonds", "points",
               *[c for n in periodicities for c in (f"k{n}_kcal_mol", f"phase{n}_deg")],
               "rmse_mmff94_kcal_mol", "rmse_without_torsion_kcal_mol", "rmse_fit_kcal_mol",
               "rmse_leave_one_out_kcal_mol", "transferable", "verdict"]
    rows = []
    for fit in parameters.types:
        row = {"type": fit.label, "classes": " ".join(fit.classes), "definition": fit.definition,
               "molecules": fit.molecule_count, "bonds": len(fit.members), "points": fit.point_count,
               "rmse_mmff94_kcal_mol": _rounded(fit.rmse_mm_kcal_mol),
               "rmse_without_torsion_kcal_mol": _rounded(fit.rmse_without_torsion_kcal_mol),
               "rmse_fit_kcal_mol": _rounded(fit.rmse_fit_kcal_mol),
               "rmse_leave_one_out_kcal_mol": _rounded(fit.rmse_leave_out_kcal_mol),
               "transferable": {True: "yes", False: "no", None: ""}[fit.transferable], "verdict": fit.verdict}
        for term in fit.terms:
            row[f"k{term.periodicity}_kcal_mol"] = round(term.k_kcal_mol, 6)
            row[f"phase{term.periodicity}_deg"] = term.phase_deg
        rows.append(row)
    return columns, rows


MEMBER_COLUMNS = ["compound", "bond", "type", "dihedral_atoms", "mmff_types", "quantum_profile", "points",
                  "constant_kcal_mol", "rmse_mmff94_kcal_mol", "rmse_without_torsion_kcal_mol", "rmse_fit_kcal_mol",
                  "rmse_leave_one_out_kcal_mol", "class_quartets", "other_quartets", "also_matches_bonds",
                  "left_out_reason"]


def _numbers(quartet):
    return "-".join(str(a + 1) for a in quartet)


def member_rows(parameters, quartets=None):
    """One row per bond: its type and errors (1-based atom numbers in the type's class order), the
    quartets about it the type acts on and the others, the other bonds with a quartet of the type's
    classes (from the BondQuartets, empty without them), then the bonds left out with the reason."""
    rows = []
    for fit in parameters.types:
        for m in fit.members:
            found = (quartets or {}).get((m.compound, m.bond))
            rows.append({
                "class_quartets": " ".join(_numbers(q) for q in found.matching) if found else "",
                "other_quartets": " ".join(_numbers(q) for q, _, _ in found.others) if found else "",
                "also_matches_bonds": " ".join(b for b, _ in found.elsewhere) if found else "",
                "compound": m.compound, "bond": m.bond, "type": fit.label,
                "dihedral_atoms": "-".join(str(a + 1) for a in m.dihedral_atoms),
                "mmff_types": "-".join(str(t) for t in m.mmff_types) if m.mmff_types else "",
                "quantum_profile": m.quantum_profile, "points": len(m.profile_angles_deg),
                "constant_kcal_mol": _rounded(m.constant_kcal_mol), "rmse_mmff94_kcal_mol": _rounded(m.rmse_mm_kcal_mol),
                "rmse_without_torsion_kcal_mol": _rounded(m.rmse_without_torsion_kcal_mol),
                "rmse_fit_kcal_mol": _rounded(m.rmse_fit_kcal_mol),
                "rmse_leave_one_out_kcal_mol": _rounded(m.rmse_leave_out_kcal_mol), "left_out_reason": "",
            })
    for compound, bond, reason in parameters.left_out:
        rows.append({"compound": compound, "bond": bond, "left_out_reason": reason})
    return rows


def type_figure(fit):
    """Every member's quantum profile (markers) with the fitted model (line) in the same colour."""
    fig, ax = plt.subplots(figsize=(10.0, 5.5), dpi=110)
    colours = plt.get_cmap("tab10" if len(fit.members) <= 10 else "tab20")
    for n, m in enumerate(fit.members):
        colour = colours(n % colours.N)
        ax.plot(m.profile_angles_deg, m.qm_kcal_mol, "o", color=colour, ms=4, label=f"{m.compound} {m.bond}")
        ax.plot(m.profile_angles_deg, m.mm_with_fit_kcal_mol, "-", color=colour, lw=1.2)
    ax.set_xlim(-180, 180)
    ax.set_xticks(range(-180, 181, 45))
    ax.set_xlabel("dihedral φ / degrees")
    ax.set_ylabel("relative energy / kcal mol⁻¹")
    leave_out = "n/a" if fit.rmse_leave_out_kcal_mol is None else f"{fit.rmse_leave_out_kcal_mol:.2f}"
    ax.set_title(f"type {fit.label} ({' '.join(fit.classes)}): quantum (markers) and MM with the fitted terms (lines)\n"
                 f"RMSE fit {fit.rmse_fit_kcal_mol:.2f}, leave-one-out {leave_out}, MMFF94 as is "
                 f"{fit.rmse_mm_kcal_mol:.2f} kcal/mol", fontsize=9)
    if len(fit.members) <= 30:
        ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0),
                  ncol=1 if len(fit.members) <= 15 else 2)
    fig.tight_layout()
    return fig


def type_stem(label):
    """File name stem of one type's figure."""
    return "type_" + (re.sub(r"[^A-Za-z0-9._-]+", "_", label).strip("._") or "unnamed")[:60]


def check_types(parameters, formats):
    """InputError when the types' atom classes cannot be written in the formats, or two types share
    the same four classes (their terms would be one entry of the files)."""
    check_classes(formats, [c for fit in parameters.types for c in fit.classes])
    seen = {}
    for fit in parameters.types:
        key = min(tuple(fit.classes), tuple(reversed(fit.classes)))
        if key in seen:
            raise InputError(f"types {seen[key]} and {fit.label} have the same atom classes {' '.join(fit.classes)}; "
                             "give them different classes in the types table")
        seen[key] = fit.label


def summary_lines(parameters):
    """Terminal lines: one per type (classes, members, errors, verdict), then the bonds left out."""
    lines = [f"{len(parameters.types)} torsion types ({parameters.typing}) fitted to the {parameters.quantum} profiles "
             f"against {parameters.mm_model}; RMSE vs quantum in kcal/mol:",
             f"  {'type':<20s} {'classes':<14s} {'mol':>4s} {'bonds':>5s} {'MMFF94':>7s} {'fit':>6s} {'LOO':>6s}  verdict"]
    for fit in parameters.types:
        leave_out = "-" if fit.rmse_leave_out_kcal_mol is None else f"{fit.rmse_leave_out_kcal_mol:.3f}"
        lines.append(f"  {fit.label:<20s} {' '.join(fit.classes):<14s} {fit.molecule_count:4d} {len(fit.members):5d} "
                     f"{fit.rmse_mm_kcal_mol:7.3f} {fit.rmse_fit_kcal_mol:6.3f} {leave_out:>6s}  {fit.verdict}")
    for compound, bond, reason in parameters.left_out:
        lines.append(f"  left out: {compound} bond {bond}: {reason}")
    return lines


def write_parameter_set(parameters, out_dir, formats=FORMATS, quartets=None):
    """Write the JSON record, both tables, a figure per type, the files of the chosen formats and the
    per-bond OpenMM forces into out_dir (created); returns the paths written by kind.

    quartets: {(compound, bond): torsiontypes.BondQuartets} of the members (parameter_quartets), for
    the notes per type, the quartet columns and forces on every class-matching quartet; without it
    each per-bond force holds the terms on the scanned dihedral only."""
    check_types(parameters, formats)
    out_dir = Path(out_dir)
    check_output_folder(out_dir)
    written = {}

    def table(name, columns, rows):
        def write(path):
            with path.open("w", newline="", encoding="utf-8") as handle:
                write_table_csv(handle, columns, rows)
        atomic_write(out_dir / name, write)
        return out_dir / name

    atomic_write(out_dir / JSON_NAME, lambda p: p.write_text(json.dumps(to_plain(parameters), indent=1,
                                                                         allow_nan=False) + "\n"))
    written["record"] = out_dir / JSON_NAME
    written["types table"] = table(TYPES_TABLE, *type_rows(parameters))
    written["members table"] = table(MEMBERS_TABLE, MEMBER_COLUMNS, member_rows(parameters, quartets))
    for fmt in formats:
        text = WRITERS[fmt](parameters, quartets)
        atomic_write(out_dir / FILE_NAMES[fmt], lambda p, text=text: p.write_text(text, encoding="utf-8"))
        written[fmt] = out_dir / FILE_NAMES[fmt]
    figures = []
    for fit in parameters.types:
        figure = type_figure(fit)
        path = out_dir / f"{type_stem(fit.label)}.png"
        try:
            atomic_write(path, lambda p: figure.savefig(p, format="png"))
        finally:
            plt.close(figure)
        figures.append(path)
    written["figures"] = figures
    if "openmm" in formats:
        forces = out_dir / MEMBER_FORCES
        try:
            forces.mkdir(exist_ok=True)
        except OSError as error:
            raise storage_error(forces, error) from None
        paths = []
        for fit in parameters.types:
            for m in fit.members:
                path = forces / f"{member_stem(m.compound, m.bond)}_openmm.xml"
                found = (quartets or {}).get((m.compound, m.bond))
                text = openmm_quartets_xml(found.matching if found else [m.dihedral_atoms], fit.terms)
                atomic_write(path, lambda p, text=text: p.write_text(text))
                paths.append(path)
        written["member forces"] = paths
    return written


def member_stem(compound, bond):
    """File name stem of one member bond's force, e.g. "butadiene_bond_2-3"."""
    name = re.sub(r"[^A-Za-z0-9._-]+", "_", compound).strip("._")[:60] or "compound"
    return f"{name}_{bond_stem(bond)}"
