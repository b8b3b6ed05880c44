"""The constrained optimiser on analytic problems with known answers (no chemistry involved)."""

import numpy as np
import pytest

from torsionscan import geometry
from torsionscan.optimize import Convergence, minimize, restore_constraints
from torsionscan.coordinate import DihedralConstraint


class CircleConstraint:
    """x^2 + y^2 = 1."""

    def residual(self, x):
        return x[0] ** 2 + x[1] ** 2 - 1.0

    def jacobian(self, x):
        return np.array([2 * x[0], 2 * x[1]])


def test_unconstrained_quadratic_reaches_exact_minimum():
    centre = np.array([1.0, -2.0, 0.5])
    weights = np.array([1.0, 5.0, 0.2])

    def objective(x):
        return float(np.sum(weights * (x - centre) ** 2)), 2 * weights * (x - centre)

    tight = Convergence(max_gradient=1e-9, rms_gradient=1e-9)
    result = minimize(objective, np.zeros(3), np.eye(3), convergence=tight)
    assert result.converged
    np.testing.assert_allclose(result.x, centre, atol=1e-8)


def test_nonlinear_equality_constraint_known_solution():
    # minimise |x - (2, 1)|^2 on the unit circle: the answer is (2, 1)/sqrt(5)
    target = np.array([2.0, 1.0])

    def objective(x):
        return float(np.sum((x - target) ** 2)), 2 * (x - target)

    tight = Convergence(max_gradient=1e-9, rms_gradient=1e-9)
    result = minimize(objective, np.array([0.0, 1.0]), np.eye(2), constraints=[CircleConstraint()],
                      convergence=tight)
    assert result.converged
    np.testing.assert_allclose(result.x, target / np.sqrt(5.0), atol=1e-8)
    # every evaluated point lies on the constraint, not only the last one
    assert abs(CircleConstraint().residual(result.x)) < 1e-10


def _four_atom_model():
    """Harmonic bonds and angles plus a cos(2 phi) torsion: a stand-in molecule with known physics."""
    bonds = [(0, 1), (1, 2), (2, 3)]
    angles = [(0, 1, 2), (1, 2, 3)]

    def objective(x):
        c = x.reshape(-1, 3)
        energy, grad = 0.0, np.zeros_like(c)
        for i, j in bonds:
            d = c[i] - c[j]
            r = np.linalg.norm(d)
            energy += 0.5 * (r - 2.8) ** 2
            grad[i] += (r - 2.8) * d / r
            grad[j] -= (r - 2.8) * d / r
        for i, j, k in angles:
            u, v = c[i] - c[j], c[k] - c[j]
            theta = np.arccos(np.dot(u, v) / np.linalg.norm(u) / np.linalg.norm(v))
            energy += 0.1 * (theta - np.radians(120)) ** 2
            (along,) = geometry.bond_angle_gradients(c, np.array([i]), np.array([j]), np.array([k]))
            grad[[i, j, k]] += 0.2 * (theta - np.radians(120)) * along
        phi = geometry.dihedral(c, 0, 1, 2, 3)
        energy += 0.01 * (1 - np.cos(2 * phi))
        grad += 0.02 * np.sin(2 * phi) * geometry.dihedral_gradient(c, 0, 1, 2, 3)
        return energy, grad.ravel()

    start = np.array([[1.4, 2.4, 0.3], [0.0, 0.0, 0.0], [2.8, 0.1, 0.0], [4.0, 2.3, -0.5]])
    return objective, start


@pytest.mark.parametrize("target_deg", [0.0, 35.0, 90.0, -150.0, 180.0])
def test_dihedral_held_exactly_while_the_rest_relaxes(target_deg):
    objective, start = _four_atom_model()
    constraint = DihedralConstraint((0, 1, 2, 3), np.radians(target_deg))
    tight = Convergence(max_gradient=1e-8, rms_gradient=1e-8)
    result = minimize(objective, start.ravel(), 0.5 * np.eye(12), constraints=[constraint],
                      invariant_directions=lambda x: geometry.rigid_body_directions(x.reshape(-1, 3)),
                      convergence=tight)
    assert result.converged
    c = result.x.reshape(-1, 3)
    measured = np.degrees(geometry.dihedral(c, 0, 1, 2, 3))
    assert abs((measured - target_deg + 180) % 360 - 180) < 1e-6
    # with the dihedral fixed, the relaxed bonds and angles reach their ideal values exactly
    for i, j in [(0, 1), (1, 2), (2, 3)]:
        assert np.linalg.norm(c[i] - c[j]) == pytest.approx(2.8, abs=1e-6)
    # the energy left is the torsion term alone
    assert result.energy == pytest.approx(0.01 * (1 - np.cos(2 * np.radians(target_deg))), abs=1e-10)


def test_non_convergence_is_flagged():
    objective, start = _four_atom_model()
    short = Convergence(max_gradient=1e-10, rms_gradient=1e-10, max_evaluations=3)
    result = minimize(objective, start.ravel(), np.eye(12), convergence=short)
    assert not result.converged
    assert result.evaluations == 3


def test_restore_constraints_lands_on_the_surface():
    x = restore_constraints(np.array([3.0, 4.0]), [CircleConstraint()])
    assert abs(np.hypot(*x) - 1.0) < 1e-10
