"""Files of a torsion-term fit (bond.torsion_fit, a records.TorsionFit).

Per bond j-k: bond_j-k_torsion_fit.json (the TorsionFit record in its plain-data form, full
precision, atom indices 0-based as in the summary), bond_j-k_torsion_terms.csv (one row per
term, 1-based atom numbers, k rounded to 1e-6), bond_j-k_torsion_openmm.xml (the terms as an
OpenMM PeriodicTorsionForce in OpenMM's XML serialization: 0-based atom indices, k in kJ/mol,
phase in radians; load it with openmm.XmlSerializer.deserialize and add it to a System of the
same molecule), and bond_j-k_torsion_fit.png (quantum profile against the MM model without and
with the terms).
"""

import csv
import json
import math
from pathlib import Path
from xml.sax.saxutils import quoteattr

import matplotlib.pyplot as plt
import numpy as np

from ..records import to_plain
from . import atomic_write, bond_stem

TERM_COLUMNS = ["periodicity", "phase_deg", "k_kcal_mol", "k_kj_mol", "atom1", "atom2", "atom3", "atom4",
                "mmff_type1", "mmff_type2", "mmff_type3", "mmff_type4"]


def terms_table_rows(fit):
    """Rows of the plain terms table of a TorsionFit (1-based atom numbers, k rounded to 1e-6)."""
    types = fit.mmff_types or ("",) * 4
    return [{
        "periodicity": term.periodicity, "phase_deg": term.phase_deg, "k_kcal_mol": round(term.k_kcal_mol, 6),
        "k_kj_mol": round(term.k_kj_mol, 6), **{f"atom{n + 1}": a + 1 for n, a in enumerate(fit.dihedral_atoms)},
        **{f"mmff_type{n + 1}": t for n, t in enumerate(types)},
    } for term in fit.terms]


def openmm_torsion_xml(fit):
    """The terms of a TorsionFit as a serialized OpenMM PeriodicTorsionForce (XML text)."""
    return openmm_force_xml(fit.dihedral_atoms, fit.terms)


def openmm_force_xml(dihedral_atoms, terms):
    """Terms (torsionfit.TorsionTerm) on one quartet (0-based atom indices) as a serialized OpenMM
    PeriodicTorsionForce: k in kJ/mol, phase in radians, the energy k [1 + cos(n phi - phase)]."""
    return openmm_quartets_xml([dihedral_atoms], terms)


def openmm_quartets_xml(quartets, terms):
    """The same terms on each of several quartets (0-based atom indices) as one serialized OpenMM
    PeriodicTorsionForce; the energy is the sum over the quartets."""
    lines = ['<?xml version="1.0" ?>',
             '<Force forceGroup="0" name="PeriodicTorsionForce" type="PeriodicTorsionForce" usesPeriodic="0" version="2">',
             "\t<Torsions>"]
    for p1, p2, p3, p4 in quartets:
        for term in terms:
            lines.append(
                f'\t\t<Torsion k={quoteattr(repr(term.k_kj_mol))} p1="{p1}" p2="{p2}" p3="{p3}" p4="{p4}" '
                f'periodicity="{term.periodicity}" phase={quoteattr(repr(math.radians(term.phase_deg)))}/>'
            )
    lines += ["\t</Torsions>", "</Force>", ""]
    return "\n".join(lines)


def fit_figure(name, fit):
    """Quantum profile with the MM model without torsion terms, as it was, and with the fitted terms."""
    order = np.argsort(fit.profile_angles_deg)
    angles = np.asarray(fit.profile_angles_deg, dtype=float)[order]
    # the point at 180 deg is the one at -180: drawn at both ends, so the circle closes
    at_start, at_end = np.isclose(angles[0], -180.0), np.isclose(angles[-1], 180.0)

    def circle(values):
        values = np.asarray(values, dtype=float)[order]
        if at_start and not at_end:
            return np.append(values, values[0])
        return np.insert(values, 0, values[-1]) if at_end and not at_start else values

    shown = circle(angles)
    if at_start and not at_end:
        shown[-1] = 180.0
    elif at_end and not at_start:
        shown[0] = -180.0
    fig, ax = plt.subplots(figsize=(8.0, 5.5), dpi=110)
    ax.plot(shown, circle(fit.qm_kcal_mol), "o-", color="#1f5fa8", lw=1.5, ms=5,
            label=f"quantum ({fit.quantum_profile})")
    curves = [(fit.mm_without_torsion_kcal_mol, "MM without this bond's torsion terms", "#999999", ":"),
              (fit.mm_full_kcal_mol, f"{fit.mm_model} as it is", "#b23a2e", "--"),
              (fit.mm_with_fit_kcal_mol, "MM with the fitted terms", "#2a7f3f", "-")]
    for values, label, colour, style in curves:
        if values is not None:
            ax.plot(shown, circle(values), style, marker=".", color=colour, lw=1.5, label=label)
    ax.set_xlim(-180, 180)
    ax.set_xticks(range(-180, 181, 45))
    ax.set_xlabel("dihedral φ / degrees   (0 = s-cis, ±180 = s-trans; MM energies at the quantum structures, "
                  "lines join the scan points)", fontsize=8)
    ax.set_ylabel("relative energy / kcal mol⁻¹")
    atoms = "-".join(str(a + 1) for a in fit.dihedral_atoms)
    ax.set_title(f"{name}: torsion terms for dihedral {atoms}; RMSE vs quantum {fit.rmse_before_kcal_mol:.2f} before, "
                 f"{fit.rmse_after_kcal_mol:.2f} after (kcal/mol)", fontsize=9)
    ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    return fig


def write_torsion_fit(result, bond, out_dir):
    """Write the JSON, terms table, OpenMM XML and figure of bond.torsion_fit into out_dir."""
    fit = bond.torsion_fit
    if fit is None:
        raise ValueError(f"bond {bond.label} has no torsion fit to write")
    out_dir = Path(out_dir)
    stem = bond_stem(bond.label)

    def write_table(path):
        with path.open("w", newline="") as handle:
            writer = csv.DictWriter(handle, fieldnames=TERM_COLUMNS)
            writer.writeheader()
            writer.writerows(terms_table_rows(fit))

    atomic_write(out_dir / f"{stem}_torsion_fit.json",
                 lambda p: p.write_text(json.dumps(to_plain(fit), indent=2, allow_nan=False) + "\n"))
    atomic_write(out_dir / f"{stem}_torsion_terms.csv", write_table)
    atomic_write(out_dir / f"{stem}_torsion_openmm.xml", lambda p: p.write_text(openmm_torsion_xml(fit)))
    figure = fit_figure(result.name, fit)
    try:
        atomic_write(out_dir / f"{stem}_torsion_fit.png", lambda p: figure.savefig(p, format="png"))
    finally:
        plt.close(figure)
