"""One analysis for every energy profile: Fourier fit, stationary points (refined by a caller's
function or interpolated on the fit), flat-region merging, barriers and region populations.

The scan, the re-scored profile and any later level all go through analyse_profile, so their
records have one shape (records.ProfileAnalysis). Angles in degrees, energies absolute in
Hartree in the records, relative kcal/mol in the fit.
"""

from dataclasses import replace

import numpy as np

from .profile import fit_profile, stationary_points
from .records import Barrier, ProfileAnalysis, StationaryRecord
from .thermo import region_populations_over
from .units import HARTREE_KCAL_MOL, wrap_deg

FIT_WIGGLE_KCAL_MOL = 0.001  # extrema pairs of the fit shallower than this are not refined
FLAT_KCAL_MOL = 0.01  # minimum/maximum pairs closer than this are one flat region
INTERPOLATED = "interpolated on the Fourier fit (no structure re-optimised)"


def display_angle(angle_deg):
    """Angle in (-180, 180] so that s-trans prints as 180."""
    wrapped = wrap_deg(angle_deg)
    if wrapped <= -180.0 + 1e-3:
        return 180.0
    return 0.0 if abs(wrapped) < 5e-4 else wrapped


def in_arc(angle, low, high):
    """Is angle within the arc going up from low to high (degrees, circular)?"""
    return (angle - low) % 360.0 <= (high - low) % 360.0 or (high - low) % 360.0 == 0.0


def neighbours(angle, others):
    """(previous, next) angles from `others` around the circle from `angle`."""
    below = min(others, key=lambda o: (angle - o) % 360.0 or 360.0)
    above = min(others, key=lambda o: (o - angle) % 360.0 or 360.0)
    return below, above


def _on_mirror_plane(angle_deg):
    return min(abs(wrap_deg(angle_deg)), 180.0 - abs(wrap_deg(angle_deg))) < 0.05


def merge_flat_extrema(records, symmetric, flat_hartree):
    """Remove neighbouring minimum/maximum pairs whose energies differ by less than flat_hartree
    (or the wrong way round): they are one flat region, not two stationary points.

    records alternate in kind around the circle. On a symmetric profile a flat pair that
    touches a mirror plane (0 or 180 deg) is merged together with its mirror image, leaving
    one stationary point on the plane (flat_region), so the result stays mirror symmetric.
    """
    records = sorted(records, key=lambda r: wrap_deg(r.angle_deg))
    while len(records) > 2:
        n = len(records)

        def depth(i):
            a, b = records[i], records[(i + 1) % n]
            low, high = (a, b) if a.kind == "minimum" else (b, a)
            return high.energy_hartree - low.energy_hartree

        i = min(range(n), key=depth)
        if depth(i) >= flat_hartree:
            break
        pair = [i, (i + 1) % n]
        on_plane = [j for j in pair if _on_mirror_plane(records[j].angle_deg)]
        if symmetric and on_plane:
            centre = on_plane[0]
            other = pair[1] if centre == pair[0] else pair[0]
            mirror = (2 * centre - other) % n  # the neighbour on the far side of the plane
            kept = records[centre]
            kind = records[other].kind
            merged = replace(kept, kind=kind, refinement=f"{kept.refinement} (flat {kind} region merged)",
                             flat_region=True)
            drop = {other, mirror}
            records = [merged if j == centre else r for j, r in enumerate(records) if j not in drop]
        else:
            records = [r for j, r in enumerate(records) if j not in pair]
    return records


def barriers_between(minima, maxima):
    """Barriers from each minimum over its neighbouring maximum in both directions (kcal/mol)."""
    barriers = []
    if not minima or not maxima:
        return barriers
    min_angles = [m.fit_angle_deg for m in minima]
    max_by_angle = {m.fit_angle_deg: m for m in maxima}
    for minimum in minima:
        below, above = neighbours(minimum.fit_angle_deg, list(max_by_angle))
        for top in (above, below):
            across = neighbours(top, min_angles)
            to = across[1] if top == above else across[0]
            to_angle = next(m.angle_deg for m in minima if m.fit_angle_deg == to)
            height = (max_by_angle[top].energy_hartree - minimum.energy_hartree) * HARTREE_KCAL_MOL
            converged = minimum.converged and max_by_angle[top].converged
            barriers.append(Barrier(minimum.angle_deg, max_by_angle[top].angle_deg, to_angle, height, converged))
    return barriers


def analyse_profile(angles_deg, energies_hartree, symmetric, temperatures_k, window_deg, refine=None):
    """The ProfileAnalysis of a profile known at grid points (degrees; absolute Hartree).

    refine([(stationary_point, basin), ...]) -> [StationaryRecord, ...] re-optimises the extrema
    of the fit, all in one call (basin: the neighbouring extrema of the other kind, degrees); extrema pairs deeper than
    FIT_WIGGLE_KCAL_MOL are refined and pairs left flatter than FLAT_KCAL_MOL merged. Without
    refine, extrema deeper than FLAT_KCAL_MOL are taken from the fit, labelled INTERPOLATED.
    The zero of relative energies is the lowest grid point or converged minimum.
    """
    energies_hartree = np.asarray(energies_hartree, dtype=float)
    grid_reference = float(energies_hartree.min())
    relative = (energies_hartree - grid_reference) * HARTREE_KCAL_MOL
    fit = fit_profile(np.asarray(angles_deg, dtype=float), relative, symmetric=symmetric)
    if refine is None:
        records = [
            StationaryRecord(s.kind, s.angle_deg, s.angle_deg, grid_reference + s.energy_kcal_mol / HARTREE_KCAL_MOL,
                             INTERPOLATED, True)
            for s in stationary_points(fit.series, min_depth_kcal_mol=FLAT_KCAL_MOL)
        ]
    else:
        fitted = stationary_points(fit.series, min_depth_kcal_mol=FIT_WIGGLE_KCAL_MOL)
        requests = []
        for s in fitted:
            others = [o.angle_deg for o in fitted if o.kind != s.kind] or [s.angle_deg + 180.0]
            requests.append((s, neighbours(s.angle_deg, others)))
        records = merge_flat_extrema(list(refine(requests)), symmetric, FLAT_KCAL_MOL / HARTREE_KCAL_MOL)
    minima = tuple(r for r in records if r.kind == "minimum")
    maxima = tuple(r for r in records if r.kind == "maximum")
    reference = min([grid_reference, *[m.energy_hartree for m in minima if m.converged]])
    shift = (grid_reference - reference) * HARTREE_KCAL_MOL
    fit = replace(fit, series=replace(fit.series, constant=fit.series.constant + shift))
    populations = region_populations_over(fit.series.value, temperatures_k, window_deg)
    return ProfileAnalysis(
        reference_energy_hartree=reference, fit=fit, minima=minima, maxima=maxima,
        barriers=tuple(barriers_between(list(minima), list(maxima))), populations=populations,
    )


SYMMETRIC_ROTOR_FLOOR_KCAL_MOL = 0.05  # smallest |E(phi) - E(180 - phi)| that breaks the rotor's symmetry


def is_symmetric_rotor_profile(fit):
    """Does the fitted profile satisfy E(phi) = E(180 deg - phi) within its own error (three times
    the fit RMSE, at least SYMMETRIC_ROTOR_FLOOR_KCAL_MOL), as a ring with equivalent sides must?"""
    angles = np.linspace(-180.0, 180.0, 721)
    asymmetry = np.abs(fit.series.value(angles) - fit.series.value(180.0 - angles)).max()
    return bool(asymmetry <= max(3.0 * fit.rmse_kcal_mol, SYMMETRIC_ROTOR_FLOOR_KCAL_MOL))
