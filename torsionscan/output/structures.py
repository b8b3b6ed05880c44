"""Relaxed structures: the scan as a multi-frame XYZ, the minima as SDF."""

import io

from rdkit import Chem
from rdkit.Geometry import Point3D

from ..units import BOHR_ANGSTROM, HARTREE_KCAL_MOL


def _xyz_frame(symbols, coords_bohr, comment):
    lines = [str(len(symbols)), comment]
    for symbol, (x, y, z) in zip(symbols, coords_bohr * BOHR_ANGSTROM):
        lines.append(f"{symbol:<2s} {x:14.8f} {y:14.8f} {z:14.8f}")
    return "\n".join(lines) + "\n"


def scan_xyz_text(result, bond):
    """Computed (not mirrored) scan points as multi-frame XYZ text, angle and energy in each comment line."""
    frames = []
    for p in bond.relaxed_points:
        rel = (p.energy_hartree - bond.reference_energy_hartree) * HARTREE_KCAL_MOL
        comment = (
            f"{result.name} dihedral={p.angle_deg:.2f} deg measured={p.measured_angle_deg:.4f} deg "
            f"E={p.energy_hartree:.10f} Eh rel={rel:.4f} kcal/mol converged={'yes' if p.converged else 'no'}"
        )
        frames.append(_xyz_frame(result.symbols, p.coords_bohr, comment))
    return "".join(frames)


def minima_sdf_text(result, bond):
    """Refined minima as SDF text: one record each, angle and relative energy as data fields."""
    buffer = io.StringIO()
    writer = Chem.SDWriter(buffer)
    for minimum in bond.minima:
        mol = Chem.Mol(result.mol)
        mol.RemoveAllConformers()
        conformer = Chem.Conformer(mol.GetNumAtoms())
        for index, (x, y, z) in enumerate(minimum.coords_bohr * BOHR_ANGSTROM):
            conformer.SetAtomPosition(index, Point3D(float(x), float(y), float(z)))
        conformer.Set3D(True)
        mol.AddConformer(conformer)
        rel = (minimum.energy_hartree - bond.reference_energy_hartree) * HARTREE_KCAL_MOL
        mol.SetProp("_Name", f"{result.name} minimum at {minimum.angle_deg:.1f} deg")
        mol.SetProp("dihedral_deg", f"{minimum.angle_deg:.3f}")
        mol.SetProp("energy_rel_kcal_mol", f"{rel:.4f}")
        mol.SetProp("energy_hartree", f"{minimum.energy_hartree:.10f}")
        mol.SetProp("method", result.method)
        writer.write(mol)
    writer.close()
    return buffer.getvalue()
