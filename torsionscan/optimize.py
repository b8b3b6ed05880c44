"""Constrained quasi-Newton minimisation: knows vectors, an objective and constraints, nothing else.

The method: every evaluated point satisfies the equality constraints exactly (a Newton
projection back onto the constraint surface after each step), steps are taken in the
subspace orthogonal to the constraint normals and to directions along which the objective is
invariant (for a molecule: rigid translations and rotations), the step is a Newton step on a
quasi-Newton Hessian of the Lagrangian (Powell-damped BFGS) inside an adaptive trust radius.
Starting from a good model Hessian, or from the final Hessian of a neighbouring problem, this
converges in a handful of objective evaluations.
"""

from dataclasses import dataclass
from typing import Callable, Protocol, Sequence

import numpy as np

from .errors import CalculationError
from .geometry import orthonormal_rows


class Constraint(Protocol):
    """An equality constraint c(x) = 0 on a flat coordinate vector."""

    def residual(self, x: np.ndarray) -> float:
        """Current value minus target (for angles: wrapped to (-pi, pi])."""

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        """dc/dx, same shape as x."""


@dataclass(frozen=True)
class Convergence:
    """When a minimisation counts as converged, in the objective's units (Hartree, Bohr).

    The gradient tested is the one left after removing its components along constraint
    normals and invariant directions. Defaults are the common practice of quantum-chemistry
    geometry optimisers (max 4.5e-4, RMS 3.0e-4 Hartree/Bohr).
    """

    max_gradient: float = 4.5e-4
    rms_gradient: float = 3.0e-4
    max_evaluations: int = 150


@dataclass(frozen=True)
class OptimizationResult:
    """Outcome of one minimisation; `converged` False means the energy must not be trusted."""

    x: np.ndarray
    energy: float
    gradient: np.ndarray
    hessian: np.ndarray
    converged: bool
    evaluations: int
    max_gradient: float
    rms_gradient: float


_CONSTRAINT_TOLERANCE = 1e-10  # radians (or whatever unit the constraint uses)
_MIN_CURVATURE = 1e-3  # floor on |eigenvalue| of the model Hessian in the step
_MAX_TRUST = 0.5
_MIN_STEP = 1e-8


def restore_constraints(x, constraints, max_iterations=50):
    """Project x back onto c(x) = 0 by Gauss-Newton steps along the constraint normals."""
    x = np.array(x, dtype=float)
    for _ in range(max_iterations):
        residuals = np.array([c.residual(x) for c in constraints])
        if len(residuals) == 0 or np.abs(residuals).max() < _CONSTRAINT_TOLERANCE:
            return x
        jac = _jacobian(constraints, x)
        x = x - jac.T @ np.linalg.solve(jac @ jac.T, residuals)
    raise CalculationError("could not satisfy the constraints; the geometry may be degenerate")


def _jacobian(constraints, x):
    """Constraint normals as rows (m, n)."""
    return np.array([c.jacobian(x) for c in constraints]).reshape(len(constraints), len(x))


def _lagrangian_gradient(gradient, jacobian, multipliers):
    return gradient - jacobian.T @ multipliers if len(multipliers) else gradient


def _bfgs_update(hessian, step, change):
    """Powell-damped BFGS update of a Hessian with step s and gradient change y."""
    hs = hessian @ step
    shs = float(step @ hs)
    sy = float(step @ change)
    if shs <= 1e-12:
        return hessian
    if sy < 0.2 * shs:
        theta = 0.8 * shs / (shs - sy)
        change = theta * change + (1.0 - theta) * hs
        sy = float(step @ change)
    return hessian + np.outer(change, change) / sy - np.outer(hs, hs) / shs


def minimize(
    objective: Callable[[np.ndarray], tuple],
    x0: np.ndarray,
    hessian: np.ndarray,
    *,
    constraints: Sequence[Constraint] = (),
    invariant_directions: Callable[[np.ndarray], np.ndarray] | None = None,
    convergence: Convergence = Convergence(),
    trust_radius: float = 0.3,
) -> OptimizationResult:
    """Minimise objective(x) -> (value, gradient) from x0 subject to constraints.

    x0 is flat (n,); hessian (n, n) is the starting curvature model; invariant_directions(x)
    returns rows (k, n) along which the objective does not change. Each call of `objective`
    counts as one evaluation. Returns the result at the lowest point reached.
    """
    constraints = list(constraints)
    x = restore_constraints(x0, constraints)
    energy, gradient = objective(x)
    evaluations = 1
    hessian = np.array(hessian, dtype=float)

    def projected_gradient_and_basis(x, gradient):
        rows = _jacobian(constraints, x)
        if invariant_directions is not None:
            rows = np.vstack([rows, invariant_directions(x)])
        basis = orthonormal_rows(rows)
        projected = gradient - basis.T @ (basis @ gradient) if len(basis) else gradient
        return projected, basis

    while True:
        projected, basis = projected_gradient_and_basis(x, gradient)
        max_g = float(np.abs(projected).max())
        rms_g = float(np.sqrt(np.mean(projected**2)))
        converged = max_g <= convergence.max_gradient and rms_g <= convergence.rms_gradient
        if converged or evaluations >= convergence.max_evaluations:
            break
        # orthonormal basis of the free subspace
        if len(basis):
            q_full, _ = np.linalg.qr(basis.T, mode="complete")
            free = q_full[:, len(basis):]
        else:
            free = np.eye(len(x))
        reduced_h = free.T @ hessian @ free
        reduced_g = free.T @ gradient
        eigenvalues, eigenvectors = np.linalg.eigh(0.5 * (reduced_h + reduced_h.T))
        curvature = np.maximum(np.abs(eigenvalues), _MIN_CURVATURE)
        reduced_step = -eigenvectors @ ((eigenvectors.T @ reduced_g) / curvature)
        length = np.linalg.norm(reduced_step)
        if length > trust_radius:
            reduced_step *= trust_radius / length
            length = trust_radius
        if length < _MIN_STEP:
            break
        predicted = float(reduced_g @ reduced_step + 0.5 * reduced_step @ reduced_h @ reduced_step)
        x_new = restore_constraints(x + free @ reduced_step, constraints)
        energy_new, gradient_new = objective(x_new)
        evaluations += 1

        jac_new = _jacobian(constraints, x_new)
        jac_old = _jacobian(constraints, x)
        multipliers = (
            np.linalg.lstsq(jac_new.T, gradient_new, rcond=None)[0] if constraints else np.zeros(0)
        )
        change = _lagrangian_gradient(gradient_new, jac_new, multipliers) - _lagrangian_gradient(
            gradient, jac_old, multipliers
        )
        hessian = _bfgs_update(hessian, x_new - x, change)

        actual = energy_new - energy
        ratio = actual / predicted if predicted < 0 else -1.0
        if actual > 1e-6:  # energy went up noticeably: stay, shrink the trust region
            trust_radius = 0.25 * length
            continue
        if ratio > 0.75 and length > 0.8 * trust_radius:
            trust_radius = min(2.0 * trust_radius, _MAX_TRUST)
        elif ratio < 0.25:
            trust_radius = max(0.5 * length, 1e-3)
        x, energy, gradient = x_new, energy_new, gradient_new

    return OptimizationResult(
        x=x, energy=float(energy), gradient=gradient, hessian=hessian, converged=converged,
        evaluations=evaluations, max_gradient=max_g, rms_gradient=rms_g,
    )
