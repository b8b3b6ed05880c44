"""Relaxed structures: the scan as a multi-frame XYZ, the minima as SDF (coordinates in Angstrom)."""

import io

from rdkit import Chem
from rdkit.Geometry import Point3D

from ..units import BOHR_ANGSTROM


def _xyz_frame(symbols, coords_bohr, comment):
    lines = [str(len(symbols)), comment]
    for symbol, (x, y, z) in zip(symbols, coords_bohr * BOHR_ANGSTROM):
        lines.append(f"{symbol:<2s} {x:14.8f} {y:14.8f} {z:14.8f}")
    return "\n".join(lines) + "\n"


def scan_xyz_text(result, bond):
    """The relaxed points of a BondScan (bond.relaxed_points, in order) as multi-frame XYZ text,
    angle (deg) and energy (Hartree, and kcal/mol relative to the profile's zero) in each comment line."""
    frames = []
    for p in bond.relaxed_points:
        rel = bond.profile.relative_kcal_mol(p.energy_hartree)
        comment = (
            f"{result.name} dihedral={p.angle_deg:.2f} deg measured={p.measured_angle_deg:.4f} deg "
            f"E={p.energy_hartree:.10f} Eh rel={rel:.4f} kcal/mol converged={'yes' if p.converged else 'no'}"
        )
        frames.append(_xyz_frame(result.symbols, p.coords_bohr, comment))
    return "".join(frames)


def minima_sdf_text(result, bond):
    """The minima of a BondScan that have a structure as SDF text: one record each, angle (deg),
    relative energy (kcal/mol), energy (Hartree) and method as data fields."""
    buffer = io.StringIO()
    writer = Chem.SDWriter(buffer)
    for minimum in bond.profile.minima:
        if minimum.coords_bohr is None:
            continue
        mol = Chem.Mol(result.mol)
        mol.RemoveAllConformers()
        conformer = Chem.Conformer(mol.GetNumAtoms())
        for index, (x, y, z) in enumerate(minimum.coords_bohr * BOHR_ANGSTROM):
            conformer.SetAtomPosition(index, Point3D(float(x), float(y), float(z)))
        conformer.Set3D(True)
        mol.AddConformer(conformer)
        rel = bond.profile.relative_kcal_mol(minimum.energy_hartree)
        mol.SetProp("_Name", f"{result.name} minimum at {minimum.angle_deg:.1f} deg")
        mol.SetProp("dihedral_deg", f"{minimum.angle_deg:.3f}")
        mol.SetProp("energy_rel_kcal_mol", f"{rel:.4f}")
        mol.SetProp("energy_hartree", f"{minimum.energy_hartree:.10f}")
        mol.SetProp("method", result.method)
        writer.write(mol)
    writer.close()
    return buffer.getvalue()
