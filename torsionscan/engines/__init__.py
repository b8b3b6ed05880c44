"""Engines behind one small interface: the protocol, the capability names, the registry of
GFN-xTB implementations and the solvent vocabulary.

An engine is bound to one molecule (atomic numbers, charge, unpaired electrons) and answers
``energy_and_gradient(coords_bohr) -> (energy_hartree, gradient_hartree_per_bohr)``, reusing the
previous SCF solution as the start of the next one. Two independent implementations of GFN-xTB
are registered, xtb-python (``xtb``) and ``tblite``; ``dft.py`` (PySCF) and ``model.py`` (an
analytic model potential) are engines of the same protocol made directly.
"""

import functools
from typing import Protocol

import numpy as np

from ..errors import InputError

METHODS = ("GFN2-xTB", "GFN1-xTB")
BACKENDS = ("xtb-python", "tblite")
MAX_ATOMIC_NUMBER = 86  # GFN1/GFN2-xTB are parametrised for H-Rn
SOLVATION_MODELS = ("alpb", "gbsa")
# One vocabulary of solvent names: name -> (tblite's name, xtb-python's GBSA name or None).
# ALPB (tblite only) covers all of them; GBSA (both libraries) only those with a second name.
SOLVENTS = {
    "acetone": ("acetone", "acetone"), "acetonitrile": ("acetonitrile", "acetonitrile"),
    "aniline": ("aniline", None), "benzaldehyde": ("benzaldehyde", None), "benzene": ("benzene", "benzene"),
    "carbon-disulfide": ("cs2", "cs2"), "chloroform": ("chcl3", "chcl3"), "dichloromethane": ("ch2cl2", "ch2cl2"),
    "diethyl-ether": ("ether", "ether"), "dioxane": ("dioxane", None), "dmf": ("dmf", "dmf"),
    "dmso": ("dmso", "dmso"), "ethanol": ("ethanol", None), "ethyl-acetate": ("ethylacetate", None),
    "furan": ("furane", None), "hexadecane": ("hexadecane", None), "hexane": ("hexane", "nhexane"),
    "methanol": ("methanol", "methanol"), "nitromethane": ("nitromethane", None), "octanol": ("octanol", None),
    "phenol": ("phenol", None), "thf": ("thf", "thf"), "toluene": ("toluene", "toluene"),
    "water": ("water", "h2o"), "wet-octanol": ("woctanol", None),
}


# What an engine can do; output that needs a capability the engine lacks is left out.
ENERGY, GRADIENT, CONJUGATION, SOLVENT, CHARGE, SPIN = (
    "energy", "gradient", "conjugation", "solvent", "charge", "spin")


class Engine(Protocol):
    """Energy and gradient of one molecule; atomic units throughout.

    name: the implementation (recorded with every result); method: the method it computes, as
    shown to users; capabilities: a set of the names above; max_atomic_number: element coverage;
    caution: one paragraph on what its numbers are worth; evaluations: gradients computed so far.
    An engine with CONJUGATION also offers conjugation(coords_bohr, j, k) -> (Wiberg bond order of
    j-k, HOMO-LUMO gap in eV). An engine may offer resolve_gradients_to(tolerance): the gradients
    that follow need only the precision of a relaxation converged to tolerance (Hartree/Bohr;
    None: full precision), which relaxations set and reset.
    """

    name: str
    method: str
    capabilities: frozenset
    max_atomic_number: int
    caution: str
    evaluations: int

    def energy_and_gradient(self, coords_bohr: np.ndarray) -> tuple[float, np.ndarray]:
        """Energy in Hartree and gradient (N, 3) in Hartree/Bohr at coords (N, 3) in Bohr."""


def _xtb_python():
    from .xtbpython import XtbPythonEngine

    return XtbPythonEngine


def _tblite():
    from .tblite import TbliteEngine

    return TbliteEngine


# name -> callable returning the engine class (imported only when chosen); a new GFN-xTB
# implementation plugs in here and in BACKENDS, any other engine is passed to scan(engine=...)
_REGISTRY = {"xtb-python": _xtb_python, "tblite": _tblite}


@functools.cache
def is_available(backend):
    """Whether the backend's engine module (and so its library) imports in this Python, asked
    once: importing tblite alone takes about 0.2 s, a third of a small molecule's whole scan."""
    try:
        _REGISTRY[backend]()
    except ImportError:
        return False
    return True


def available_backends():
    """Names of the engine backends importable in this Python, in order of preference."""
    return [name for name in BACKENDS if is_available(name)]


def check_electrons(numbers, charge, unpaired_electrons, method="GFN-xTB", max_atomic_number=MAX_ATOMIC_NUMBER):
    """Raise InputError if the elements are outside the method's coverage or the charge and
    unpaired-electron count cannot describe the molecule."""
    numbers = np.asarray(numbers)
    too_heavy = sorted({int(z) for z in numbers if z > max_atomic_number or z < 1})
    if too_heavy:
        raise InputError(
            f"element(s) with atomic number {too_heavy} are not covered by {method} (up to Z = {max_atomic_number})"
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


def solvation_model(solvent, model=None):
    """The implicit solvation model a run uses: None in the gas phase, else "alpb" unless model says "gbsa".

    Raises InputError for an unknown solvent or model, or a solvent the model has no parameters for.
    """
    if solvent is None:
        if model is not None:
            raise InputError("--solvation-model needs --solvent")
        return None
    if solvent not in SOLVENTS:
        raise InputError(f"unknown solvent {solvent!r}; choose one of: {', '.join(SOLVENTS)}")
    model = model or "alpb"
    if model not in SOLVATION_MODELS:
        raise InputError(f"unknown solvation model {model!r}; choose alpb or gbsa")
    if model == "gbsa" and SOLVENTS[solvent][1] is None:
        offered = ", ".join(name for name, (_, gbsa) in SOLVENTS.items() if gbsa)
        raise InputError(f"GBSA has no parameters for {solvent}; use ALPB, or a GBSA solvent: {offered}")
    return model


def resolve_backend(backend="auto", solvent=None, solvation=None):
    """The installed backend a run uses: "auto" becomes xtb-python if importable, else tblite
    (tblite for ALPB). Raises InputError when the choice cannot work here."""
    model = solvation_model(solvent, solvation)
    if backend == "auto":
        chosen = next((b for b in (["tblite"] if model == "alpb" else BACKENDS) if is_available(b)), None)
        if chosen is None:
            needed = "tblite (for ALPB solvation)" if model == "alpb" else "tblite (or xtb)"
            raise InputError(f"no suitable GFN-xTB backend is installed; pip install {needed}")
        return chosen
    if backend not in BACKENDS:
        raise InputError(f"unknown engine {backend!r}; choose auto, {' or '.join(BACKENDS)}")
    if not is_available(backend):
        raise InputError(f"engine {backend} is not installed in this Python; choose another with --engine")
    if backend == "xtb-python" and model == "alpb":
        raise InputError("xtb-python offers only GBSA solvation: use --solvation-model gbsa or --engine tblite")
    return backend


def make_engine(numbers, *, charge=0, unpaired_electrons=0, method="GFN2-xTB", backend="auto", solvent=None,
                solvation=None):
    """Create an engine for one molecule.

    backend: "auto" (xtb-python if importable, else tblite; tblite for ALPB), "xtb-python" or "tblite".
    method: "GFN2-xTB" (default) or "GFN1-xTB". solvent: a name of SOLVENTS or None (gas phase);
    solvation: "alpb" (default with a solvent; tblite only) or "gbsa".
    """
    if method not in METHODS:
        raise InputError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    check_electrons(numbers, charge, unpaired_electrons)
    model = solvation_model(solvent, solvation)
    backend = resolve_backend(backend, solvent, solvation)
    engine_class = _REGISTRY[backend]()
    engine_solvent = None
    if model:
        tblite_name, xtb_name = SOLVENTS[solvent]
        engine_solvent = (model, xtb_name if backend == "xtb-python" else tblite_name)
    return engine_class(np.asarray(numbers), charge, unpaired_electrons, method, engine_solvent)
