"""Density-functional theory behind the engine interface (PySCF, on the CPU).

The vocabulary of DFT levels (functional, basis, empirical dispersion; the presets) and the one
PySCF calculation the package runs: restricted or unrestricted Kohn-Sham with density fitting,
the analytic nuclear gradient, plus the D3/D4 dispersion energy and gradient. Re-scoring
(rescore.py) takes its single points from here, and DftEngine lets the package's own
constrained optimiser relax structures at a DFT level. Coordinates go to PySCF in Bohr;
energies Hartree, gradients Hartree/Bohr.
"""

import functools
import math
from dataclasses import dataclass

import numpy as np

from ..errors import CalculationError, InputError
from ..units import ANGSTROM_BOHR
from . import CHARGE, ENERGY, GRADIENT, SPIN, check_electrons

# a closed-shell molecule that exercises the basis and dispersion for H and C, checked before a scan
# (when only the settings are known): methane, Angstrom
TEST_MOLECULE = (("C", "H", "H", "H", "H"),
                 ((0.0, 0.0, 0.0), (0.629, 0.629, 0.629), (-0.629, -0.629, 0.629),
                  (-0.629, 0.629, -0.629), (0.629, -0.629, -0.629)))
SCF_TOLERANCE_HARTREE = 1e-9  # change of the energy between SCF cycles at convergence
SECOND_ORDER_CYCLES = 50  # of the second-order SCF tried once when the first-order SCF has not converged
MAX_ATOMIC_NUMBER = 86  # bound on any basis: the D4 model and the def2 sets end at Rn


@dataclass(frozen=True)
class Level:
    """A density-functional level: PySCF functional and basis, optional empirical dispersion."""

    label: str
    functional: str  # PySCF's name
    basis: str
    dispersion: str | None = None  # "d3bj", "d3zero" or "d4"
    dispersion_functional: str | None = None  # the dispersion library's name for the functional
    reference: str = ""


PRESETS = {
    "cheap": Level(
        "CAM-B3LYP-D3(BJ)/def2-SV(P)", "camb3lyp", "def2-sv(p)", "d3bj", "camb3lyp",
        "CAM-B3LYP: Yanai, Tew, Handy, Chem. Phys. Lett. 2004, 393, 51; D3(BJ): Grimme, Ehrlich, Goerigk, "
        "J. Comput. Chem. 2011, 32, 1456; def2-SV(P): Weigend, Ahlrichs, Phys. Chem. Chem. Phys. 2005, 7, 3297",
    ),
    "standard": Level(
        "CAM-B3LYP-D3(BJ)/def2-SVP", "camb3lyp", "def2-svp", "d3bj", "camb3lyp",
        "CAM-B3LYP: Yanai, Tew, Handy, Chem. Phys. Lett. 2004, 393, 51; D3(BJ): Grimme, Ehrlich, Goerigk, "
        "J. Comput. Chem. 2011, 32, 1456; def2-SVP: Weigend, Ahlrichs, Phys. Chem. Chem. Phys. 2005, 7, 3297",
    ),
    "careful": Level(
        "CAM-B3LYP-D3(BJ)/def2-TZVP", "camb3lyp", "def2-tzvp", "d3bj", "camb3lyp",
        "CAM-B3LYP: Yanai, Tew, Handy, Chem. Phys. Lett. 2004, 393, 51; D3(BJ): Grimme, Ehrlich, Goerigk, "
        "J. Comput. Chem. 2011, 32, 1456; def2-TZVP: Weigend, Ahlrichs, Phys. Chem. Chem. Phys. 2005, 7, 3297",
    ),
}
_DISPERSION_SUFFIXES = {"d3bj": "D3(BJ)", "d3zero": "D3(0)", "d4": "D4"}

DFT_CAUTION = (
    "DFT estimate at {label}. On torsions of conjugated single bonds, dispersion-corrected hybrid functionals in a "
    "polarised double-zeta basis typically come within a few tenths of a kcal/mol to about 1 kcal/mol of "
    "coupled-cluster references, and sometimes do worse (measured here on 1,3-butadiene with the CAM-B3LYP-D3(BJ)/"
    "def2-SVP preset: gauche-s-trans gap within 0.1 kcal/mol of experiment, s-trans to gauche barrier about "
    "0.5 kcal/mol high). Smaller bases and Hartree-Fock can be much worse. Confirm decisions by experiment; "
    "this is not a safety assessment."
)


def parse_level(text):
    """A Level from a preset name or "functional[-d3bj|-d3zero|-d4]/basis" (e.g. "b3lyp-d3bj/def2-svp")."""
    text = text.strip()
    if text.lower() in PRESETS:
        return PRESETS[text.lower()]
    functional, slash, basis = text.partition("/")
    if not slash or not functional or not basis:
        raise InputError(f"DFT level {text!r}: give a preset ({', '.join(PRESETS)}) or functional/basis, "
                         "e.g. b3lyp-d3bj/def2-svp")
    name, dispersion = functional.lower(), None
    for suffix in _DISPERSION_SUFFIXES:
        if name.endswith("-" + suffix):
            name, dispersion = name[: -len(suffix) - 1], suffix
    label = f"{name.upper()}{'-' + _DISPERSION_SUFFIXES[dispersion] if dispersion else ''}/{basis}"
    return Level(label, name.replace("-", ""), basis.lower(), dispersion, name)


def pyscf():
    """PySCF's (dft, gto, lib) modules; InputError naming the install command when PySCF is missing."""
    try:
        from pyscf import dft, gto, lib
    except ImportError:
        raise InputError("DFT calculations need PySCF: pip install 'torsionscan[dft]'") from None
    return dft, gto, lib


@functools.lru_cache(maxsize=None)
def _has_core_potential(basis, symbol):
    """True if `basis` comes with an effective core potential for the element (def2 beyond Kr)."""
    _, gto, _ = pyscf()
    try:
        return bool(gto.basis.load_ecp(basis, symbol))
    except (RuntimeError, KeyError):  # the basis defines no core potential for this element
        return False


@functools.lru_cache(maxsize=None)
def basis_coverage(basis):
    """The highest atomic number Z such that PySCF has `basis` for every element 1..Z (at most 86)."""
    _, gto, _ = pyscf()
    from pyscf.data.elements import ELEMENTS

    for z in range(1, MAX_ATOMIC_NUMBER + 1):
        try:
            gto.basis.load(basis, ELEMENTS[z])
        except (RuntimeError, KeyError, ValueError):
            return z - 1
    return MAX_ATOMIC_NUMBER


def molecule(symbols, coords_bohr, level, charge=0, unpaired_electrons=0):
    """The PySCF molecule (gto.Mole) of symbols at coords (N, 3) in Bohr with the level's basis."""
    _, gto, _ = pyscf()
    coords = np.asarray(coords_bohr, dtype=float).reshape(-1, 3)
    core_potentials = {s: level.basis for s in set(symbols) if _has_core_potential(level.basis, s)}
    return gto.M(atom=[(s, tuple(c)) for s, c in zip(symbols, coords)], unit="Bohr", basis=level.basis,
                 ecp=core_potentials, charge=charge, spin=unpaired_electrons, verbose=0)


def dispersion(mol, level):
    """(energy in Hartree, gradient (N, 3) in Hartree/Bohr) of the level's D3/D4 correction for a
    PySCF molecule, from the dftd3/dftd4 PySCF interfaces (their kernel() returns both)."""
    try:
        if level.dispersion == "d4":
            from dftd4.pyscf import DFTD4Dispersion

            energy, gradient = DFTD4Dispersion(mol, xc=level.dispersion_functional).kernel()[:2]
        else:
            from dftd3.pyscf import DFTD3Dispersion

            energy, gradient = DFTD3Dispersion(mol, xc=level.dispersion_functional,
                                               version=level.dispersion).kernel()[:2]
    except ImportError:
        package = "dftd4" if level.dispersion == "d4" else "dftd3"
        raise InputError(f"{level.label} needs the {package} package: pip install 'torsionscan[dft]'") from None
    except Exception as error:  # the libraries raise plain errors for unknown functionals
        raise InputError(f"{level.label}: no {level.dispersion} parameters ({error}); choose another level") from None
    return float(energy), np.asarray(gradient, dtype=float).reshape(-1, 3)


def check_level(level, symbols=None, charge=0, unpaired_electrons=0, *, coords_angstrom=None):
    """Raise InputError now (not after hours of single points) if PySCF, the functional, the basis
    (for these elements), the charge and spin or the dispersion cannot be used. symbols None: the
    closed-shell TEST_MOLECULE; without coordinates the atoms are put on a line 1.5 Angstrom
    apart (the check builds the basis and the dispersion, it runs no SCF)."""
    dft, _, _ = pyscf()
    if symbols is None:
        symbols, coords_angstrom, charge, unpaired_electrons = *TEST_MOLECULE, 0, 0
    if coords_angstrom is None:
        coords_angstrom = [(0.0, 0.0, 1.5 * n) for n in range(len(symbols))]
    try:
        mol = molecule(symbols, np.asarray(coords_angstrom, dtype=float) * ANGSTROM_BOHR, level, charge,
                       unpaired_electrons)
        dft.libxc.parse_xc(level.functional)
    except (RuntimeError, KeyError, ValueError, NotImplementedError) as error:
        reason = " ".join(str(error).split())
        raise InputError(f"level {level.label}: PySCF cannot use it ({reason}); check the functional and basis names")
    if level.dispersion:
        dispersion(mol, level)


class DftEngine:
    """PySCF Kohn-Sham energies and analytic gradients of one molecule at one Level (or its text).

    symbols: element symbols in atom order; unpaired_electrons: 2S (UKS when > 0, RKS otherwise);
    threads: OpenMP threads for PySCF (None: leave the process setting); reuse_guess: start each
    SCF from the previous converged density when no atom moved more than REUSE_GUESS_BOHR (else
    from PySCF's superposition-of-atoms guess). scf_cycles counts the SCF cycles run so far.
    """

    name = "pyscf"
    capabilities = frozenset({ENERGY, GRADIENT, CHARGE, SPIN})
    max_scf_cycles = 50  # of the first-order (DIIS) SCF before the second-order retry
    # Measured (benchmarks/dft_benchmark.py: butadiene at CAM-B3LYP-D3(BJ)/def2-SVP, four constrained
    # relaxations, optimiser steps of 0.01-0.16 Bohr): the previous density cuts the SCF from 9.0 to
    # 7.35 cycles and the CPU time per gradient by 9%, with the same gradients and energies (1e-8 Eh);
    # for single points 15 degrees apart (outer atoms ~1 Bohr away) an earlier check found no gain.
    REUSE_GUESS_BOHR = 0.5

    def __init__(self, symbols, level, charge=0, unpaired_electrons=0, threads=None, *, reuse_guess=True):
        self.level = parse_level(level) if isinstance(level, str) else level
        self.method = self.level.label
        self.caution = DFT_CAUTION.format(label=self.level.label)
        self.symbols = tuple(symbols)
        self.charge = int(charge)
        self.unpaired_electrons = int(unpaired_electrons)
        self.threads = threads
        _, gto, _ = pyscf()
        check_electrons([gto.charge(s) for s in self.symbols], self.charge, self.unpaired_electrons,
                        method=self.level.label, max_atomic_number=MAX_ATOMIC_NUMBER)
        check_level(self.level, self.symbols, self.charge, self.unpaired_electrons)  # names, basis per element
        self.max_atomic_number = basis_coverage(self.level.basis)
        self.reuse_guess = reuse_guess
        self.evaluations = 0
        self.scf_cycles = 0
        self._previous = None  # (coords in Bohr, converged density matrix) of the last SCF

    def _guess(self, coords_bohr):
        """The previous SCF density if every atom is within REUSE_GUESS_BOHR of its position then, else None."""
        if not self.reuse_guess or self._previous is None:
            return None
        coords, density = self._previous
        moved = np.linalg.norm(coords_bohr - coords, axis=1).max() if coords.shape == coords_bohr.shape else np.inf
        return density if moved <= self.REUSE_GUESS_BOHR else None

    def _solve(self, coords_bohr):
        """The converged SCF object and molecule at coords (N, 3) in Bohr; CalculationError if the
        first-order SCF and then a second-order SCF started where it stopped both fail."""
        dft, _, lib = pyscf()
        coords_bohr = np.asarray(coords_bohr, dtype=float).reshape(-1, 3)
        guess = self._guess(coords_bohr)
        self._previous = None
        if self.threads:
            lib.num_threads(self.threads)
        mol = molecule(self.symbols, coords_bohr, self.level, self.charge, self.unpaired_electrons)
        solver = (dft.UKS if self.unpaired_electrons else dft.RKS)(mol).density_fit()
        solver.xc = self.level.functional
        solver.conv_tol = SCF_TOLERANCE_HARTREE
        solver.max_cycle = self.max_scf_cycles
        energy = solver.kernel(guess)
        self.scf_cycles += solver.cycles
        if not solver.converged:
            second = solver.newton()  # second-order SCF from where the first stopped
            second.max_cycle = SECOND_ORDER_CYCLES
            energy = second.kernel(solver.make_rdm1())
            self.scf_cycles += second.cycles
            solver = second.undo_soscf()
        if not solver.converged or not math.isfinite(energy):
            raise CalculationError(f"{self.level.label} SCF did not converge")
        if self.reuse_guess:
            self._previous = (coords_bohr.copy(), solver.make_rdm1())
        return solver, mol

    def energy(self, coords_bohr):
        """Energy in Hartree at coords (N, 3) in Bohr, dispersion included (no gradient)."""
        solver, mol = self._solve(coords_bohr)
        return float(solver.e_tot) + (dispersion(mol, self.level)[0] if self.level.dispersion else 0.0)

    def energy_and_gradient(self, coords_bohr):
        """Energy in Hartree and gradient (N, 3) in Hartree/Bohr at coords (N, 3) in Bohr."""
        dft, _, _ = pyscf()
        self.evaluations += 1
        solver, mol = self._solve(coords_bohr)
        energy = float(solver.e_tot)
        gradients = solver.nuc_grad_method()
        # the grid moves with the atoms: with its response the gradient is the exact derivative of the
        # energy (without it, 1.7e-5 Hartree/Bohr off for B3LYP on formaldehyde); none for Hartree-Fock
        gradients.grid_response = bool(dft.libxc.parse_xc(self.level.functional)[1])
        gradient = np.asarray(gradients.kernel(), dtype=float).reshape(-1, 3)
        if self.level.dispersion:
            dispersion_energy, dispersion_gradient = dispersion(mol, self.level)
            energy += dispersion_energy
            gradient = gradient + dispersion_gradient
        if not np.isfinite(gradient).all():
            raise CalculationError(f"{self.level.label} gradient is not finite")
        return energy, gradient
