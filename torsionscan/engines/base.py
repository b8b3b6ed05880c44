"""The warm-start and retry logic shared by the library-backed engines."""

import numpy as np

from ..errors import CalculationError
from ..units import HARTREE_EV
from . import CHARGE, CONJUGATION, ENERGY, GRADIENT, MAX_ATOMIC_NUMBER, SOLVENT, SPIN

GFN_CAUTION = (
    "Semi-empirical estimate: {method} (GFN2-xTB: Bannwarth, Ehlert, Grimme, J. Chem. Theory Comput. 2019, 15, 1652; "
    "GFN1-xTB: Grimme, Bannwarth, Shushkov, J. Chem. Theory Comput. 2017, 13, 1989) "
    "torsion energies are typically within about 1 kcal/mol of high-level references and sometimes worse. "
    "Confirm decisions with higher-level calculations or experiment; this is not a safety assessment."
)


class WarmStartEngine:
    """Common body of an engine: keeps the calculator and the previous SCF solution.

    Subclasses set ``name`` and ``library_error`` (the library's exception type) and
    implement ``_new_calculator``, ``_move``, ``_read`` and ``_electronic_structure``.
    """

    name = ""
    library_error = Exception
    capabilities = frozenset({ENERGY, GRADIENT, CONJUGATION, SOLVENT, CHARGE, SPIN})
    max_atomic_number = MAX_ATOMIC_NUMBER
    # SCF and integral accuracy factor (library default 1.0). At 0.1 the gradient is converged
    # to ~1e-7 Hartree/Bohr (measured: xtb-python and tblite then agree to 5e-8 instead of 3e-6,
    # and match finite differences), which tight refinements need, at no measurable extra cost.
    accuracy = 0.1

    def __init__(self, numbers, charge, unpaired_electrons, method, solvent=None):
        self.method = method
        self.caution = GFN_CAUTION.format(method=method)
        self.solvent = solvent  # (model, engine's solvent name) or None for the gas phase
        self.evaluations = 0
        self.numbers = numbers
        self.charge = charge
        self.unpaired_electrons = unpaired_electrons
        self._calculator = None
        self._previous = None
        self._previous_coords = None

    def _new_calculator(self, coords_bohr):
        raise NotImplementedError

    def _move(self, calculator, coords_bohr):
        raise NotImplementedError

    def _read(self, result):
        """(energy_hartree, gradient) from a library result."""
        raise NotImplementedError

    def _electronic_structure(self, result):
        """(Wiberg bond-order matrix or None, orbital energies in Hartree, orbital occupations)."""
        raise NotImplementedError

    def energy_and_gradient(self, coords_bohr):
        """Energy (Hartree) and gradient (N, 3, Hartree/Bohr) at coords (N, 3) in Bohr."""
        coords_bohr = np.ascontiguousarray(coords_bohr, dtype=float)
        self.evaluations += 1
        try:
            if self._calculator is None:
                self._calculator = self._new_calculator(coords_bohr)
            else:
                self._move(self._calculator, coords_bohr)
            result = self._calculator.singlepoint(self._previous)
        except self.library_error:
            # a stale wavefunction can stall the SCF: retry once from scratch
            try:
                self._calculator = self._new_calculator(coords_bohr)
                result = self._calculator.singlepoint()
            except self.library_error as error:
                self._calculator = None
                self._previous = None
                message = " ".join(str(error).split())
                raise CalculationError(f"{self.method} SCF failed ({self.name}): {message}") from None
        self._previous = result
        self._previous_coords = coords_bohr.copy()
        energy, gradient = self._read(result)
        return float(energy), np.array(gradient, dtype=float)

    def gradients_from_reference(self, reference_bohr, structures_bohr, before_each=None):
        """Gradients (N, 3) in Hartree/Bohr at each structure (N, 3) Bohr of an iterable, every SCF
        started from the converged wavefunction at reference_bohr (itself computed from scratch): the
        values do not depend on their order or on which thread computes them (finite-difference
        Hessians). before_each(): called before each structure's SCF (a deadline check that may raise)."""
        reference_bohr = np.ascontiguousarray(reference_bohr, dtype=float)
        try:
            self.evaluations += 1
            calculator = self._new_calculator(reference_bohr)
            reference = calculator.singlepoint()
            gradients = []
            for coords in structures_bohr:
                if before_each is not None:
                    before_each()
                coords = np.ascontiguousarray(coords, dtype=float)
                self.evaluations += 1
                self._move(calculator, coords)
                try:
                    result = calculator.singlepoint(reference, copy=True)
                except self.library_error:  # the reference guess stalled this SCF: once more from scratch
                    self.evaluations += 1
                    calculator = self._new_calculator(coords)
                    result = calculator.singlepoint()
                gradients.append(np.array(self._read(result)[1], dtype=float))
        except self.library_error as error:
            message = " ".join(str(error).split())
            raise CalculationError(f"{self.method} SCF failed ({self.name}) at a displaced structure: {message}") from None
        return gradients

    def conjugation(self, coords_bohr, j, k):
        """(Wiberg bond order of atoms j-k or NaN, HOMO-LUMO gap in eV) at coords (N, 3) in Bohr.

        Reuses the last calculation when it was at exactly these coordinates (the end of an
        optimisation), otherwise runs one.
        """
        coords_bohr = np.ascontiguousarray(coords_bohr, dtype=float)
        if self._previous_coords is None or not np.array_equal(self._previous_coords, coords_bohr):
            self.energy_and_gradient(coords_bohr)
        orders, energies, occupations = self._electronic_structure(self._previous)
        energies, occupations = np.ravel(energies), np.ravel(occupations)
        occupied = occupations > 0.5
        gap = (energies[~occupied].min() - energies[occupied].max()) * HARTREE_EV
        order = float("nan") if orders is None else float(orders[j, k])
        return order, float(gap)
