"""A coupled-cluster reference energy at a structure: a focal-point estimate (PySCF).

    E = E_HF(QZ) + E_corr,MP2(TZ/QZ -> basis-set limit) + [E_CCSD(T) - E_MP2](DZ)

HF in the larger basis; HF and MP2 in the two larger bases with density fitting (the JK- and
RI-fitting sets PySCF pairs with them; fitting errors cancel in relative energies); MP2 correlation extrapolated with the X^-3 form of Helgaker,
Klopper, Koch and Noga (J. Chem. Phys. 1997, 106, 9639): E_X = E_CBS + A X^-3, so from X = 3, 4,
E_CBS = (4^3 E_4 - 3^3 E_3) / (4^3 - 3^3); the higher-order correlation CCSD(T) - MP2 in the
small basis (conventional integrals); frozen core throughout. Closed
shells only (restricted HF). Energies in Hartree, coordinates in Bohr.

Cost grows steeply (CCSD(T) roughly as o^3 v^4), so requests above REFERENCE_LIMITS are refused
before any calculation; the measured time per point is in the README.
"""

import time
from dataclasses import dataclass

from .errors import CalculationError, InputError

# bases (small, medium, large): cc-pVDZ for the CCSD(T) - MP2 term, cc-pVTZ/cc-pVQZ for HF and MP2
BASES = ("cc-pvdz", "cc-pvtz", "cc-pvqz")
CARDINAL = {"cc-pvtz": 3, "cc-pvqz": 4}
# the largest molecule the tier accepts on a 2-core, 24 GiB machine (measured: README)
REFERENCE_LIMITS = {"heavy_atoms": 6, "basis_functions_large": 450}
LABEL = "focal point: HF/cc-pVQZ + MP2 corr. cc-pV(T,Q)Z X^-3 + [CCSD(T) - MP2]/cc-pVDZ, frozen core"


@dataclass(frozen=True)
class ReferenceEnergy:
    """A focal-point energy and its parts (Hartree), with the wall time of the calculation."""

    energy_hartree: float
    hf_hartree: float  # HF in the large basis
    mp2_correlation_cbs_hartree: float
    mp2_correlation_hartree: tuple[float, float]  # in the medium and large bases
    ccsd_t_minus_mp2_hartree: float  # in the small basis
    wall_time_s: float


def extrapolate_x3(energy_small, x_small, energy_large, x_large):
    """Basis-set limit of a correlation energy from two cardinal numbers, E_X = E_CBS + A X^-3."""
    return (x_large**3 * energy_large - x_small**3 * energy_small) / (x_large**3 - x_small**3)


def _pyscf():
    try:
        from pyscf import cc, gto, lib, mp, scf
    except ImportError:
        raise InputError("the coupled-cluster reference needs PySCF: pip install 'torsionscan[dft]'") from None
    return cc, gto, lib, mp, scf


def _molecule(symbols, coords_bohr, basis, charge):
    _, gto, _, _, _ = _pyscf()
    return gto.M(atom=[(s, tuple(map(float, c))) for s, c in zip(symbols, coords_bohr)], unit="Bohr",
                 basis=basis, charge=charge, spin=0, verbose=0)


def check_reference(symbols, charge=0, unpaired_electrons=0, bases=BASES):
    """Raise InputError before any calculation when the tier cannot or should not run on this molecule."""
    if unpaired_electrons:
        raise InputError("the coupled-cluster reference is for closed shells only: drop --reference for a radical")
    heavy = sum(1 for s in symbols if s != "H")
    if heavy > REFERENCE_LIMITS["heavy_atoms"]:
        raise InputError(f"the coupled-cluster reference is limited to {REFERENCE_LIMITS['heavy_atoms']} heavy atoms "
                         f"on this machine size (this molecule has {heavy}): use --refine alone")
    try:
        mol = _molecule(symbols, [(0.0, 0.0, 1.5 * n) for n in range(len(symbols))], bases[-1], charge)
    except (RuntimeError, KeyError, ValueError) as error:
        raise InputError(f"the reference bases do not cover this molecule ({error}); use --refine alone") from None
    if mol.nao_nr() > REFERENCE_LIMITS["basis_functions_large"]:
        raise InputError(f"the coupled-cluster reference needs {mol.nao_nr()} basis functions in {bases[-1]}, above "
                         f"the limit of {REFERENCE_LIMITS['basis_functions_large']}: use --refine alone")


def _hf(mol, threads, density_fit=False):
    cc, _, lib, mp, scf = _pyscf()
    if threads:
        lib.num_threads(threads)
    solver = scf.RHF(mol).density_fit() if density_fit else scf.RHF(mol)
    solver.conv_tol = 1e-10
    energy = solver.kernel()
    if not solver.converged:
        raise CalculationError(f"HF did not converge in {mol.basis}")
    return solver, float(energy)


def focal_point_energy(symbols, coords_bohr, charge=0, threads=None, bases=BASES, cardinals=None):
    """The ReferenceEnergy of one closed-shell structure (symbols, coords in Bohr)."""
    cc, _, _, mp, _ = _pyscf()
    started = time.perf_counter()
    small, medium, large = bases
    x_medium, x_large = cardinals or (CARDINAL[medium], CARDINAL[large])
    correlation = []
    for basis in (medium, large):
        solver, hf = _hf(_molecule(symbols, coords_bohr, basis, charge), threads, density_fit=True)
        correlation.append(float(mp.MP2(solver).set_frozen().density_fit().kernel()[0]))
    hf_large = hf
    solver, _ = _hf(_molecule(symbols, coords_bohr, small, charge), threads)
    mp2_small = float(mp.MP2(solver).set_frozen().kernel()[0])
    coupled = cc.CCSD(solver).set_frozen()
    coupled.conv_tol = 1e-9
    coupled.kernel()
    if not coupled.converged:
        raise CalculationError(f"CCSD did not converge in {small}")
    ccsd_t = float(coupled.e_corr + coupled.ccsd_t())
    cbs = extrapolate_x3(correlation[0], x_medium, correlation[1], x_large)
    higher = ccsd_t - mp2_small
    return ReferenceEnergy(hf_large + cbs + higher, hf_large, cbs, tuple(correlation), higher,
                           time.perf_counter() - started)
