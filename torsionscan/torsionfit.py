"""Dihedral terms for a molecular-mechanics model, fitted to the part of a quantum profile the
rest of the model does not reproduce. Pure numerical functions: angles in degrees, energies in
kcal/mol.

The fitted form is E_t(phi) = sum_n k_n [1 + cos(n phi - delta_n)], k_n >= 0. With phases
restricted to 0/180 deg (the default; right for molecules without stereocentres, whose
profiles are even in phi) the model is linear in a_n = k_n cos(delta_n); with free phases
b_n = k_n sin(delta_n) joins it. Least squares with optional point weights and a light ridge
penalty on the a_n, b_n (not on the constant), which keeps terms from growing into large,
cancelling pairs when the data cannot tell them apart.
"""

import math
from dataclasses import dataclass

import numpy as np

from .units import KCAL_KJ, rt_kcal_mol

DEFAULT_MAX_PERIODICITY = 4
MAX_PERIODICITY = 6
RIDGE = 1e-5  # penalty per coefficient, relative to the summed weights (kcal/mol scale)
_ZERO_K = 1e-12  # |k| below this is written as exactly 0 with phase 0


@dataclass(frozen=True)
class TorsionTerm:
    """k [1 + cos(n phi - phase)]: force constant k >= 0 in kcal/mol, phase in [0, 360) deg."""

    periodicity: int
    phase_deg: float
    k_kcal_mol: float

    @property
    def k_kj_mol(self):
        return self.k_kcal_mol * KCAL_KJ


@dataclass(frozen=True)
class TermFit:
    """Fitted terms; constant_kcal_mol is the offset the fit needed (not part of the terms)."""

    terms: tuple[TorsionTerm, ...]
    constant_kcal_mol: float
    rmse_kcal_mol: float  # unweighted RMS residual of target vs constant + terms


def term_energy(terms, angle_deg):
    """Sum of the terms at angle(s) in degrees, kcal/mol."""
    phi = np.radians(np.asarray(angle_deg, dtype=float))
    total = np.zeros_like(phi)
    for t in terms:
        total = total + t.k_kcal_mol * (1.0 + np.cos(t.periodicity * phi - math.radians(t.phase_deg)))
    return total


def quartet_term_energy(terms, angle_deg):
    """The terms summed over several dihedrals per point: angle_deg of shape (points, dihedrals)
    (a 1-D array is one dihedral per point), kcal/mol per point."""
    angles = np.asarray(angle_deg, dtype=float)
    return term_energy(terms, angles).reshape(angles.shape[0], -1).sum(axis=1)


def fit_terms(angle_deg, target_kcal_mol, max_periodicity=DEFAULT_MAX_PERIODICITY, free_phases=False,
              weights=None, ridge=RIDGE):
    """Least-squares terms n = 1..max_periodicity for target(phi) ~ constant + sum of terms."""
    joint = fit_joint_terms([angle_deg], [target_kcal_mol], max_periodicity, free_phases,
                            None if weights is None else [weights], ridge)
    return TermFit(joint.terms, joint.constants_kcal_mol[0], joint.rmse_kcal_mol[0])


@dataclass(frozen=True)
class JointFit:
    """One set of terms shared by several profiles, each profile with its own constant offset."""

    terms: tuple[TorsionTerm, ...]
    constants_kcal_mol: tuple[float, ...]  # per profile: the offset it needed (not part of the terms)
    rmse_kcal_mol: tuple[float, ...]  # per profile: unweighted RMS of target vs its constant + terms


def fit_joint_terms(angle_lists, target_lists, max_periodicity=DEFAULT_MAX_PERIODICITY, free_phases=False,
                    weight_lists=None, ridge=RIDGE):
    """Least-squares terms n = 1..max_periodicity shared by every profile p: target_p(phi) ~ c_p + sum of
    terms, one free constant c_p per profile. Weights per point (default 1); the ridge penalty is
    relative to the summed weights of all profiles and applies to the shared coefficients only.

    A profile's angles are one dihedral per point (1-D) or several, shape (points, dihedrals): the
    terms then act on every one of them and the model is their sum (the same terms on each atom
    quartet of a type about a bond, as a force field keyed by atom classes applies them).

    The constants carry no penalty, so each is the weighted mean of its profile's misfit: solving for
    the shared coefficients on profiles centred by their weighted means is the same least-squares
    problem without one column per profile (which keeps many profiles and leave-one-out refits cheap).
    """
    if not 1 <= max_periodicity <= MAX_PERIODICITY:
        raise ValueError(f"periodicities go from 1 to at most {MAX_PERIODICITY}, got {max_periodicity}")
    if not angle_lists or len(angle_lists) != len(target_lists):
        raise ValueError("give one target list per angle list, at least one profile")
    n = np.arange(1, max_periodicity + 1)
    designs, centred_designs, centred_targets, means, weights = [], [], [], [], []
    for p, (angles, target) in enumerate(zip(angle_lists, target_lists)):
        phi = np.radians(np.asarray(angles, dtype=float))
        phi = phi.reshape(phi.shape[0], -1)  # (points, dihedrals)
        target = np.asarray(target, dtype=float)
        w = np.ones(phi.shape[0]) if weight_lists is None else np.asarray(weight_lists[p], dtype=float)
        multiples = phi[:, :, None] * n  # (points, dihedrals, periodicities)
        design = np.cos(multiples).sum(axis=1)
        if free_phases:
            design = np.hstack([design, np.sin(multiples).sum(axis=1)])
        design_mean, target_mean = w @ design / w.sum(), w @ target / w.sum()
        designs.append(design)
        centred_designs.append(design - design_mean)
        centred_targets.append(target - target_mean)
        means.append((design_mean, target_mean, phi.shape[1]))
        weights.append(w)
    w = np.concatenate(weights)
    root_w = np.sqrt(w)
    columns = centred_designs[0].shape[1]
    system = np.vstack([np.vstack(centred_designs) * root_w[:, None], math.sqrt(ridge * w.sum()) * np.eye(columns)])
    rhs = np.concatenate([np.concatenate(centred_targets) * root_w, np.zeros(columns)])
    coefficients, *_ = np.linalg.lstsq(system, rhs, rcond=None)
    cos_part = coefficients[:max_periodicity]
    sin_part = coefficients[max_periodicity:] if free_phases else np.zeros(max_periodicity)
    terms = []
    for periodicity, a, b in zip(n, cos_part, sin_part):
        k = math.hypot(a, b)
        if k <= _ZERO_K:  # a zeroed term has phase 0 whatever the sign of the rounding left in a, b
            k, phase = 0.0, 0.0
        elif free_phases:
            phase = math.degrees(math.atan2(b, a)) % 360.0
        else:
            phase = 0.0 if a >= 0 else 180.0
        terms.append(TorsionTerm(int(periodicity), phase, k))
    terms = tuple(terms)
    total_k = sum(t.k_kcal_mol for t in terms)
    constants = tuple(float(target_mean - design_mean @ coefficients) - dihedrals * total_k
                      for design_mean, target_mean, dihedrals in means)
    rmse = tuple(float(np.sqrt(np.mean((target - design @ coefficients) ** 2)))
                 for design, target in zip(centred_designs, centred_targets))
    return JointFit(terms, constants, rmse)


def profile_errors(reference_kcal_mol, model_kcal_mol):
    """(RMS, max |error|) of a model profile against a reference after the best constant shift."""
    difference = np.asarray(model_kcal_mol, dtype=float) - np.asarray(reference_kcal_mol, dtype=float)
    difference = difference - difference.mean()
    return float(np.sqrt(np.mean(difference ** 2))), float(np.max(np.abs(difference)))


def boltzmann_weights(energy_rel_kcal_mol, temperature_k):
    """exp(-E/RT) weights of points with relative energies E (kcal/mol)."""
    energy = np.asarray(energy_rel_kcal_mol, dtype=float)
    return np.exp(-(energy - energy.min()) / rt_kcal_mol(temperature_k))
