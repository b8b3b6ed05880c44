"""Molecular-mechanics energies along a scan, without the torsion terms about the scanned bond.

Built in: MMFF94 through RDKit, evaluated at the quantum (relaxed GFN-xTB) geometries of the
scan. Every MMFF94 torsion term whose central bond is the scanned bond, for every atom quartet
i-j-k-l around it, is computed with MMFF94's own parameters and subtracted from the total; all
other terms stay. Alternatively a table of energies the user computed in any force field, one
per frame of the scan's multi-frame XYZ file. Energies in kcal/mol, coordinates in Angstrom.
"""

import math
from dataclasses import dataclass

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdForceFieldHelpers

from . import geometry
from .errors import InputError
from .tables import read_csv_table
from .units import KCAL_KJ

MM_MODELS = ("mmff94",)


@dataclass(frozen=True)
class Quartet:
    """One dihedral i-j-k-l about the scanned bond (0-based) with its MMFF94 atom types and V1..V3."""

    atoms: tuple[int, int, int, int]
    mmff_types: tuple[int, int, int, int]
    v_kcal_mol: tuple[float, float, float]

    def energy(self, angle_rad):
        """MMFF94 torsion energy 0.5 [V1 (1 + cos phi) + V2 (1 - cos 2phi) + V3 (1 + cos 3phi)], kcal/mol."""
        v1, v2, v3 = self.v_kcal_mol
        return 0.5 * (v1 * (1 + math.cos(angle_rad)) + v2 * (1 - math.cos(2 * angle_rad))
                      + v3 * (1 + math.cos(3 * angle_rad)))


def quartets_about(mol, j, k):
    """All atom quartets i-j-k-l around bond j-k (0-based), i bonded to j and l to k."""
    left = [a.GetIdx() for a in mol.GetAtomWithIdx(j).GetNeighbors() if a.GetIdx() != k]
    right = [a.GetIdx() for a in mol.GetAtomWithIdx(k).GetNeighbors() if a.GetIdx() != j]
    return [(i, j, k, l) for i in left for l in right if i != l]


class Mmff94:
    """MMFF94 energies of one molecule (RDKit molecule with explicit hydrogens, scan atom order)."""

    name = "MMFF94 (RDKit)"

    def __init__(self, mol, central_bond):
        mol = Chem.Mol(mol)
        if not mol.GetNumConformers():  # RDKit builds a force field on a conformer; frames replace it
            mol.AddConformer(Chem.Conformer(mol.GetNumAtoms()), assignId=True)
        properties = rdForceFieldHelpers.MMFFGetMoleculeProperties(mol, mmffVariant="MMFF94")
        if properties is None or not rdForceFieldHelpers.MMFFHasAllMoleculeParams(mol):
            raise InputError(
                "MMFF94 cannot type or parameterise this molecule; compute the MM energies in another "
                "force field and pass them with --mm-energies"
            )
        self._field = rdForceFieldHelpers.MMFFGetMoleculeForceField(mol, properties)
        self.atom_types = [properties.GetMMFFAtomType(i) for i in range(mol.GetNumAtoms())]
        types = self.atom_types
        self.quartets = []
        for atoms in quartets_about(mol, *central_bond):
            parameters = properties.GetMMFFTorsionParams(mol, *atoms)
            if parameters:  # (torsion type, V1, V2, V3); None where MMFF94 has no term
                self.quartets.append(Quartet(atoms, tuple(types[a] for a in atoms), tuple(parameters[1:])))

    def types(self, atoms):
        """MMFF94 atom types of atoms (0-based)."""
        return tuple(self.atom_types[a] for a in atoms)

    def energies(self, frames_angstrom):
        """(full MMFF94 energy, energy without the scanned bond's torsion terms) per frame, kcal/mol."""
        full, without = [], []
        for coords in frames_angstrom:
            total = self._field.CalcEnergy(np.asarray(coords, dtype=float).ravel().tolist())
            torsion = sum(q.energy(geometry.dihedral(np.asarray(coords), *q.atoms)) for q in self.quartets)
            full.append(total)
            without.append(total - torsion)
        return np.array(full), np.array(without)


def read_mm_energies(path, frame_count):
    """Energies (kcal/mol) from a CSV table with one row per scan frame, in the order of the XYZ file.

    Columns: energy_kcal_mol or energy_kj_mol (required, one of them), frame (optional, 1-based).
    """
    columns, numbered = read_csv_table(path, "MM energies", "the MM energies as a CSV text file")
    rows = [row for _, row in numbered]
    if "energy_kcal_mol" in columns:
        key, factor = columns["energy_kcal_mol"], 1.0
    elif "energy_kj_mol" in columns:
        key, factor = columns["energy_kj_mol"], 1.0 / KCAL_KJ
    else:
        raise InputError(f"{path} needs a column energy_kcal_mol or energy_kj_mol (one MM energy per scan frame)")
    if len(rows) != frame_count:
        raise InputError(
            f"{path} has {len(rows)} energies but the scan has {frame_count} frames; "
            "give one energy per frame, in the order of the scan's XYZ file"
        )
    energies = []
    for number, row in enumerate(rows, start=1):
        frame = (row.get(columns.get("frame", ""), "") or "").strip()
        if frame and frame != str(number):
            raise InputError(f"{path}: row {number} is for frame {frame}; list the frames in order 1..{frame_count}")
        text = (row[key] or "").strip()
        try:
            value = float(text)
        except ValueError:
            value = float("nan")
        if not math.isfinite(value):
            raise InputError(f"{path}: row {number} has energy {text!r}, not a number; fix that row")
        energies.append(value * factor)
    return np.array(energies)
