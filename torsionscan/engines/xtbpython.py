"""GFN-xTB through xtb-python (the ``xtb`` package)."""

from xtb.interface import Calculator, Param, XTBException
from xtb.libxtb import VERBOSITY_MUTED
from xtb.utils import Solvent

from .base import WarmStartEngine

_PARAMS = {"GFN2-xTB": Param.GFN2xTB, "GFN1-xTB": Param.GFN1xTB}


class XtbPythonEngine(WarmStartEngine):
    """Engine backed by xtb-python."""

    name = "xtb-python"
    library_error = XTBException

    def _new_calculator(self, coords_bohr, accuracy):
        calculator = Calculator(
            _PARAMS[self.method], self.numbers, coords_bohr,
            charge=self.charge, uhf=self.unpaired_electrons,
        )
        calculator.set_verbosity(VERBOSITY_MUTED)
        self._set_accuracy(calculator, accuracy)
        if self.solvent:
            calculator.set_solvent(getattr(Solvent, self.solvent[1]))  # GBSA, the only model offered
        return calculator

    def _set_accuracy(self, calculator, accuracy):
        calculator.set_accuracy(accuracy)

    def _move(self, calculator, coords_bohr):
        calculator.update(coords_bohr)

    def _read(self, result):
        return result.get_energy(), result.get_gradient()

    def _electronic_structure(self, result):
        return result.get_bond_orders(), result.get_orbital_eigenvalues(), result.get_orbital_occupations()
