"""A model Hessian to start quasi-Newton optimisations: Lindh's distance-weighted force field.

Lindh, Bernhardsson, Karlstrom, Malmqvist, Chem. Phys. Lett. 1995, 241, 423. Every pair, angle
and dihedral contributes a harmonic term whose force constant decays with the atoms'
distances, so no bond list is needed and crowded regions get sensible stiffness. The
parameters below are the published ones as commonly tabulated (from memory; they only shape
the starting Hessian, so small deviations change step counts, not results).
"""

import numpy as np

from .geometry import bond_angle_gradients, dihedral_gradients

# rows of the periodic table grouped as H-He, Li-Ne, Na and beyond
_ALPHA = np.array([[1.0000, 0.3949, 0.3949], [0.3949, 0.2800, 0.2800], [0.3949, 0.2800, 0.2800]])
_R_REF = np.array([[1.35, 2.10, 2.53], [2.10, 2.87, 3.40], [2.53, 3.40, 3.40]])  # Bohr
_K_STRETCH = 0.45  # Hartree/Bohr^2
_K_BEND = 0.15  # Hartree/rad^2
_K_TORSION = 0.005  # Hartree/rad^2
_NEIGHBOUR_WEIGHT = 1e-2  # pairs weaker than this are not used to build angles and dihedrals
_SMALLEST_SINE = 0.1  # skip angles and dihedrals through nearly linear arrangements


def _row(atomic_number):
    return 0 if atomic_number <= 2 else (1 if atomic_number <= 10 else 2)


def _sines(first, vertex, last):
    """Sines of the angles first-vertex-last, each (M, 3) positions -> (M,)."""
    u, v = first - vertex, last - vertex
    cos_t = np.einsum("mi,mi->m", u, v) / (np.linalg.norm(u, axis=1) * np.linalg.norm(v, axis=1))
    return np.sqrt(np.maximum(0.0, 1.0 - cos_t * cos_t))


def _add_terms(hessian, force_constants, atoms, gradients):
    """Add sum over terms m of force_constants[m] b_m b_m^T, b_m the Cartesian gradient (3N,) of
    internal coordinate m whose atoms (M, p) carry gradients (M, p, 3)."""
    if not len(force_constants):
        return
    rows = np.zeros((len(force_constants), hessian.shape[0]))
    columns = (3 * atoms[:, :, None] + np.arange(3)).reshape(len(atoms), -1)
    np.put_along_axis(rows, columns, gradients.reshape(len(atoms), -1), axis=1)
    hessian += rows.T @ (force_constants[:, None] * rows)


def lindh_hessian(numbers, coords):
    """Model Cartesian Hessian (3N, 3N) in Hartree/Bohr^2 for atoms `numbers` at coords (N, 3) Bohr."""
    n = len(numbers)
    rows = np.array([_row(z) for z in numbers])
    alpha = _ALPHA[rows[:, None], rows[None, :]]
    r_ref = _R_REF[rows[:, None], rows[None, :]]
    diff = coords[:, None, :] - coords[None, :, :]
    dist2 = np.einsum("ijk,ijk->ij", diff, diff)
    weight = np.exp(alpha * (r_ref**2 - dist2))
    np.fill_diagonal(weight, 0.0)

    hessian = np.zeros((3 * n, 3 * n))
    # stretches, vectorised over all pairs: H_ii += k e e^T, H_ij -= k e e^T
    dist = np.sqrt(dist2) + np.eye(n)
    unit = diff / dist[:, :, None]
    blocks = _K_STRETCH * weight[:, :, None, None] * unit[:, :, :, None] * unit[:, :, None, :]
    full = -blocks.transpose(0, 2, 1, 3).reshape(3 * n, 3 * n)
    for a in range(n):
        full[3 * a:3 * a + 3, 3 * a:3 * a + 3] = blocks[a].sum(axis=0)
    hessian += full

    neighbours = [np.flatnonzero(weight[a] > _NEIGHBOUR_WEIGHT) for a in range(n)]
    # bends i-j-k (i < k, both near j) through angles that are not nearly linear
    angles = np.array([(i, j, k) for j in range(n) for p, i in enumerate(neighbours[j]) for k in neighbours[j][p + 1:]],
                      dtype=int).reshape(-1, 3)
    angles = angles[_sines(coords[angles[:, 0]], coords[angles[:, 1]], coords[angles[:, 2]]) >= _SMALLEST_SINE]
    i, j, k = angles.T
    _add_terms(hessian, _K_BEND * weight[i, j] * weight[j, k], angles, bond_angle_gradients(coords, i, j, k))
    # torsions i-j-k-l about each near pair j < k, through two angles that are not nearly linear
    bent = {(int(i), int(j), int(k)) for i, j, k in angles} | {(int(k), int(j), int(i)) for i, j, k in angles}
    torsions = np.array([(i, j, k, l) for j in range(n) for k in neighbours[j] if k > j
                         for i in neighbours[j] if i != k and (i, j, k) in bent
                         for l in neighbours[k] if l != i and l != j and (j, k, l) in bent],
                        dtype=int).reshape(-1, 4)
    i, j, k, l = torsions.T
    _add_terms(hessian, _K_TORSION * weight[i, j] * weight[j, k] * weight[k, l], torsions,
               dihedral_gradients(coords, i, j, k, l))
    return 0.5 * (hessian + hessian.T)
