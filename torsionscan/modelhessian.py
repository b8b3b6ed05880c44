"""A model Hessian to start quasi-Newton optimisations: Lindh's distance-weighted force field.

Lindh, Bernhardsson, Karlstrom, Malmqvist, Chem. Phys. Lett. 1995, 241, 423. Every pair, angle
and dihedral contributes a harmonic term whose force constant decays with the atoms'
distances, so no bond list is needed and crowded regions get sensible stiffness. The
parameters below are the published ones as commonly tabulated (from memory; they only shape
the starting Hessian, so small deviations change step counts, not results).
"""

import numpy as np

from .geometry import bond_angle_gradient, dihedral_gradient

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


def _add_term(hessian, force_constant, atoms, gradient):
    """Add force_constant * b b^T for an internal coordinate with Cartesian gradient b."""
    index = np.ravel([[3 * a, 3 * a + 1, 3 * a + 2] for a in atoms])
    b = gradient[list(atoms)].ravel()
    hessian[np.ix_(index, index)] += force_constant * np.outer(b, b)


def _sine_of_angle(coords, i, j, k):
    u = coords[i] - coords[j]
    v = coords[k] - coords[j]
    cos_t = np.dot(u, v) / (np.linalg.norm(u) * np.linalg.norm(v))
    return np.sqrt(max(0.0, 1.0 - cos_t * cos_t))


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
    for j in range(n):
        near = neighbours[j]
        for p, i in enumerate(near):
            for k in near[p + 1:]:
                if _sine_of_angle(coords, i, j, k) < _SMALLEST_SINE:
                    continue
                force = _K_BEND * weight[i, j] * weight[j, k]
                _add_term(hessian, force, (i, j, k), bond_angle_gradient(coords, i, j, k))
    for j in range(n):
        for k in neighbours[j]:
            if k <= j:
                continue
            for i in neighbours[j]:
                if i == k or _sine_of_angle(coords, i, j, k) < _SMALLEST_SINE:
                    continue
                for l in neighbours[k]:
                    if l in (i, j) or _sine_of_angle(coords, j, k, l) < _SMALLEST_SINE:
                        continue
                    force = _K_TORSION * weight[i, j] * weight[j, k] * weight[k, l]
                    _add_term(hessian, force, (i, j, k, l), dihedral_gradient(coords, i, j, k, l))
    return 0.5 * (hessian + hessian.T)
