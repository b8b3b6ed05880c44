"""Working with one bond's summary entry: which relaxed frame every profile point comes from.

The multi-frame XYZ file of a bond holds the computed points that have an energy, in the order
of the entry's points; a mirrored point is the mirror image of the computed point at -angle.
"""

from .units import wrap_deg


def computed_points(entry):
    """The entry's points that have a relaxed frame, in frame order."""
    return [p for p in entry["points"] if not p["mirrored"] and p["energy_rel_kcal_mol"] is not None]


def points_with_frames(entry):
    """(point, frame index) for every point with an energy; a mirrored point gets its image's frame."""
    index = {round(wrap_deg(p["angle_deg"]), 6): n for n, p in enumerate(computed_points(entry))}
    pairs = []
    for p in entry["points"]:
        if p["energy_rel_kcal_mol"] is None:
            continue
        n = index.get(round(wrap_deg(-p["angle_deg"] if p["mirrored"] else p["angle_deg"]), 6))
        if n is not None:
            pairs.append((p, n))
    return pairs
