"""Symmetries of a structure used to skip finite-difference displacements: its point group, and
the energy's invariance under translation and rotation.

The operations looked for are the seven that are diagonal in the principal-axis frame of the
structure (reflections through the three principal planes, two-fold rotations about the three
axes, inversion through the centre of mass): every operation of the point groups a planar or
twisted conjugated molecule has at its stationary points (Cs, C2, C2v, C2h, D2h) is one of
them. An operation counts when it maps every atom onto an atom of the same element and mass
within TOLERANCE_BOHR; the structure is then made exactly symmetric by averaging over the group.

The Hessian is built by finite differences along the normal modes of a model Hessian, adapted
to the group's (one-dimensional) representations, in the space of the 3N-6 internal displacements
only (translations and rotations carry no vibration). A mode that some operation reverses needs one
gradient for a central difference: the gradient at the opposite displacement is its image under
that operation. A totally symmetric mode needs two, or one by a forward difference from the
reference's gradient when it is stiff, where the forward difference's O(step) error is a small
share of the curvature. Bohr and Hartree throughout.
"""

import itertools

import numpy as np

from .rrho import AU_TO_CM1, internal_basis

TOLERANCE_BOHR = 0.02  # largest atom mismatch of an operation on an optimised structure
# A totally symmetric mode of the model Hessian stiffer than this is taken by a forward difference: its
# O(step) error (anharmonicity) at FORWARD_STEP_BOHR moves no frequency by more than 1.9 cm-1. Against
# all-central Hessians at the demo list's 62 GFN2-xTB stationary points: G - E within 0.022 kcal/mol
# (median 0.011), the same verdicts, and 1,795 gradients instead of 3,082 (1,968 at 500 cm-1, where the
# worst G - E was 0.021).
STIFF_MODE_CM1 = 200.0
FORWARD_STEP_BOHR = 0.0005
_CANDIDATES = [np.array(signs, dtype=float) for signs in itertools.product((1.0, -1.0), repeat=3)]


def principal_frame(masses, coords_bohr):
    """(centre of mass, rotation Q): frame coordinates are (coords - centre) @ Q."""
    masses = np.asarray(masses, dtype=float)
    centre = masses @ coords_bohr / masses.sum()
    shifted = coords_bohr - centre
    inertia = np.einsum("a,ai,aj->ij", masses, shifted, shifted)
    _, axes = np.linalg.eigh(inertia)
    return centre, axes


def _permutation(numbers, masses, frame, signs):
    """Atom permutation of the operation diag(signs) on frame coordinates, and its worst mismatch;
    None if some atom has no partner (one of the same element and mass: an isotope breaks a symmetry)."""
    image = frame * signs
    distances = np.linalg.norm(image[:, None, :] - frame[None, :, :], axis=-1)
    distances[(numbers[:, None] != numbers[None, :]) | ~np.isclose(masses[:, None], masses[None, :])] = np.inf
    permutation = distances.argmin(axis=1)
    if len(set(permutation.tolist())) != len(permutation):
        return None, np.inf
    return permutation, float(distances[np.arange(len(frame)), permutation].max())


def find_group(numbers, masses, coords_bohr, tolerance=TOLERANCE_BOHR):
    """(centre, Q, operations, symmetrised frame coordinates): operations are (signs, permutation)
    pairs forming a group (identity first); the frame coordinates are exactly invariant under them."""
    numbers, masses = np.asarray(numbers), np.asarray(masses, dtype=float)
    centre, axes = principal_frame(masses, coords_bohr)
    frame = (coords_bohr - centre) @ axes
    found = {}
    for signs in _CANDIDATES:
        permutation, mismatch = _permutation(numbers, masses, frame, signs)
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


def _characters(operations):
    """The irreducible representations of the group, each a tuple of characters (+1 or -1), one per
    operation in the order given; the totally symmetric one first. Every operation here is its own
    inverse and they commute, so every representation is one-dimensional."""
    keys = [tuple(signs) for signs, _ in operations]
    position = {key: index for index, key in enumerate(keys)}
    products = [[position[tuple(np.multiply(a, b))] for b in keys] for a in keys]
    return [characters for characters in itertools.product((1, -1), repeat=len(keys))
            if characters[0] == 1 and all(characters[products[i][j]] == characters[i] * characters[j]
                                          for i in range(len(keys)) for j in range(len(keys)))]


def _apply(signs, permutation, vectors):
    """An operation applied to displacement (or gradient) vectors, columns (3N, k) in the frame:
    atom a's vector, with the operation's signs, becomes atom permutation[a]'s."""
    atoms = vectors.reshape(len(permutation), 3, -1)
    image = np.empty_like(atoms)
    image[permutation] = atoms * signs[None, :, None]
    return image.reshape(vectors.shape)


def symmetry_adapted_modes(operations, masses, frame, model_mw):
    """(modes (3N, 3N-6) mass-weighted and orthonormal, model wavenumbers (cm^-1), representation
    index of each mode, characters): the eigenvectors of the mass-weighted model Hessian model_mw
    (frame axes) within each irreducible representation of the structure's internal displacements."""
    basis = internal_basis(masses, frame)
    representations = _characters(operations)
    modes, wavenumbers, labels = [], [], []
    for label, characters in enumerate(representations):
        projected = sum(c * _apply(signs, permutation, basis)
                        for c, (signs, permutation) in zip(characters, operations)) / len(operations)
        left, singular, _ = np.linalg.svd(projected, full_matrices=False)
        block = left[:, singular > 0.5]  # an orthogonal projection: singular values are 1 or 0
        if not block.shape[1]:
            continue
        values, vectors = np.linalg.eigh(block.T @ model_mw @ block)
        modes.append(block @ vectors)
        wavenumbers.extend(np.sign(values) * np.sqrt(np.abs(values)) * AU_TO_CM1)
        labels.extend([label] * len(values))
    return np.hstack(modes), np.array(wavenumbers), np.array(labels), representations


def symmetric_hessian(gradients_at, numbers, masses, coords_bohr, model_hessian, step_bohr,
                      forward_step_bohr=FORWARD_STEP_BOHR):
    """(Hessian (3N, 3N) in the input frame, zero along translations and rotations; the structure it
    belongs to (N, 3), symmetrised, in the input frame; gradients used), by finite differences of
    gradients along the symmetry-adapted normal modes of model_hessian ((3N, 3N) Hartree/Bohr^2 at
    coords_bohr, e.g. Lindh's): central differences (step_bohr) along a mode some operation reverses,
    from one gradient (the other is its image under the operation) and along a totally symmetric mode
    below STIFF_MODE_CM1 (two); a forward difference (forward_step_bohr, one gradient and the
    reference's) along a stiffer totally symmetric mode. The couplings between modes of different
    representations, zero by symmetry, are set to zero.

    gradients_at(reference, structures) -> gradients at the structures (all (N, 3), input frame);
    reference is the undisplaced structure.
    """
    masses = np.asarray(masses, dtype=float)
    centre, axes, operations, frame = find_group(numbers, masses, coords_bohr)
    if len(operations) == 1:  # no symmetry: the structure as given, in its own frame
        centre, axes, frame = np.zeros(3), np.eye(3), np.array(coords_bohr, dtype=float)
    count = len(frame)
    block = np.kron(np.eye(count), axes)  # frame vector -> input-frame vector
    sqrt_m = np.repeat(np.sqrt(masses), 3)
    model_mw = (block.T @ np.asarray(model_hessian, dtype=float) @ block) / np.outer(sqrt_m, sqrt_m)
    modes, wavenumbers, labels, representations = symmetry_adapted_modes(operations, masses, frame, model_mw)
    reversing = [next((operations[i] for i, c in enumerate(representations[label]) if c == -1), None)
                 for label in labels]
    directions = modes / sqrt_m[:, None]
    lengths = np.linalg.norm(directions, axis=0)
    units = (directions / lengths).T.reshape(-1, count, 3)
    forward = [operation is None and wavenumber > STIFF_MODE_CM1
               for operation, wavenumber in zip(reversing, wavenumbers)]
    displaced = [frame] if any(forward) else []  # the reference's own gradient, for the forward differences
    for unit, operation, ahead in zip(units, reversing, forward):
        if ahead:
            displaced.append(frame + forward_step_bohr * unit)
        else:
            displaced.append(frame + step_bohr * unit)
            if operation is None:
                displaced.append(frame - step_bohr * unit)
    reference = frame @ axes.T + centre
    gradients = iter([np.asarray(g).reshape(count, 3) @ axes
                      for g in gradients_at(reference, [s @ axes.T + centre for s in displaced])])
    at_reference = next(gradients).ravel() if any(forward) else None
    columns = []  # H @ unit in the frame, one per mode
    for operation, ahead in zip(reversing, forward):
        plus = next(gradients).ravel()
        if ahead:
            columns.append((plus - at_reference) / forward_step_bohr)
            continue
        minus = next(gradients).ravel() if operation is None else _apply(*operation, plus[:, None])[:, 0]
        columns.append((plus - minus) / (2 * step_bohr))
    products = np.array(columns).T * lengths / sqrt_m[:, None]  # mass-weighted Hessian @ modes
    internal = modes.T @ products
    internal = 0.5 * (internal + internal.T) * (labels[:, None] == labels[None, :])
    weighted = modes @ internal @ modes.T
    frame_hessian = sqrt_m[:, None] * weighted * sqrt_m[None, :]
    return block @ frame_hessian @ block.T, reference, len(displaced)


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
