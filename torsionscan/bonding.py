"""Has a relaxation changed the molecule? The bonds of the input's graph compared with the
distances of a relaxed structure, by covalent radii.

A bond of the graph counts as broken when its length exceeds BROKEN_FACTOR times the sum of
the two atoms' covalent radii; two atoms the graph does not bond count as newly bonded below
FORMED_FACTOR times that sum. The gap between the factors keeps stretched but intact bonds
(a torsion barrier top, a strained ring) and close non-bonded contacts from being reported
(common practice for bond perception from coordinates; factors chosen here, no source).
"""

import numpy as np
from rdkit import Chem

from .units import BOHR_ANGSTROM

BROKEN_FACTOR = 1.5
FORMED_FACTOR = 1.15
_TABLE = Chem.GetPeriodicTable()


def graph_bonds(mol):
    """The bonds of an RDKit molecule as sorted (i, j) pairs of 0-based atom indices."""
    return tuple(sorted(tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()))


def _label(numbers, index):
    return f"{_TABLE.GetElementSymbol(int(numbers[index]))}{index + 1}"


def bonding_changes(numbers, bonds, coords_bohr):
    """Sentences describing every change of bonding of the structure (N, 3) Bohr against the graph
    `bonds` (graph_bonds); empty when the molecule is intact. Atom labels are 1-based."""
    numbers = np.asarray(numbers)
    radii = np.array([_TABLE.GetRcovalent(int(z)) for z in numbers])
    distances = np.linalg.norm(coords_bohr[:, None, :] - coords_bohr[None, :, :], axis=-1) * BOHR_ANGSTROM
    limits = radii[:, None] + radii[None, :]
    bonded = set(bonds)
    broken = [(i, j) for i, j in bonds if distances[i, j] > BROKEN_FACTOR * limits[i, j]]
    rows, columns = np.nonzero(np.triu(distances < FORMED_FACTOR * limits, 1))
    formed = [(int(i), int(j)) for i, j in zip(rows, columns) if (i, j) not in bonded]
    changes = []
    for i, j in list(broken):
        for atom, old in ((i, j), (j, i)):
            new = [b for a, b in formed if a == atom] + [a for a, b in formed if b == atom]
            if new and len([p for p in bonds if atom in p]) == 1:  # a terminal atom that moved
                changes.append(f"{_label(numbers, atom)} moved from {_label(numbers, old)} to "
                               f"{_label(numbers, new[0])}")
                formed = [p for p in formed if p not in ((atom, new[0]), (new[0], atom))]
                broken.remove((i, j))
                break
    changes += [f"bond {_label(numbers, i)}-{_label(numbers, j)} broken ({distances[i, j]:.2f} Å)" for i, j in broken]
    changes += [f"new bond {_label(numbers, i)}-{_label(numbers, j)} ({distances[i, j]:.2f} Å)" for i, j in formed]
    return changes
