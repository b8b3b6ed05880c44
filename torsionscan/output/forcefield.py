"""Files of a torsion-term fit, and reading a finished scan folder back for fitting.

Per bond j-k: bond_j-k_torsion_fit.json (the torsion_fit record), bond_j-k_torsion_terms.csv
(one row per term), bond_j-k_torsion_openmm.xml (the terms as an OpenMM PeriodicTorsionForce in
OpenMM's XML serialization: 0-based atom indices, k in kJ/mol, phase in radians; load it with
openmm.XmlSerializer.deserialize and add it to a System of the same molecule), and
bond_j-k_torsion_fit.png (quantum profile against the MM model without and with the terms).
"""

import csv
import json
import math
from pathlib import Path
from xml.sax.saxutils import quoteattr

import matplotlib.pyplot as plt
import numpy as np
from rdkit import Chem

from ..errors import InputError
from ..units import KCAL_KJ
from . import atomic_write, bond_stem

TERM_COLUMNS = ["periodicity", "phase_deg", "k_kcal_mol", "k_kj_mol", "atom1", "atom2", "atom3", "atom4",
                "mmff_type1", "mmff_type2", "mmff_type3", "mmff_type4"]


def terms_table_rows(record):
    """Rows of the plain terms table (1-based atom numbers)."""
    rows = []
    for term in record["terms"]:
        types = term["mmff_types"] or [""] * 4
        rows.append({
            "periodicity": term["periodicity"], "phase_deg": term["phase_deg"], "k_kcal_mol": term["k_kcal_mol"],
            "k_kj_mol": term["k_kj_mol"], **{f"atom{n + 1}": a for n, a in enumerate(term["atoms"])},
            **{f"mmff_type{n + 1}": t for n, t in enumerate(types)},
        })
    return rows


def openmm_torsion_xml(record):
    """The terms as a serialized OpenMM PeriodicTorsionForce (XML text)."""
    lines = ['<?xml version="1.0" ?>',
             '<Force forceGroup="0" name="PeriodicTorsionForce" type="PeriodicTorsionForce" usesPeriodic="0" version="2">',
             "\t<Torsions>"]
    for term in record["terms"]:
        p1, p2, p3, p4 = (a - 1 for a in term["atoms"])
        k_kj = term["k_kcal_mol"] * KCAL_KJ
        lines.append(
            f'\t\t<Torsion k={quoteattr(repr(k_kj))} p1="{p1}" p2="{p2}" p3="{p3}" p4="{p4}" '
            f'periodicity="{term["periodicity"]}" phase={quoteattr(repr(math.radians(term["phase_deg"])))}/>'
        )
    lines += ["\t</Torsions>", "</Force>", ""]
    return "\n".join(lines)


def fit_figure(name, record):
    """Quantum profile with the MM model without torsion terms, as it was, and with the fitted terms."""
    profile = record["profile"]
    angles = [p["angle_deg"] for p in profile]
    fig, ax = plt.subplots(figsize=(8.0, 5.5), dpi=110)
    ax.plot(angles, [p["qm_kcal_mol"] for p in profile], "o-", color="#1f5fa8", lw=1.5, ms=5,
            label=f"quantum ({record.get('quantum_profile') or 'relaxed scan'})")
    curves = [("mm_without_torsion_kcal_mol", "MM without this bond's torsion terms", "#999999", ":"),
              ("mm_full_kcal_mol", f"{record['mm_model']} as it is", "#b23a2e", "--"),
              ("mm_with_fit_kcal_mol", "MM with the fitted terms", "#2a7f3f", "-")]
    for key, label, colour, style in curves:
        if key in profile[0]:
            ax.plot(angles, [p[key] for p in profile], style, color=colour, lw=1.5, label=label)
    ax.set_xlim(-180, 180)
    ax.set_xticks(range(-180, 181, 45))
    ax.set_xlabel("dihedral φ / degrees   (0 = s-cis, ±180 = s-trans)")
    ax.set_ylabel("relative energy / kcal mol⁻¹")
    ax.set_title(f"{name}: torsion terms for dihedral {'-'.join(map(str, record['dihedral_atoms']))}; RMSE vs quantum "
                 f"{record['rmse_before_kcal_mol']:.2f} before, {record['rmse_after_kcal_mol']:.2f} after (kcal/mol)",
                 fontsize=9)
    ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    return fig


def write_torsion_fit(name, record, bond, out_dir):
    """Write the JSON, terms table, OpenMM XML and figure of one bond's fit into out_dir."""
    out_dir = Path(out_dir)
    stem = bond_stem(bond)

    def write_table(path):
        with path.open("w", newline="") as handle:
            writer = csv.DictWriter(handle, fieldnames=TERM_COLUMNS)
            writer.writeheader()
            writer.writerows(terms_table_rows(record))

    atomic_write(out_dir / f"{stem}_torsion_fit.json",
                 lambda p: p.write_text(json.dumps(record, indent=2, allow_nan=False) + "\n"))
    atomic_write(out_dir / f"{stem}_torsion_terms.csv", write_table)
    atomic_write(out_dir / f"{stem}_torsion_openmm.xml", lambda p: p.write_text(openmm_torsion_xml(record)))
    figure = fit_figure(name, record)
    atomic_write(out_dir / f"{stem}_torsion_fit.png", lambda p: figure.savefig(p, format="png"))
    plt.close(figure)


def _read_xyz_frames(path):
    """Coordinates (Angstrom) of every frame of a multi-frame XYZ file."""
    lines = path.read_text().splitlines()
    frames, position = [], 0
    while position < len(lines) and lines[position].strip():
        try:
            count = int(lines[position])
            block = lines[position + 2:position + 2 + count]
            frames.append(np.array([[float(v) for v in line.split()[1:4]] for line in block]))
        except (ValueError, IndexError):
            raise InputError(f"{path}: frame {len(frames) + 1} is not valid XYZ; rerun the scan") from None
        if len(block) != count:
            raise InputError(f"{path}: frame {len(frames)} is cut short; rerun the scan")
        position += 2 + count
    return frames


def read_summary(folder):
    """The summary.json of a scan's result folder."""
    path = Path(folder) / "summary.json"
    if not path.is_file():
        raise InputError(f"{folder} has no summary.json; give the result folder of a scan")
    return json.loads(path.read_text())


def read_scan_bond(folder, summary, label):
    """(bond entry, RDKit molecule, relaxed frames in Angstrom) of one bond of a scan folder."""
    folder = Path(folder)
    labels = [entry["bond"] for entry in summary["bonds"]]
    if label not in labels:
        raise InputError(f"{folder} has no scan of bond {label}; it holds {', '.join(labels) or 'none'}")
    stem = bond_stem(label)
    xyz, sdf = folder / f"{stem}_scan.xyz", folder / f"{stem}_minima.sdf"
    if not xyz.is_file() or not xyz.stat().st_size:
        raise InputError(f"{folder} has no relaxed frames ({xyz.name} missing or empty); rerun the scan")
    records = list(Chem.SDMolSupplier(str(sdf), removeHs=False)) if sdf.is_file() else []
    if not records or records[0] is None:
        raise InputError(f"{folder}: {sdf.name} is missing or unreadable; it defines the atoms and bonds; rerun the scan")
    return summary["bonds"][labels.index(label)], records[0], _read_xyz_frames(xyz)


def fit_folder(folder, bond=None, options=None, mm_energies_path=None, quantum="gfn"):
    """Fit torsion terms for the bond(s) of a scan folder, write their files and add each record
    to summary.json as the bond's torsion_fit; returns {bond label: record}.

    Without mm_energies_path every scanned bond (or `bond`) is fitted against MMFF94; a table of
    MM energies belongs to one bond, named by `bond` when the folder holds several.
    """
    from ..entries import computed_points
    from ..forcefield import FitOptions, fit_torsion
    from ..mm import read_mm_energies
    from .summary import write_summary

    summary = read_summary(folder)
    labels = [entry["bond"] for entry in summary["bonds"]]
    if bond:
        labels = [bond]
    elif mm_energies_path and len(labels) > 1:
        raise InputError(f"{folder} holds bonds {', '.join(labels)}; say which one the MM energies belong to with --bond")
    records = {}
    for label in labels:
        entry, mol, frames = read_scan_bond(folder, summary, label)
        energies = None
        if mm_energies_path is not None:
            energies = read_mm_energies(mm_energies_path, len(computed_points(entry)))
        source = None if mm_energies_path is None else f"user-supplied ({Path(mm_energies_path).name})"
        records[label] = fit_torsion(mol, entry, frames, options or FitOptions(), energies, source, quantum)
        write_torsion_fit(summary["name"], records[label], label, folder)
    for entry in summary["bonds"]:
        if entry["bond"] in records:
            entry["torsion_fit"] = records[entry["bond"]]
    atomic_write(Path(folder) / "summary.json", lambda p: write_summary(summary, p))
    return records
