"""An analytic model potential behind the engine interface, for testing logic fast.

E = sum over atom pairs of k (r - r0)^2  +  sum over the given dihedrals of V(phi)
    (V a Fourier series in kcal/mol)

The springs join every pair of atoms except those across a modelled bond whose distance changes
when one side turns about it, and keep the distances of the first structure the engine sees.
So each side is rigid, turning it about a modelled bond changes only the dihedral terms, and
the relaxed profile of a modelled dihedral is its series exactly, with known minima, barriers
and a well-defined Hessian (no soft modes). Switches make it fail
like a real calculation (CalculationError near chosen angles) for testing failure paths.
It is never a chemical result: its caution says so.
"""

import numpy as np
from rdkit import Chem

from .. import geometry
from ..errors import CalculationError
from ..units import HARTREE_KCAL_MOL, wrap_deg
from . import CHARGE, ENERGY, GRADIENT, SPIN

MODEL_CAUTION = "Analytic model potential for testing the program's logic: not a chemical result."


class ModelEngine:
    """Model potential of one molecule (RDKit molecule with explicit hydrogens).

    torsions: ((i, j, k, l) 0-based, profile.FourierSeries in kcal/mol) pairs; spring_hartree_bohr2:
    the spring constant k; fail_near_deg: angles of the first modelled dihedral at which every
    evaluation within fail_tolerance_deg raises CalculationError (a stand-in for an SCF failure).
    """

    name = "model"
    method = "model potential"
    capabilities = frozenset({ENERGY, GRADIENT, CHARGE, SPIN})
    max_atomic_number = 118
    caution = MODEL_CAUTION

    def __init__(self, mol, torsions, spring_hartree_bohr2=0.5, fail_near_deg=(), fail_tolerance_deg=1.0):
        self.torsions = tuple((tuple(atoms), series) for atoms, series in torsions)
        self.spring = spring_hartree_bohr2
        self.fail_near_deg = tuple(fail_near_deg)
        self.fail_tolerance_deg = fail_tolerance_deg
        self.evaluations = 0
        count = mol.GetNumAtoms()
        rigid = np.triu(np.ones((count, count), dtype=bool), 1)
        for (_, j, k, _), _series in self.torsions:
            fragments = Chem.GetMolFrags(Chem.FragmentOnBonds(mol, [mol.GetBondBetweenAtoms(j, k).GetIdx()],
                                                              addDummies=False))
            far = np.zeros(count, dtype=bool)
            far[list(next(f for f in fragments if k in f))] = True
            turning = far.copy()
            turning[k] = False  # atoms on the axis keep their distances to everything
            near = ~far
            near[j] = False
            across = np.outer(turning, near) | np.outer(near, turning)
            rigid &= ~across
        self.pairs = np.argwhere(rigid)
        self.lengths = None  # r0 of every pair, from the first structure evaluated

    def energy_and_gradient(self, coords_bohr):
        """Energy in Hartree and gradient (N, 3) in Hartree/Bohr at coords (N, 3) in Bohr."""
        coords = np.asarray(coords_bohr, dtype=float).reshape(-1, 3)
        self.evaluations += 1
        if self.torsions and self.fail_near_deg:
            phi = np.degrees(geometry.dihedral(coords, *self.torsions[0][0]))
            if any(abs(wrap_deg(phi - a)) <= self.fail_tolerance_deg for a in self.fail_near_deg):
                raise CalculationError(f"model failure switched on near {phi:.1f} deg")
        vectors = coords[self.pairs[:, 0]] - coords[self.pairs[:, 1]]
        distances = np.linalg.norm(vectors, axis=1)
        if self.lengths is None:
            self.lengths = distances.copy()
        stretch = distances - self.lengths
        energy = self.spring * float(stretch @ stretch)
        gradient = np.zeros_like(coords)
        forces = (2.0 * self.spring * stretch / distances)[:, np.newaxis] * vectors
        np.add.at(gradient, self.pairs[:, 0], forces)
        np.add.at(gradient, self.pairs[:, 1], -forces)
        for atoms, series in self.torsions:
            phi = np.degrees(geometry.dihedral(coords, *atoms))
            energy += float(series.value(phi)) / HARTREE_KCAL_MOL
            gradient += float(series.derivative(phi)) / HARTREE_KCAL_MOL * geometry.dihedral_gradient(coords, *atoms)
        return energy, gradient
