"""Internal-coordinate values and their Cartesian derivatives, rigid rotations, orthonormal bases.

Coordinates are (N, 3) arrays in Bohr unless a function says otherwise; angles are radians.
The dihedral follows the IUPAC sign convention (the same as RDKit): looking along j->k, the
angle is positive when bond j-i must turn clockwise to eclipse bond k-l.
"""

import itertools

import numpy as np


def _cross(a, b):
    """Cross product of two 3-vectors: the same arithmetic as np.cross, without its generality's cost."""
    return np.array((a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]))


def dihedral(coords, i, j, k, l):
    """Dihedral angle i-j-k-l in radians, in (-pi, pi]."""
    b0 = coords[i] - coords[j]
    b1 = coords[k] - coords[j]
    b2 = coords[l] - coords[k]
    b1_unit = b1 / np.linalg.norm(b1)
    v = b0 - np.dot(b0, b1_unit) * b1_unit
    w = b2 - np.dot(b2, b1_unit) * b1_unit
    x = np.dot(v, w)
    y = np.dot(_cross(b1_unit, v), w)
    return float(np.arctan2(y, x))


def dihedral_gradient(coords, i, j, k, l):
    """d(dihedral)/d(coords) as an (N, 3) array in rad/Bohr (Blondel and Karplus, 1996)."""
    f = coords[i] - coords[j]
    g = coords[j] - coords[k]
    h = coords[l] - coords[k]
    a = _cross(f, g)
    b = _cross(h, g)
    a2 = np.dot(a, a)
    b2 = np.dot(b, b)
    g_norm = np.linalg.norm(g)
    grad = np.zeros_like(coords)
    grad[i] = -g_norm / a2 * a
    grad[l] = g_norm / b2 * b
    fg = np.dot(f, g) / (a2 * g_norm)
    hg = np.dot(h, g) / (b2 * g_norm)
    grad[j] = g_norm / a2 * a + fg * a - hg * b
    grad[k] = -g_norm / b2 * b - fg * a + hg * b
    return grad


def bond_angle_gradients(coords, i, j, k):
    """d(angle i-j-k)/d(positions of i, j, k) for index arrays (M,) of many angles, j the vertex:
    (M, 3 atoms, 3) in rad/Bohr."""
    u, v = coords[i] - coords[j], coords[k] - coords[j]
    u_len, v_len = np.linalg.norm(u, axis=1)[:, None], np.linalg.norm(v, axis=1)[:, None]
    u_hat, v_hat = u / u_len, v / v_len
    cos_t = np.clip(np.einsum("mi,mi->m", u_hat, v_hat), -1.0, 1.0)[:, None]
    sin_t = np.sqrt(np.maximum(1.0 - cos_t * cos_t, 1e-12))
    at_i = (cos_t * u_hat - v_hat) / (u_len * sin_t)
    at_k = (cos_t * v_hat - u_hat) / (v_len * sin_t)
    return np.stack([at_i, -(at_i + at_k), at_k], axis=1)


def dihedral_gradients(coords, i, j, k, l):
    """d(dihedral i-j-k-l)/d(positions of i, j, k, l) for index arrays (M,) of many dihedrals:
    (M, 4 atoms, 3) in rad/Bohr; dihedral_gradient's formula, which stays for the one-dihedral hot path."""
    f, g, h = coords[i] - coords[j], coords[j] - coords[k], coords[l] - coords[k]
    a, b = np.cross(f, g), np.cross(h, g)
    a2, b2 = np.einsum("mi,mi->m", a, a)[:, None], np.einsum("mi,mi->m", b, b)[:, None]
    g_norm = np.linalg.norm(g, axis=1)[:, None]
    fg = np.einsum("mi,mi->m", f, g)[:, None] / (a2 * g_norm)
    hg = np.einsum("mi,mi->m", h, g)[:, None] / (b2 * g_norm)
    return np.stack([-g_norm / a2 * a, g_norm / a2 * a + fg * a - hg * b,
                     -g_norm / b2 * b - fg * a + hg * b, g_norm / b2 * b], axis=1)


def rotation_matrix(axis, angle):
    """3x3 matrix rotating by `angle` (radians, right-hand rule) about the vector `axis`."""
    axis = np.asarray(axis, dtype=float)
    axis = axis / np.linalg.norm(axis)
    x, y, z = axis
    c, s = np.cos(angle), np.sin(angle)
    cross = np.array([[0.0, -z, y], [z, 0.0, -x], [-y, x, 0.0]])
    return c * np.eye(3) + s * cross + (1.0 - c) * np.outer(axis, axis)


def rotate_about_bond(coords, j, k, moving, angle):
    """Rotate atoms `moving` rigidly about the axis j->k by `angle` (radians).

    With k's side moving, a dihedral i-j-k-l (i not moving, l moving) changes by exactly
    `angle`. Returns (new_coords, rotation) where rotation is the 3x3 matrix applied.
    """
    rotation = rotation_matrix(coords[k] - coords[j], angle)
    new = coords.copy()
    new[moving] = (coords[moving] - coords[k]) @ rotation.T + coords[k]
    return new, rotation


def superposition(moved, fixed):
    """(R, largest atom distance in Bohr) of the orthogonal 3x3 R (a rotation, or a rotation with a
    reflection) that best lays `moved` onto `fixed`, atom for atom: fixed ~ (moved - its centre) @ R
    + fixed's centre (Kabsch; both (N, 3) Bohr)."""
    moved, fixed = np.asarray(moved, dtype=float), np.asarray(fixed, dtype=float)
    p, q = moved - moved.mean(axis=0), fixed - fixed.mean(axis=0)
    u, _, vt = np.linalg.svd(p.T @ q)
    rotation = u @ vt
    return rotation, float(np.linalg.norm(p @ rotation - q, axis=1).max())


def matched_superposition(moved, fixed, orders, parents):
    """(order, R, largest atom distance in Bohr) of the best superposition of `moved` onto `fixed`
    with equivalent atoms exchanged: fixed ~ (moved[order] - its centre) @ R + fixed's centre.

    orders, parents: molecule.atom_orders. Each heavy-atom order is laid on by superposition, in
    both handednesses (a planar heavy-atom frame does not fix the side of its hydrogens); each heavy
    atom's hydrogens then go to the nearest arrangement of its partner's hydrogens. The atoms as
    numbered are tried first."""
    moved, fixed = np.asarray(moved, dtype=float), np.asarray(fixed, dtype=float)
    identity = np.arange(len(moved))
    rotation, distance = superposition(moved, fixed)
    best = (identity, rotation, distance)
    heavy = parents < 0
    for heavy_order in orders:
        partners = heavy_order[heavy]
        p = fixed[heavy] - fixed[heavy].mean(axis=0)
        q = moved[partners] - moved[partners].mean(axis=0)
        u, _, vt = np.linalg.svd(p.T @ q)
        for hand in (1.0, -1.0):  # moved ~ fixed turned, and its mirror through the least-defined axis
            turn = u @ np.diag([1.0, 1.0, hand]) @ vt
            laid = (fixed - fixed[heavy].mean(axis=0)) @ turn + moved[partners].mean(axis=0)
            order = heavy_order.copy()
            for atom in np.flatnonzero(heavy):
                ours, theirs = np.flatnonzero(parents == atom), np.flatnonzero(parents == heavy_order[atom])
                if len(ours) != len(theirs):
                    break
                if len(ours):
                    order[ours] = min(itertools.permutations(theirs),
                                      key=lambda t: float(np.sum((laid[ours] - moved[list(t)]) ** 2)))
            else:
                rotation, distance = superposition(moved[order], fixed)
                if distance < best[2]:
                    best = (order, rotation, distance)
    return best


def distinct_structures(structures, orders, parents, tolerance_bohr):
    """Indices of the structures ((N, 3) Bohr each) that no earlier one matches: largest atom
    distance of matched_superposition (equivalent atoms exchanged, mirror images allowed) at least
    tolerance_bohr from every structure kept before."""
    kept = []
    for index, coords in enumerate(structures):
        if all(matched_superposition(coords, structures[k], orders, parents)[2] >= tolerance_bohr for k in kept):
            kept.append(index)
    return kept


def rigid_body_directions(coords):
    """Orthonormal rows spanning the infinitesimal translations and rotations, shape (<=6, 3N)."""
    n = len(coords)
    x, y, z = (coords - coords.mean(axis=0)).T
    zero = np.zeros(n)
    modes = np.zeros((6, n, 3))
    modes[0, :, 0] = modes[2, :, 1] = modes[4, :, 2] = 1.0  # translations
    modes[1] = np.column_stack((zero, -z, y))  # rotations: axis x (coords - centre) about x, y, z
    modes[3] = np.column_stack((z, zero, -x))
    modes[5] = np.column_stack((-y, x, zero))
    return orthonormal_rows(modes.reshape(6, -1))


def orthonormal_rows(rows):
    """Orthonormal basis (k, n) of the span of rows (m, n), dropping dependent rows; (0, n) if none."""
    rows = np.asarray(rows, dtype=float)
    if len(rows) == 0:
        return rows
    q, r = np.linalg.qr(rows.T)
    keep = np.abs(np.diag(r)) > 1e-8 * max(1.0, np.abs(r).max())
    return q[:, keep].T


def internal_rotation(coords, j, k, moving):
    """(N, 3) displacement of a rigid turn of the `moving` atoms about the bond axis j->k by one
    radian (to first order; Bohr per radian), zero on the other atoms."""
    axis = coords[k] - coords[j]
    axis = axis / np.linalg.norm(axis)
    motion = np.zeros_like(coords)
    moving = np.asarray(moving, dtype=int)
    motion[moving] = np.cross(axis, coords[moving] - coords[k])
    return motion
