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


def fit_terms(angle_deg, target_kcal_mol, max_periodicity=DEFAULT_MAX_PERIODICITY, free_phases=False,
              weights=None, ridge=RIDGE):
    """Least-squares terms n = 1..max_periodicity for target(phi) ~ constant + sum of terms."""
    if not 1 <= max_periodicity <= MAX_PERIODICITY:
        raise ValueError(f"periodicities go from 1 to at most {MAX_PERIODICITY}, got {max_periodicity}")
    phi = np.radians(np.asarray(angle_deg, dtype=float))
    target = np.asarray(target_kcal_mol, dtype=float)
    w = np.ones_like(phi) if weights is None else np.asarray(weights, dtype=float)
    n = np.arange(1, max_periodicity + 1)
    columns = [np.ones_like(phi), *np.cos(np.outer(phi, n)).T]
    if free_phases:
        columns += list(np.sin(np.outer(phi, n)).T)
    design = np.column_stack(columns)
    root_w = np.sqrt(w)
    penalty = math.sqrt(ridge * w.sum()) * np.eye(design.shape[1])[1:]
    system = np.vstack([design * root_w[:, None], penalty])
    rhs = np.concatenate([target * root_w, np.zeros(len(penalty))])
    coefficients, *_ = np.linalg.lstsq(system, rhs, rcond=None)
    cos_part = coefficients[1:1 + max_periodicity]
    sin_part = coefficients[1 + max_periodicity:] if free_phases else np.zeros(max_periodicity)
    terms = []
    for periodicity, a, b in zip(n, cos_part, sin_part):
        k = math.hypot(a, b)
        phase = math.degrees(math.atan2(b, a)) % 360.0 if k > _ZERO_K else 0.0
        if not free_phases:
            phase = 0.0 if a >= 0 else 180.0
        terms.append(TorsionTerm(int(periodicity), phase, k if k > _ZERO_K else 0.0))
    terms = tuple(terms)
    constant = float(coefficients[0]) - sum(t.k_kcal_mol for t in terms)
    residual = target - constant - term_energy(terms, angle_deg)
    return TermFit(terms, constant, float(np.sqrt(np.mean(residual ** 2))))


def profile_errors(reference_kcal_mol, model_kcal_mol):
    """(RMS, max |error|) of a model profile against a reference after the best constant shift."""
    difference = np.asarray(model_kcal_mol, dtype=float) - np.asarray(reference_kcal_mol, dtype=float)
    difference = difference - difference.mean()
    return float(np.sqrt(np.mean(difference ** 2))), float(np.max(np.abs(difference)))


def boltzmann_weights(energy_rel_kcal_mol, temperature_k):
    """exp(-E/RT) weights of points with relative energies E (kcal/mol)."""
    energy = np.asarray(energy_rel_kcal_mol, dtype=float)
    return np.exp(-(energy - energy.min()) / rt_kcal_mol(temperature_k))
