"""Geometry optimisations of one molecule with one engine: the bridge between the optimiser,
which knows only vectors, and the chemistry (engine, rigid-body invariance, model Hessian)."""

import time
from dataclasses import dataclass

import numpy as np

from . import geometry
from .bonding import bonding_changes
from .errors import CalculationError, TimeLimitExceeded, TorsionScanError
from .modelhessian import lindh_hessian
from .optimize import minimize

BONDING_CHANGED = "the bonding changed during relaxation"


def bonding_change(failure):
    """The change named in a relaxation's failure reason when its bonding changed ("bond C2-C3
    broken (3.7 Å)", say); "" for any other reason."""
    prefix = f"{BONDING_CHANGED}: "
    return failure[len(prefix):] if failure.startswith(prefix) else ""


@dataclass(frozen=True)
class RelaxJob:
    """One relaxation to run: start coords (N, 3) Bohr, convergence, start Hessian (3N, 3N)
    Hartree/Bohr^2 or None for the model Hessian, constraints (optimize.Constraint objects)."""

    coords_bohr: np.ndarray
    convergence: object
    hessian: np.ndarray | None = None
    constraints: tuple = ()


class Stopped(TorsionScanError):
    """Work given up at its next gradient because the stage it belongs to was stopped."""


class Relaxer:
    """Minimisations of one molecule with one engine (Bohr, Hartree), within an optional deadline;
    given the molecule's bonds (bonding.graph_bonds), a relaxation that changes them fails; once
    the optional threading.Event `stop` is set, the next gradient raises Stopped."""

    def __init__(self, engine, numbers, deadline=None, bonds=None, stop=None):
        self.engine = engine
        self.numbers = numbers
        self.deadline = deadline  # time.monotonic() value after which no new gradient is started
        self.bonds = bonds
        self.stop = stop
        self._lowest = (np.inf, None)  # (energy, structure) of the lowest point of the current relaxation

    def check_deadline(self):
        """TimeLimitExceeded once the deadline has passed; Stopped once `stop` is set."""
        if self.stop is not None and self.stop.is_set():
            raise Stopped("stopped before this gradient")
        if self.deadline is not None and time.monotonic() > self.deadline:
            raise TimeLimitExceeded("time limit reached (checked before each gradient)")

    def _objective(self, x):
        self.check_deadline()
        energy, gradient = self.engine.energy_and_gradient(x.reshape(-1, 3))
        if energy < self._lowest[0]:  # the optimiser keeps the lowest point it reaches
            self._lowest = (energy, np.array(x, dtype=float))
        return energy, gradient.ravel()

    def _bonding_error(self, x):
        """A CalculationError naming the change when the structure x (flat, Bohr) no longer has the
        molecule's bonds, else None."""
        changes = bonding_changes(self.numbers, self.bonds, x.reshape(-1, 3)) if self.bonds is not None else []
        return CalculationError(f"{BONDING_CHANGED}: {'; '.join(changes)}") if changes else None

    def gradient(self, coords_bohr):
        """Gradient (N, 3) in Hartree/Bohr at coords (N, 3) in Bohr, within the deadline."""
        return self._objective(np.ravel(coords_bohr))[1].reshape(-1, 3)

    @staticmethod
    def _rigid(x):
        return geometry.rigid_body_directions(x.reshape(-1, 3))

    def relax(self, coords_bohr, convergence, hessian=None, constraints=()):
        """Minimise from coords (N, 3) under the given constraints (optimize.Constraint objects).
        A relaxation that fails (constraints that cannot be restored, say) after the lowest structure
        it reached lost its bonding reports the bonding change, the cause, rather than its consequence."""
        if hessian is None:
            hessian = lindh_hessian(self.numbers, coords_bohr)
        resolve = getattr(self.engine, "resolve_gradients_to", None)  # optional: engines.Engine
        if resolve is not None:
            resolve(convergence.max_gradient)
        self._lowest = (np.inf, None)
        try:
            result = minimize(
                self._objective, np.ravel(coords_bohr), hessian, constraints=list(constraints),
                invariant_directions=self._rigid, convergence=convergence,
            )
        except CalculationError as error:
            cause = None if self._lowest[1] is None else self._bonding_error(self._lowest[1])
            if cause is not None:
                raise cause from error
            raise
        finally:
            if resolve is not None:
                resolve(None)  # gradients asked for outside a relaxation are precise
        changed = self._bonding_error(result.x)
        if changed is not None:
            raise changed
        return result
