"""The one vocabulary of quality flags of a scanned bond, as pure functions of its record.

A flag says that a number of the bond should be read with care. The same short names appear in
the terminal, the results table, the report cards and the Python API (BondScan.flags); the
sentence of each (FLAG_MEANINGS) is the README's. bond_flags and flag_details read a BondScan
(or any object with its fields) and never import records, so records can use them.
"""

import math

from .profile import FIT_TARGET_KCAL_MOL
from .relax import bonding_change

FIT_MISSED = "fit target missed"
HYSTERESIS = "hysteresis"
UNCONVERGED = "unconverged points"
STRUCTURE_CHANGED = "structure changed"
STATIONARY_CHECK = "stationary-point check failed"
METHOD_DISAGREEMENT = "method disagreement"
SYMMETRIC_ROTOR = "symmetric rotor"

# in the order they are shown; each meaning is one sentence
FLAG_MEANINGS = {
    FIT_MISSED: (f"the Fourier fit misses the scan points by more than {FIT_TARGET_KCAL_MOL} kcal/mol (RMS), so "
                 "fitted minima, barriers and populations are approximate: rescan with a smaller --step."),
    HYSTERESIS: ("the two sweeps reached different relaxed energies at the same angle (a side group found another "
                 "conformer), so the profile mixes conformers: look at the structures at the angles named."),
    UNCONVERGED: ("some relaxations stopped before converging or failed, so the energies at those angles "
                  "(and anything fitted through them) are uncertain."),
    STRUCTURE_CHANGED: ("at some angles the relaxation broke a bond or moved an atom to another partner, so the "
                        "profile there is not of this molecule and the populations across that arc are not to be "
                        "trusted: check --charge and --unpaired-electrons, or the structure."),
    STATIONARY_CHECK: ("the harmonic frequencies contradict the kind of a stationary point (a minimum with an "
                       "imaginary mode, or a barrier top without exactly one imaginary mode along the torsion; in a flat "
                       "region the torsion mode may have either sign), "
                       "so its free energy and the populations built on it are doubtful."),
    METHOD_DISAGREEMENT: ("a higher level (re-scoring or refinement) gives a profile that departs from the scan's "
                          "beyond its threshold: trust the higher level, or refine further."),
    SYMMETRIC_ROTOR: ("the two sides of the bond are equivalent (E(φ) = E(180° − φ)), so an s-cis/s-trans "
                      "split has no meaning: read the twist and the planar and perpendicular barriers instead."),
}


def _unconverged(bond):
    return [p for p in bond.points if not p.mirrored and (not p.converged or not math.isfinite(p.energy_hartree))]


def _contradicts_kind(point):
    """Do a stationary point's frequencies contradict its kind? In a flat region (flat_region) the
    torsion mode may have either sign, so only imaginary modes across the torsion count."""
    if point.imaginary_count is None:
        return False
    if point.flat_region:
        return point.imaginary_count > (1 if point.imaginary_along_torsion else 0)
    if point.kind == "minimum":
        return point.imaginary_count > 0
    return point.imaginary_count != 1 or not point.imaginary_along_torsion


def _structure_changed(bond):
    return [p for p in bond.points if not p.mirrored and bonding_change(p.failure)]


def wrong_stationary_points(analysis):
    """Stationary points of a ProfileAnalysis whose frequencies contradict their kind: minima with an
    imaginary mode, barrier tops without exactly one imaginary mode along the torsion (in a flat
    region: any imaginary mode across the torsion). Points without frequencies are not judged."""
    return [m for m in analysis.minima + analysis.maxima if _contradicts_kind(m)]


def _disagreements(bond):
    """(level, warning) of the higher levels whose profile departs from the scan's."""
    found = []
    if bond.rescored is not None and bond.rescored.disagreement.warning:
        found.append((bond.rescored.level, bond.rescored.disagreement.warning))
    refined = bond.refined
    if refined is not None and refined.disagreement is not None and refined.disagreement.warning:
        found.append((refined.level, refined.disagreement.warning))
    return found


def _angle_text(angle_deg):
    """An angle for a sentence: one decimal, 180 never as -180."""
    value = float(angle_deg)
    if abs(abs(value) - 180.0) < 0.05:
        value = 180.0
    return f"{value + 0.0:.1f}°"


def flag_details(bond):
    """[(flag, what was found)] of a BondScan, in FLAG_MEANINGS order: the specific finding of each
    raised flag in a short phrase (angles in degrees, energies in kcal/mol)."""
    details = []
    fit = bond.profile.fit
    if fit is not None and not fit.rmse_kcal_mol <= FIT_TARGET_KCAL_MOL:
        details.append((FIT_MISSED, f"fit RMSE {fit.rmse_kcal_mol:.2f} kcal/mol > {FIT_TARGET_KCAL_MOL} kcal/mol"))
    if bond.hysteresis:
        details.append((HYSTERESIS, "at " + ", ".join(
            f"{_angle_text(h.angle_deg)} ({h.energy_difference_kcal_mol:.2f} kcal/mol)" for h in bond.hysteresis)))
    unconverged = _unconverged(bond)
    if unconverged:
        details.append((UNCONVERGED, f"{len(unconverged)} point{'' if len(unconverged) == 1 else 's'} at "
                        + ", ".join(_angle_text(p.angle_deg) for p in unconverged)))
    changed = _structure_changed(bond)
    if changed:
        details.append((STRUCTURE_CHANGED, f"{len(changed)} point{'' if len(changed) == 1 else 's'} at "
                        + ", ".join(_angle_text(p.angle_deg) for p in changed)
                        + f"; at {_angle_text(changed[0].angle_deg)}: {bonding_change(changed[0].failure)}"))
    wrong = wrong_stationary_points(bond.profile)
    if wrong:
        details.append((STATIONARY_CHECK, ", ".join(
            f"{m.kind} at {_angle_text(m.angle_deg)} has {m.imaginary_count} imaginary mode"
            f"{'' if m.imaginary_count == 1 else 's'}"
            + ("" if (m.kind == "minimum" and not m.flat_region) or m.imaginary_along_torsion
               else " not along the torsion")
            for m in wrong)))
    disagreements = _disagreements(bond)
    if disagreements:
        details.append((METHOD_DISAGREEMENT, "; ".join(f"{level}: {warning}" for level, warning in disagreements)))
    if bond.symmetric_rotor:
        details.append((SYMMETRIC_ROTOR, "E(φ) = E(180° − φ)"))
    return details


def bond_flags(bond):
    """The names of the raised flags of a BondScan (a tuple, in FLAG_MEANINGS order)."""
    return tuple(flag for flag, _ in flag_details(bond))


def flags_text(flags):
    """Flag names joined for one table cell or terminal line ("" when none)."""
    return ", ".join(flags)
