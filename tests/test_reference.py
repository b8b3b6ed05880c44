"""The coupled-cluster reference tier: the focal-point arithmetic, PySCF plumbing on a small
molecule in small bases, and refusals before any calculation."""

import numpy as np
import pytest

from torsionscan.errors import InputError
from torsionscan.reference import check_reference, extrapolate_x3, focal_point_energy

pytestmark = pytest.mark.dft

# water near its equilibrium structure, Bohr
WATER = (("O", "H", "H"), np.array([[0.0, 0.0, 0.2217], [0.0, 1.4309, -0.8867], [0.0, -1.4309, -0.8867]]))


def test_the_x3_extrapolation_follows_its_definition():
    # E_X = E_CBS + A X^-3 with E_CBS = -1.0, A = 2.0 (hand arithmetic): E_3 = -1 + 2/27, E_4 = -1 + 2/64
    assert extrapolate_x3(-1.0 + 2 / 27, 3, -1.0 + 2 / 64, 4) == pytest.approx(-1.0, abs=1e-14)


def test_one_basis_throughout_gives_plain_ccsd_t():
    # with the same basis in all three places the focal point collapses to CCSD(T) in that basis
    # (exactly, up to the density-fitting error of HF and MP2 in the two larger "bases": measured
    # 4e-6 Hartree in HF and 3e-5 in the total for water in 6-31G; 5e-5 allowed)
    from pyscf import cc, gto, scf

    symbols, coords = WATER
    same = focal_point_energy(symbols, coords, bases=("6-31g", "6-31g", "6-31g"), cardinals=(3, 4))
    mol = gto.M(atom=[(s, tuple(c)) for s, c in zip(symbols, coords)], unit="Bohr", basis="6-31g", verbose=0)
    hf = scf.RHF(mol).run()
    coupled = cc.CCSD(hf).set_frozen().run()
    direct = hf.e_tot + coupled.e_corr + coupled.ccsd_t()
    assert same.energy_hartree == pytest.approx(direct, abs=5e-5)
    assert same.hf_hartree == pytest.approx(hf.e_tot, abs=2e-5)


def test_each_part_equals_an_independent_pyscf_calculation():
    # every ingredient recomputed directly with PySCF's own classes, then combined by hand
    from pyscf import cc, gto, mp, scf

    symbols, coords = WATER
    reference = focal_point_energy(symbols, coords, bases=("sto-3g", "6-31g", "6-31g*"), cardinals=(3, 4))

    def molecule(basis):
        return gto.M(atom=[(s, tuple(c)) for s, c in zip(symbols, coords)], unit="Bohr", basis=basis, verbose=0)

    correlation = []
    for basis in ("6-31g", "6-31g*"):
        hf = scf.RHF(molecule(basis)).density_fit().run(conv_tol=1e-10)
        correlation.append(mp.MP2(hf).set_frozen().density_fit().run().e_corr)
    small = scf.RHF(molecule("sto-3g")).run(conv_tol=1e-10)
    coupled = cc.CCSD(small).set_frozen().run(conv_tol=1e-9)  # the tolerances the module uses
    higher = coupled.e_corr + coupled.ccsd_t() - mp.MP2(small).set_frozen().run().e_corr
    cbs = (4**3 * correlation[1] - 3**3 * correlation[0]) / (4**3 - 3**3)
    assert reference.mp2_correlation_hartree == pytest.approx(tuple(correlation), abs=1e-8)
    assert reference.ccsd_t_minus_mp2_hartree == pytest.approx(higher, abs=1e-8)
    assert reference.energy_hartree == pytest.approx(hf.e_tot + cbs + higher, abs=1e-8)
    assert correlation[1] < correlation[0] < 0  # polarisation functions add correlation


def test_requests_the_tier_cannot_serve_are_refused_before_any_calculation():
    with pytest.raises(InputError, match="closed shells only"):
        check_reference(("C", "H", "H", "H"), unpaired_electrons=1)
    with pytest.raises(InputError, match="heavy atoms"):
        check_reference(("C",) * 12 + ("H",) * 10)
    check_reference(("C",) * 4 + ("H",) * 6)  # butadiene is within the limits
