"""GFN-xTB through the ``tblite`` library."""

from tblite.exceptions import TBLiteRuntimeError
from tblite.interface import Calculator

from .base import WarmStartEngine


class TbliteEngine(WarmStartEngine):
    """Engine backed by tblite."""

    name = "tblite"
    library_error = TBLiteRuntimeError

    def _new_calculator(self, coords_bohr, accuracy):
        calculator = Calculator(
            self.method, self.numbers, coords_bohr,
            charge=self.charge, uhf=self.unpaired_electrons,
        )
        calculator.set("verbosity", 0)
        self._set_accuracy(calculator, accuracy)
        if self.solvent:
            model, name = self.solvent
            calculator.add(f"{model}-solvation", name)
        return calculator

    def _set_accuracy(self, calculator, accuracy):
        calculator.set("accuracy", accuracy)

    def _move(self, calculator, coords_bohr):
        calculator.update(positions=coords_bohr)

    def _read(self, result):
        return result.get("energy"), result.get("gradient")

    def _electronic_structure(self, result):
        orders = result.get("bond-orders")
        # spin-resolved for open shells, where the channels are not plain Wiberg orders: not reported
        orders = orders[..., 0] if orders.shape[-1] == 1 else None
        return orders, result.get("orbital-energies"), result.get("orbital-occupations")
