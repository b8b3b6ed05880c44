"""The scan coordinate: one or more dihedrals on a grid, how to turn a structure to a grid point,
the constraints that hold it there, the order of visits, and mirror folding.

Grid points are tuples of integer indices, one per dihedral (angle = index * step); the driver
in driver.py only ever handles such tuples. Coordinates are (N, 3) arrays in Bohr, Hessians
(3N, 3N) in Hartree/Bohr^2.

Visit plan (one dihedral): two chains, one in each direction, so every angle is reached from both
sides; each chain starts from the start structure turned rigidly to its first point and then
goes on point by point from its own previous point, so the two are independent of each other
(they run side by side on two cores). Chiral molecules: one chain up and one down round the full
circle from the start. Molecules without stereocentres have E(phi) = E(-phi): only 0..180 deg is
computed, one chain down from 180 to 0 and one up from 0 to 180; the other half of the circle is
filled by mirror images.
"""

from dataclasses import dataclass

import numpy as np

from . import geometry
from .units import wrap_rad


class DihedralConstraint:
    """Holds dihedral i-j-k-l at `target_rad` (flat coordinate vectors in Bohr)."""

    def __init__(self, atoms, target_rad):
        self.atoms = atoms
        self.target_rad = target_rad

    def residual(self, x):
        return wrap_rad(geometry.dihedral(x.reshape(-1, 3), *self.atoms) - self.target_rad)

    def jacobian(self, x):
        return geometry.dihedral_gradient(x.reshape(-1, 3), *self.atoms).ravel()


def mirror(coords):
    """Mirror image of coordinates (x -> -x): every dihedral changes sign."""
    mirrored = np.array(coords, dtype=float)
    mirrored[..., 0] *= -1.0
    return mirrored


def mirror_hessian(hessian):
    """The Hessian of the mirror-image structure."""
    signs = np.tile([-1.0, 1.0, 1.0], len(hessian) // 3)
    return hessian * np.outer(signs, signs)


@dataclass(frozen=True)
class ScanCoordinate:
    """Dihedrals scanned together on one grid of `step_deg`.

    dihedrals: 0-based atom quartets; moving: for each, the atoms on the far side of its bond,
    turned rigidly to reach a new angle; mirror_symmetric: E is unchanged when every dihedral
    changes sign (no stereocentres), so half the grid is computed and the rest mirrored.
    """

    dihedrals: tuple[tuple[int, int, int, int], ...]
    moving: tuple[tuple[int, ...], ...]
    step_deg: float
    mirror_symmetric: bool

    @property
    def steps_per_turn(self):
        return int(round(360.0 / self.step_deg))

    def angles_deg(self, index):
        """Target angles (degrees, unwrapped) of a grid point."""
        return tuple(i * self.step_deg for i in index)

    def canonical(self, index):
        """The grid point's index with every component in 0..steps_per_turn-1."""
        return tuple(i % self.steps_per_turn for i in index)

    def mirror_index(self, index):
        """The grid point of the mirror image."""
        return self.canonical(tuple(-i for i in index))

    def measure_deg(self, coords):
        """The dihedrals of coords (Bohr) in degrees, (-180, 180]."""
        coords = np.reshape(coords, (-1, 3))
        return tuple(float(np.degrees(geometry.dihedral(coords, *atoms))) for atoms in self.dihedrals)

    def nearest_index(self, coords):
        """The grid point nearest to a structure."""
        return tuple(int(round(a / self.step_deg)) for a in self.measure_deg(coords))

    def constraints(self, angles_deg):
        """The constraints holding every dihedral at the given angles (degrees; a grid point's
        angles_deg or any off-grid angles)."""
        return [DihedralConstraint(atoms, np.radians(angle)) for atoms, angle in zip(self.dihedrals, angles_deg)]

    def turn(self, coords, hessian, angles_deg):
        """Rigidly turn each moving side so the dihedrals reach angles_deg; turn the Hessian with it."""
        block = np.eye(len(hessian))
        for atoms, moving, target in zip(self.dihedrals, self.moving, angles_deg):
            delta = wrap_rad(np.radians(target) - geometry.dihedral(coords, *atoms))
            coords, rotation = geometry.rotate_about_bond(coords, atoms[1], atoms[2], np.array(moving), delta)
            step = np.eye(len(hessian))
            for atom in moving:
                step[3 * atom:3 * atom + 3, 3 * atom:3 * atom + 3] = rotation
            block = step @ block
        return coords, block @ hessian @ block.T

    def sweep_chains(self, start):
        """The two chains of grid points of the visit plan (see the module docstring), each a list
        visited in order; start is the start structure's grid point (canonical, or in 0..half for
        a symmetric scan)."""
        if len(self.dihedrals) != 1:
            raise NotImplementedError("a visit plan over more than one dihedral is not offered yet")
        (first,) = start
        n = self.steps_per_turn
        if self.mirror_symmetric:
            half = n // 2
            return [[(i,) for i in range(half, -1, -1)], [(i,) for i in range(half + 1)]]
        return [[(first + s,) for s in range(n)], [(first - s,) for s in range(1, n)]]

    def start_point(self, coords, hessian):
        """(grid point, coords, hessian) to start the sweeps from a relaxed structure: the nearest
        grid point, on the computed half (the structure mirrored if need be)."""
        index = self.nearest_index(coords)
        if self.mirror_symmetric and self.measure_deg(coords)[0] < 0:
            coords, hessian = mirror(coords), mirror_hessian(hessian)
            index = self.nearest_index(coords)
        if not self.mirror_symmetric:
            index = self.canonical(index)
        return index, coords, hessian
