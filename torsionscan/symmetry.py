"""Symmetries of a structure used to skip finite-difference displacements: its point group, and
the energy's invariance under translation and rotation.

The operations looked for are the seven that are diagonal in the principal-axis frame of the
structure (reflections through the three principal planes, two-fold rotations about the three
axes, inversion through the centre of mass): every operation of the point groups a planar or
twisted conjugated molecule has at its stationary points (Cs, C2, C2v, C2h, D2h) is one of
them. An operation counts when it maps every atom onto an atom of the same element within
TOLERANCE_BOHR; the structure is then made exactly symmetric by averaging over the group.

With the group known, a gradient at a displaced structure gives, by symmetry, the gradient at
every displacement equivalent to it, so a central-difference Hessian needs one gradient per
class of equivalent displacements instead of 6N. A structure with no such operation is displaced
along the 3N-6 internal directions only (internal_hessian): the rigid-body curvature is removed from
the frequencies anyway, so 12 of the 6N gradients add nothing. Bohr and Hartree throughout.
"""

import itertools

import numpy as np

from .rrho import internal_basis

TOLERANCE_BOHR = 0.02  # largest atom mismatch of an operation on an optimised structure
_CANDIDATES = [np.array(signs, dtype=float) for signs in itertools.product((1.0, -1.0), repeat=3)]


def principal_frame(masses, coords_bohr):
    """(centre of mass, rotation Q): frame coordinates are (coords - centre) @ Q."""
    masses = np.asarray(masses, dtype=float)
    centre = masses @ coords_bohr / masses.sum()
    shifted = coords_bohr - centre
    inertia = np.einsum("a,ai,aj->ij", masses, shifted, shifted)
    _, axes = np.linalg.eigh(inertia)
    return centre, axes


def _permutation(numbers, frame, signs):
    """Atom permutation of the operation diag(signs) on frame coordinates, and its worst mismatch;
    None if some atom has no partner."""
    image = frame * signs
    distances = np.linalg.norm(image[:, None, :] - frame[None, :, :], axis=-1)
    distances[numbers[:, None] != numbers[None, :]] = np.inf
    permutation = distances.argmin(axis=1)
    if len(set(permutation.tolist())) != len(permutation):
        return None, np.inf
    return permutation, float(distances[np.arange(len(frame)), permutation].max())


def find_group(numbers, masses, coords_bohr, tolerance=TOLERANCE_BOHR):
    """(centre, Q, operations, symmetrised frame coordinates): operations are (signs, permutation)
    pairs forming a group (identity first); the frame coordinates are exactly invariant under them."""
    numbers = np.asarray(numbers)
    centre, axes = principal_frame(masses, coords_bohr)
    frame = (coords_bohr - centre) @ axes
    found = {}
    for signs in _CANDIDATES:
        permutation, mismatch = _permutation(numbers, frame, signs)
        if permutation is not None and mismatch <= tolerance:
            found[tuple(signs)] = permutation
    # a group: keep only operations whose products with the others were found too
    group = {s: p for s, p in found.items()
             if all(tuple(np.multiply(s, t)) in found for t in found)}
    if len(group) != len(found) or not _closed(group):
        group = {(1.0, 1.0, 1.0): np.arange(len(numbers))}
    operations = [(np.array(s), p) for s, p in sorted(group.items(), key=lambda item: item[0] != (1.0, 1.0, 1.0))]
    symmetric = np.zeros_like(frame)
    for signs, permutation in operations:
        # atom permutation[a] sits at signs * position of a: average the images back onto each atom
        symmetric[permutation] += frame * signs
    return centre, axes, operations, symmetric / len(operations)


def _closed(group):
    for (s, p), (t, q) in itertools.product(group.items(), repeat=2):
        product = tuple(np.multiply(s, t))
        if product not in group or not np.array_equal(group[product], p[q]):
            return False
    return True


def displacement_classes(operations, atom_count):
    """Classes of equivalent displacements (atom, axis, sign): list of (representative, members),
    members as (displacement, signs, permutation) of the operation that maps the representative
    onto it."""
    seen, classes = set(), []
    for atom, axis, sign in itertools.product(range(atom_count), range(3), (1, -1)):
        if (atom, axis, sign) in seen:
            continue
        members = []
        for signs, permutation in operations:
            image = (int(permutation[atom]), axis, int(sign * signs[axis]))
            if image not in seen:
                seen.add(image)
                members.append((image, signs, permutation))
        classes.append(((atom, axis, sign), members))
    return classes


def symmetric_hessian(gradients_at, numbers, masses, coords_bohr, step_bohr):
    """(Hessian (3N, 3N) in the input frame, symmetrised coords (N, 3) in the input frame, gradients
    used) by central differences over one displacement per class of equivalent displacements;
    internal_hessian for a structure without symmetry.

    gradients_at(reference, structures) -> gradients at the structures (all (N, 3), input frame);
    reference is the undisplaced structure.
    """
    centre, axes, operations, frame = find_group(numbers, masses, coords_bohr)
    if len(operations) == 1:
        return internal_hessian(gradients_at, masses, coords_bohr, step_bohr)
    count = len(frame)
    classes = displacement_classes(operations, count)
    displaced = []
    for (atom, axis, sign), _ in classes:
        structure = frame.copy()
        structure[atom, axis] += sign * step_bohr
        displaced.append(structure @ axes.T + centre)
    reference = frame @ axes.T + centre
    gradients = {}
    for (_, members), gradient in zip(classes, gradients_at(reference, displaced)):
        gradient = np.asarray(gradient) @ axes  # in the frame
        for image, signs, permutation in members:
            mapped = np.empty_like(gradient)
            mapped[permutation] = gradient * signs
            gradients[image] = mapped
    columns = [(gradients[(atom, axis, 1)] - gradients[(atom, axis, -1)]).ravel() / (2 * step_bohr)
               for atom in range(count) for axis in range(3)]
    frame_hessian = np.array(columns).T
    frame_hessian = 0.5 * (frame_hessian + frame_hessian.T)
    block = np.kron(np.eye(count), axes)  # frame vector -> input-frame vector
    return block @ frame_hessian @ block.T, reference, len(classes)


def mass_weighted_products(gradients_at, masses, coords_bohr, vectors, step_bohr):
    """(3N, k) mass-weighted Hessian M^-1/2 H M^-1/2 times each mass-weighted column of vectors
    (3N, k), by central differences of gradients along the matching Cartesian unit directions,
    each displaced by step_bohr (one gradients_at call, 2k gradients; gradients_at as in
    symmetric_hessian)."""
    coords = np.asarray(coords_bohr, dtype=float)
    inv_sqrt_m = np.repeat(1.0 / np.sqrt(np.asarray(masses, dtype=float)), 3)
    directions = vectors * inv_sqrt_m[:, None]  # Cartesian
    lengths = np.linalg.norm(directions, axis=0)
    units = directions / lengths
    displaced = [coords + sign * step_bohr * unit.reshape(-1, 3) for unit in units.T for sign in (1, -1)]
    gradients = np.array(gradients_at(coords, displaced)).reshape(len(displaced), -1)
    along = (gradients[0::2] - gradients[1::2]).T / (2 * step_bohr)  # H @ unit, one column per direction
    return along * lengths * inv_sqrt_m[:, None]


def internal_hessian(gradients_at, masses, coords_bohr, step_bohr):
    """(Hessian (3N, 3N), coords (N, 3), gradients used) by central differences along the 3N-6
    internal directions (rrho.internal_basis): exact in the space of the vibrations and zero
    along translations and rotations, which the frequencies leave out."""
    coords = np.array(coords_bohr, dtype=float)
    sqrt_m = np.repeat(np.sqrt(np.asarray(masses, dtype=float)), 3)
    basis = internal_basis(masses, coords)  # mass-weighted, orthonormal
    internal = basis.T @ mass_weighted_products(gradients_at, masses, coords, basis, step_bohr)
    internal = 0.5 * (internal + internal.T)
    weighted = basis @ internal @ basis.T
    return sqrt_m[:, None] * weighted * sqrt_m[None, :], coords, 2 * basis.shape[1]
