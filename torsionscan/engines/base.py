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
    implement ``_new_calculator``, ``_set_accuracy``, ``_move``, ``_read`` and ``_electronic_structure``.
    """

    name = ""
    library_error = Exception
    capabilities = frozenset({ENERGY, GRADIENT, CONJUGATION, SOLVENT, CHARGE, SPIN})
    max_atomic_number = MAX_ATOMIC_NUMBER
    # SCF and integral accuracy factor (library default 1.0), chosen by how precisely the gradients
    # must be known. At TIGHT_ACCURACY, the default, the gradient is converged to ~1e-7 Hartree/Bohr
    # (xtb-python and tblite then agree to 5e-8 instead of 3e-6, and match finite differences),
    # which refinements and finite-difference Hessians need. A relaxation converged only to
    # LOOSE_TOLERANCE_HARTREE_BOHR or more (start structures 1.5e-4, scan points 4.5e-4) runs at
    # the library default: measured on four dienes and enones with both libraries, gradients within
    # 3e-6 Hartree/Bohr and energies within 3e-9 Hartree of the tight ones, for 0.76-0.89 of the
    # time per warm-started gradient.
    TIGHT_ACCURACY, LOOSE_ACCURACY = 0.1, 1.0
    LOOSE_TOLERANCE_HARTREE_BOHR = 1.0e-4

    def __init__(self, numbers, charge, unpaired_electrons, method, solvent=None):
        self.method = method
        self.caution = GFN_CAUTION.format(method=method)
        self.solvent = solvent  # (model, engine's solvent name) or None for the gas phase
        self.evaluations = 0
        self.numbers = numbers
        self.charge = charge
        self.unpaired_electrons = unpaired_electrons
        self.accuracy = self.TIGHT_ACCURACY
        self._calculator = None
        self._previous = None
        self._previous_coords = None

    def resolve_gradients_to(self, tolerance):
        """Compute the gradients that follow as precisely as a relaxation converged to `tolerance`
        (largest gradient component, Hartree/Bohr) needs; None: as precisely as for a Hessian."""
        loose = tolerance is not None and tolerance >= self.LOOSE_TOLERANCE_HARTREE_BOHR
        accuracy = self.LOOSE_ACCURACY if loose else self.TIGHT_ACCURACY
        if accuracy != self.accuracy:
            self.accuracy = accuracy
            if self._calculator is not None:
                self._set_accuracy(self._calculator, accuracy)

    def _new_calculator(self, coords_bohr, accuracy):
        raise NotImplementedError

    def _set_accuracy(self, calculator, accuracy):
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
                self._calculator = self._new_calculator(coords_bohr, self.accuracy)
            else:
                self._move(self._calculator, coords_bohr)
            result = self._calculator.singlepoint(self._previous)
        except self.library_error:
            # a stale wavefunction can stall the SCF: retry once from scratch
            try:
                self._calculator = self._new_calculator(coords_bohr, self.accuracy)
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
        Hessians, so always at TIGHT_ACCURACY). before_each(): called before each structure's SCF (a deadline check that may raise)."""
        reference_bohr = np.ascontiguousarray(reference_bohr, dtype=float)
        try:
            self.evaluations += 1
            calculator = self._new_calculator(reference_bohr, self.TIGHT_ACCURACY)
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
                    calculator = self._new_calculator(coords, self.TIGHT_ACCURACY)
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
