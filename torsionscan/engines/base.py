"""The warm-start and retry logic shared by the library-backed engines."""

import numpy as np

from ..errors import CalculationError


class WarmStartEngine:
    """Common body of an engine: keeps the calculator and the previous SCF solution.

    Subclasses set ``backend`` and ``library_error`` (the library's exception type) and
    implement ``_new_calculator``, ``_move`` and ``_read``.
    """

    backend = ""
    library_error = Exception
    # SCF and integral accuracy factor (library default 1.0). At 0.1 the gradient is converged
    # to ~1e-7 Hartree/Bohr (measured: xtb-python and tblite then agree to 5e-8 instead of 3e-6,
    # and match finite differences), which tight refinements need, at no measurable extra cost.
    accuracy = 0.1

    def __init__(self, numbers, charge, unpaired_electrons, method):
        self.method = method
        self.evaluations = 0
        self.numbers = numbers
        self.charge = charge
        self.unpaired_electrons = unpaired_electrons
        self._calculator = None
        self._previous = None

    def _new_calculator(self, coords_bohr):
        raise NotImplementedError

    def _move(self, calculator, coords_bohr):
        raise NotImplementedError

    def _read(self, result):
        """(energy_hartree, gradient) from a library result."""
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
                raise CalculationError(f"{self.method} SCF failed ({self.backend}): {message}") from None
        self._previous = result
        energy, gradient = self._read(result)
        return float(energy), np.array(gradient, dtype=float)
