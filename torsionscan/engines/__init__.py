"""GFN-xTB engines behind one small interface.

An engine is bound to one molecule (atomic numbers, charge, unpaired electrons) and answers
``energy_and_gradient(coords_bohr) -> (energy_hartree, gradient_hartree_per_bohr)``, reusing the
previous SCF solution as the start of the next one. Two independent implementations of the
published methods are supported: xtb-python (``xtb``) and ``tblite``.
"""

from typing import Protocol

import numpy as np

from ..errors import InputError

METHODS = ("GFN2-xTB", "GFN1-xTB")
BACKENDS = ("xtb-python", "tblite")
MAX_ATOMIC_NUMBER = 86  # GFN1/GFN2-xTB are parametrised for H-Rn


class Engine(Protocol):
    """Energy and gradient of one molecule; atomic units throughout."""

    backend: str
    method: str
    evaluations: int

    def energy_and_gradient(self, coords_bohr: np.ndarray) -> tuple[float, np.ndarray]:
        """Energy in Hartree and gradient (N, 3) in Hartree/Bohr at coords (N, 3) in Bohr."""


def available_backends():
    """Names of the engine backends importable in this Python, in order of preference."""
    found = []
    for name, module in (("xtb-python", "xtb.interface"), ("tblite", "tblite.interface")):
        try:
            __import__(module)
        except ImportError:
            continue
        found.append(name)
    return found


def check_electrons(numbers, charge, unpaired_electrons):
    """Raise InputError if the charge and unpaired-electron count cannot describe the molecule."""
    numbers = np.asarray(numbers)
    too_heavy = sorted({int(z) for z in numbers if z > MAX_ATOMIC_NUMBER or z < 1})
    if too_heavy:
        raise InputError(
            f"element(s) with atomic number {too_heavy} are not covered by GFN-xTB (H to Rn only)"
        )
    electrons = int(numbers.sum()) - int(charge)
    if electrons < 0:
        raise InputError(f"charge {charge} leaves a negative number of electrons; check --charge")
    if unpaired_electrons < 0:
        raise InputError("--unpaired-electrons must be zero or positive")
    if (electrons - unpaired_electrons) % 2:
        raise InputError(
            f"{electrons} electrons cannot have {unpaired_electrons} unpaired; "
            "check --charge or set --unpaired-electrons (e.g. 1 for a radical)"
        )


def make_engine(numbers, *, charge=0, unpaired_electrons=0, method="GFN2-xTB", backend="auto"):
    """Create an engine for one molecule.

    backend: "auto" (xtb-python if importable, else tblite), "xtb-python" or "tblite".
    method: "GFN2-xTB" (default) or "GFN1-xTB".
    """
    if method not in METHODS:
        raise InputError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    check_electrons(numbers, charge, unpaired_electrons)
    found = available_backends()
    if backend == "auto":
        if not found:
            raise InputError("no GFN-xTB backend is installed; pip install tblite (or xtb)")
        backend = found[0]
    if backend not in BACKENDS:
        raise InputError(f"unknown engine {backend!r}; choose auto, {' or '.join(BACKENDS)}")
    if backend not in found:
        raise InputError(f"engine {backend} is not installed in this Python; choose another with --engine")
    if backend == "xtb-python":
        from .xtbpython import XtbPythonEngine as engine_class
    else:
        from .tblite import TbliteEngine as engine_class
    return engine_class(np.asarray(numbers), charge, unpaired_electrons, method)
