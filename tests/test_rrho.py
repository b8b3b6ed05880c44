"""Harmonic frequencies and ideal-gas RRHO thermochemistry (torsionscan.rrho)."""

import math
from dataclasses import replace

import numpy as np
import pytest

from torsionscan.geometry import dihedral_gradient, rotation_matrix
from torsionscan.rrho import (
    conformer_populations,
    harmonic_frequencies,
    quasi_rrho_weight,
    rrho_thermo,
)

# Constants written out independently of the module (CODATA 2018)
H = 6.62607015e-34  # J s
C = 299792458.0  # m/s
KB = 1.380649e-23  # J/K
NA = 6.02214076e23  # 1/mol
R = 8.314462618  # J/(mol K)
AMU = 1.66053906660e-27  # kg
HARTREE = 4.3597447222071e-18  # J
BOHR = 0.529177210903e-10  # m
ANGSTROM_IN_BOHR = 1.0 / 0.529177210903
CAL = 4.184  # J

T = 298.15


def wavenumber_cm1(force_constant_hartree_bohr2, reduced_mass_amu):
    """nu = (1 / 2 pi c) sqrt(k / mu), in cm^-1."""
    k_si = force_constant_hartree_bohr2 * HARTREE / BOHR**2
    return math.sqrt(k_si / (reduced_mass_amu * AMU)) / (2.0 * math.pi * C) / 100.0


def pair_spring_hessian(coords, pairs, constants):
    """Cartesian Hessian (Hartree/Bohr^2) of harmonic springs between atom pairs, at rest length."""
    n = len(coords)
    hessian = np.zeros((3 * n, 3 * n))
    for (i, j), k in zip(pairs, constants):
        u = coords[j] - coords[i]
        u /= np.linalg.norm(u)
        block = k * np.outer(u, u)
        for a, b, sign in ((i, i, 1), (j, j, 1), (i, j, -1), (j, i, -1)):
            hessian[3 * a:3 * a + 3, 3 * b:3 * b + 3] += sign * block
    return hessian


def random_rotation(seed):
    rng = np.random.default_rng(seed)
    return rotation_matrix(rng.normal(size=3), rng.uniform(0.5, 3.0))


WATER_MASSES = np.array([15.994915, 1.007825, 1.007825])


def water_coords(bond_angstrom=0.9578, angle_deg=104.48):
    d = bond_angstrom * ANGSTROM_IN_BOHR
    half = math.radians(angle_deg) / 2.0
    return np.array([[0.0, 0.0, 0.0],
                     [d * math.sin(half), d * math.cos(half), 0.0],
                     [-d * math.sin(half), d * math.cos(half), 0.0]])


def water_hessian(coords):
    return pair_spring_hessian(coords, [(0, 1), (0, 2), (1, 2)], [0.50, 0.50, 0.05])


def mass_weighted_rigid_body(masses, coords):
    """Columns: mass-weighted translations and rotations about the centre of mass."""
    sqrt_m = np.sqrt(masses)[:, None]
    centred = coords - masses @ coords / masses.sum()
    cols = [(sqrt_m * np.tile(e, (len(masses), 1))).ravel() for e in np.eye(3)]
    cols += [(sqrt_m * np.cross(e, centred)).ravel() for e in np.eye(3)]
    return np.array(cols).T


# ---------------------------------------------------------------- frequencies


def test_diatomic_spring_gives_textbook_frequency():
    masses = np.array([1.007825, 18.998403])
    coords = np.array([[0.1, -0.2, 0.3], [0.1, -0.2, 0.3 + 1.733]])
    k = 0.62
    freqs, modes = harmonic_frequencies(pair_spring_hessian(coords, [(0, 1)], [k]), masses, coords)
    mu = masses[0] * masses[1] / masses.sum()
    assert freqs.shape == (1,) and modes.shape == (1, 6)
    assert freqs[0] == pytest.approx(wavenumber_cm1(k, mu), rel=1e-10)
    mode = modes[0].reshape(2, 3)
    assert np.linalg.norm(modes[0]) == pytest.approx(1.0)
    assert np.allclose(masses @ mode, 0.0, atol=1e-12)  # centre of mass fixed
    assert np.allclose(mode[:, :2], 0.0, atol=1e-12)  # along the bond


def test_negative_curvature_gives_negative_frequency():
    masses = np.array([12.0, 15.994915])
    coords = np.array([[0.0, 0.0, 0.0], [2.1, 0.0, 0.0]])
    freqs, _ = harmonic_frequencies(pair_spring_hessian(coords, [(0, 1)], [-0.3]), masses, coords)
    mu = 12.0 * 15.994915 / (12.0 + 15.994915)
    assert freqs[0] == pytest.approx(-wavenumber_cm1(0.3, mu), rel=1e-10)


def test_nonlinear_triatomic_has_three_modes_independent_of_orientation():
    coords = water_coords()
    freqs, modes = harmonic_frequencies(water_hessian(coords), WATER_MASSES, coords)
    assert freqs.shape == (3,) and modes.shape == (3, 9)
    assert np.all(np.diff(freqs) >= 0) and np.all(freqs > 100.0)
    rotated = coords @ random_rotation(1).T + np.array([3.0, -1.0, 2.0])
    freqs_rotated, _ = harmonic_frequencies(water_hessian(rotated), WATER_MASSES, rotated)
    assert np.allclose(freqs_rotated, freqs, rtol=1e-10)
    # modes carry no translation or rotation (Eckart conditions, Cartesian form)
    centred = coords - WATER_MASSES @ coords / WATER_MASSES.sum()
    for mode in modes.reshape(3, 3, 3):
        assert np.allclose(WATER_MASSES @ mode, 0.0, atol=1e-12)
        assert np.allclose((WATER_MASSES[:, None] * np.cross(centred, mode)).sum(axis=0), 0.0, atol=1e-12)


def test_rigid_body_contamination_is_projected_out():
    coords = water_coords()
    hessian = water_hessian(coords)
    rng = np.random.default_rng(7)
    mix = rng.normal(size=(6, 6))
    b = mass_weighted_rigid_body(WATER_MASSES, coords)
    sqrt_m = np.repeat(np.sqrt(WATER_MASSES), 3)
    contamination = sqrt_m[:, None] * (b @ (mix + mix.T) @ b.T) * sqrt_m[None, :]
    clean, _ = harmonic_frequencies(hessian, WATER_MASSES, coords)
    dirty, _ = harmonic_frequencies(hessian + 0.1 * contamination, WATER_MASSES, coords)
    assert np.allclose(dirty, clean, rtol=1e-9)
    # the contamination is not small: unprojected, the rigid-body eigenvalues move far from zero
    raw = np.linalg.eigvalsh((hessian + 0.1 * contamination) / np.outer(sqrt_m, sqrt_m))
    assert np.sort(np.abs(raw))[2] > 1e-3


def test_asymmetric_hessian_is_symmetrised():
    coords = water_coords()
    hessian = water_hessian(coords)
    skew = np.random.default_rng(3).normal(size=hessian.shape)
    skew = 0.01 * (skew - skew.T)
    assert np.allclose(harmonic_frequencies(hessian + skew, WATER_MASSES, coords)[0],
                       harmonic_frequencies(hessian, WATER_MASSES, coords)[0], rtol=1e-12)


def co2_hessian(coords, k_stretch, k_bend):
    """C-O springs plus a bend term 1/2 kb s^2, s = C displacement off the O-O midpoint, both perpendiculars."""
    hessian = pair_spring_hessian(coords, [(0, 1), (0, 2)], [k_stretch, k_stretch])
    axis = coords[2] - coords[1]
    axis /= np.linalg.norm(axis)
    perps = np.linalg.svd(axis[None, :])[2][1:]
    for p in perps:
        a = np.concatenate([p, -0.5 * p, -0.5 * p])
        hessian += k_bend * np.outer(a, a)
    return hessian


@pytest.mark.parametrize("seed", [None, 4])
def test_linear_triatomic_has_3n_minus_5_modes(seed):
    m_c, m_o = 12.0, 15.994915
    masses = np.array([m_c, m_o, m_o])
    d = 1.16 * ANGSTROM_IN_BOHR
    coords = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, -d], [0.0, 0.0, d]])
    if seed is not None:  # axis along a general direction, not a Cartesian one
        coords = coords @ random_rotation(seed).T + 0.7
    k, kb = 1.0, 0.08
    freqs, modes = harmonic_frequencies(co2_hessian(coords, k, kb), masses, coords)
    assert freqs.shape == (4,) and modes.shape == (4, 9)
    # textbook linear symmetric XY2 (e.g. Wilson, Decius & Cross): bend, symmetric, antisymmetric
    bend = wavenumber_cm1(kb, 1.0 / (1.0 / m_c + 1.0 / (2.0 * m_o)))
    symmetric = wavenumber_cm1(k, m_o)
    antisymmetric = wavenumber_cm1(k, 1.0 / ((m_c + 2.0 * m_o) / (m_o * m_c)))
    assert np.allclose(freqs, sorted([bend, bend, symmetric, antisymmetric]), rtol=1e-9)


def four_atom():
    """A skewed four-atom chain held rigid by springs between all six pairs."""
    coords = np.array([[1.2, 1.0, 0.3], [0.0, 0.0, 0.0], [2.8, 0.0, 0.0], [3.6, 0.9, -1.1]])
    masses = np.array([1.007825, 15.994915, 15.994915, 1.007825])
    pairs = [(0, 1), (1, 2), (2, 3), (0, 2), (1, 3), (0, 3)]
    hessian = pair_spring_hessian(coords, pairs, [0.5, 0.3, 0.5, 0.1, 0.1, 0.02])
    return masses, coords, hessian


def test_extra_direction_removes_one_mode_and_freezes_the_torsion():
    masses, coords, hessian = four_atom()
    free, _ = harmonic_frequencies(hessian, masses, coords)
    g = dihedral_gradient(coords, 0, 1, 2, 3)
    fixed, modes = harmonic_frequencies(hessian, masses, coords, extra_directions=[g])
    assert free.shape == (6,) and fixed.shape == (5,) and modes.shape == (5, 12)
    # displacements along the modes leave the torsion unchanged to first order
    assert np.allclose(modes @ g.ravel(), 0.0, atol=1e-12)
    # a compression of a symmetric matrix interlaces its eigenvalues (Cauchy)
    free_sq, fixed_sq = np.sign(free) * free**2, np.sign(fixed) * fixed**2
    assert np.all(fixed_sq >= free_sq[:-1] * (1 - 1e-9))
    assert np.all(fixed_sq <= free_sq[1:] * (1 + 1e-9))
    # a single (N, 3) array, and a repeated (dependent) direction, give the same result
    assert np.allclose(harmonic_frequencies(hessian, masses, coords, extra_directions=g)[0], fixed)
    twice, _ = harmonic_frequencies(hessian, masses, coords, extra_directions=[g, 3.0 * g])
    assert np.allclose(twice, fixed)


def test_shape_errors():
    masses, coords, hessian = four_atom()
    with pytest.raises(ValueError):
        harmonic_frequencies(hessian[:9, :9], masses, coords)
    with pytest.raises(ValueError):
        harmonic_frequencies(hessian, masses[:3], coords)


# ---------------------------------------------------------------- thermochemistry


def test_argon_translational_entropy_matches_standard_value():
    thermo = rrho_thermo([], [39.948], [[0.0, 0.0, 0.0]], T, pressure_pa=1e5)
    # S°(Ar, g, 298.15 K, 1 bar) = 154.846 J/(mol K): NIST-JANAF Thermochemical Tables (from memory)
    assert thermo.entropy_cal_mol_k * CAL == pytest.approx(154.846, abs=0.1)
    assert thermo.rotational_entropy_cal_mol_k == 0.0 and thermo.vibrational_entropy_cal_mol_k == 0.0
    assert thermo.enthalpy_correction_kcal_mol == pytest.approx(2.5 * R * T / 4184.0, rel=1e-9)
    # Sackur-Tetrode written out (McQuarrie & Simon, Molecular Thermodynamics, 1999)
    m = 39.948 * AMU
    s = R * (math.log((2 * math.pi * m * KB * T / H**2) ** 1.5 * KB * T / 1e5) + 2.5)
    assert thermo.translational_entropy_cal_mol_k * CAL == pytest.approx(s, rel=1e-9)


def test_pressure_and_symmetry_number_shift_entropy():
    coords = water_coords()
    base = rrho_thermo([1600.0], WATER_MASSES, coords, T, pressure_pa=1e5)
    atm = rrho_thermo([1600.0], WATER_MASSES, coords, T, pressure_pa=101325.0)
    sym = rrho_thermo([1600.0], WATER_MASSES, coords, T, pressure_pa=1e5, symmetry_number=2)
    assert (base.entropy_cal_mol_k - atm.entropy_cal_mol_k) * CAL == pytest.approx(R * math.log(1.01325))
    assert (base.entropy_cal_mol_k - sym.entropy_cal_mol_k) * CAL == pytest.approx(R * math.log(2.0))


def test_single_harmonic_oscillator_closed_form():
    nu = 1000.0
    thermo = rrho_thermo([nu], [1.0, 1.0], [[0, 0, 0], [0, 0, 1.0]], T, quasi_harmonic_cutoff_cm1=0)
    # McQuarrie, Statistical Mechanics: E_0 = h c nu / 2, E_th = R T x/(e^x - 1),
    # S/R = x/(e^x - 1) - ln(1 - e^-x), x = h c nu / kT
    x = H * C * nu * 100.0 / (KB * T)
    zpe = 0.5 * NA * H * C * nu * 100.0 / 4184.0
    e_thermal = R * T * x / (math.exp(x) - 1.0) / 4184.0
    s = R * (x / (math.exp(x) - 1.0) - math.log(1.0 - math.exp(-x))) / CAL
    assert zpe == pytest.approx(1.429572, abs=1e-6)  # 1 cm^-1 = 2.859144e-3 kcal/mol
    assert thermo.zpe_kcal_mol == pytest.approx(zpe, rel=1e-9)
    assert thermo.vibrational_enthalpy_kcal_mol == pytest.approx(zpe + e_thermal, rel=1e-9)
    assert thermo.vibrational_entropy_cal_mol_k == pytest.approx(s, rel=1e-9)
    assert thermo.vibrations_used == 1 and thermo.excluded_imaginary == 0


def test_totals_are_sums_of_parts_and_imaginary_modes_are_excluded():
    coords = water_coords()
    freqs = [-120.0, 40.0, 1600.0, 3650.0]
    thermo = rrho_thermo(freqs, WATER_MASSES, coords, T, symmetry_number=2)
    assert thermo.excluded_imaginary == 1 and thermo.vibrations_used == 3
    real_only = rrho_thermo(freqs[1:], WATER_MASSES, coords, T, symmetry_number=2)
    assert thermo == replace(real_only, excluded_imaginary=1)
    assert thermo.enthalpy_correction_kcal_mol == pytest.approx(
        thermo.translational_enthalpy_kcal_mol + thermo.rotational_enthalpy_kcal_mol
        + thermo.vibrational_enthalpy_kcal_mol, rel=1e-12)
    assert thermo.entropy_cal_mol_k == pytest.approx(
        thermo.translational_entropy_cal_mol_k + thermo.rotational_entropy_cal_mol_k
        + thermo.vibrational_entropy_cal_mol_k, rel=1e-12)
    assert thermo.gibbs_correction_kcal_mol == pytest.approx(
        thermo.enthalpy_correction_kcal_mol - T * thermo.entropy_cal_mol_k / 1000.0, rel=1e-12)
    assert thermo.rotational_enthalpy_kcal_mol == pytest.approx(1.5 * R * T / 4184.0, rel=1e-9)
    assert not thermo.linear


def test_linear_rotor_nitrogen():
    r = 1.0977 * ANGSTROM_IN_BOHR  # N2 equilibrium bond length, Angstrom (from memory)
    m = 14.003074
    thermo = rrho_thermo([2358.6], [m, m], [[0, 0, 0], [0, 0, r]], T, pressure_pa=1e5, symmetry_number=2)
    assert thermo.linear
    assert thermo.rotational_enthalpy_kcal_mol == pytest.approx(R * T / 4184.0, rel=1e-9)
    # closed form, S_rot = R [ln(T / (sigma Theta)) + 1], Theta = h^2 / (8 pi^2 I k)
    inertia = 2.0 * m * AMU * (0.5 * r * BOHR) ** 2
    theta = H**2 / (8.0 * math.pi**2 * inertia * KB)
    assert theta == pytest.approx(2.88, abs=0.01)  # McQuarrie & Simon, table of rotational temperatures
    assert thermo.rotational_entropy_cal_mol_k * CAL == pytest.approx(
        R * (math.log(T / (2.0 * theta)) + 1.0), rel=1e-9)
    # S°(N2, g, 298.15 K, 1 bar) = 191.61 J/(mol K): NIST-JANAF / CODATA key values (from memory)
    assert thermo.entropy_cal_mol_k * CAL == pytest.approx(191.61, abs=0.1)


def test_nonlinear_rotor_water():
    coords = water_coords()
    m_o, m_h = WATER_MASSES[0], WATER_MASSES[1]
    thermo = rrho_thermo([1594.6, 3657.1, 3755.9], WATER_MASSES, coords, T, pressure_pa=1e5,
                         symmetry_number=2, quasi_harmonic_cutoff_cm1=None)
    # principal moments of a planar symmetric triatomic by hand (amu Bohr^2)
    half_width, height = coords[1, 0], coords[1, 1]
    y_com = 2.0 * m_h * height / (m_o + 2.0 * m_h)
    i_a = m_o * y_com**2 + 2.0 * m_h * (height - y_com) ** 2
    i_b = 2.0 * m_h * half_width**2
    moments = np.array([i_a, i_b, i_a + i_b]) * AMU * BOHR**2
    thetas = H**2 / (8.0 * math.pi**2 * moments * KB)
    s_rot = R * (math.log(math.sqrt(math.pi) / 2.0 * math.sqrt(T**3 / np.prod(thetas))) + 1.5)
    assert thermo.rotational_entropy_cal_mol_k * CAL == pytest.approx(s_rot, rel=1e-9)
    # S°(H2O, g, 298.15 K, 1 bar) = 188.83 J/(mol K): CODATA key values (from memory);
    # RRHO misses anharmonicity and centrifugal distortion, a few tenths of J/(mol K) here
    assert thermo.entropy_cal_mol_k * CAL == pytest.approx(188.83, abs=0.3)


def free_rotor_entropy(nu_cm1):
    """S_R = R [1/2 + ln (8 pi^3 mu' k T / h^2)^1/2], mu' = mu B/(mu + B), mu = h / (8 pi^2 nu)."""
    mu = H / (8.0 * math.pi**2 * C * nu_cm1 * 100.0)
    mu_eff = mu * 1e-44 / (mu + 1e-44)
    return R * (0.5 + 0.5 * math.log(8.0 * math.pi**3 * mu_eff * KB * T / H**2)) / CAL


def harmonic_entropy(nu_cm1):
    x = H * C * nu_cm1 * 100.0 / (KB * T)
    return R * (x / math.expm1(x) - math.log(-math.expm1(-x))) / CAL


def vibrational_entropy(nu_cm1, cutoff=100.0):
    return rrho_thermo([nu_cm1], [1.0, 1.0], [[0, 0, 0], [0, 0, 1.0]], T,
                       quasi_harmonic_cutoff_cm1=cutoff).vibrational_entropy_cal_mol_k


def test_quasi_rrho_limits():
    # high modes: harmonic
    assert vibrational_entropy(3000.0) == pytest.approx(harmonic_entropy(3000.0), abs=1e-6)
    assert vibrational_entropy(3000.0) == pytest.approx(vibrational_entropy(3000.0, cutoff=0), abs=1e-6)
    # very soft modes: free rotor, where the harmonic value diverges
    assert vibrational_entropy(1.0) == pytest.approx(free_rotor_entropy(1.0), abs=1e-6)
    assert harmonic_entropy(1.0) - vibrational_entropy(1.0) > 3.0
    # at the cutoff: equal weights
    assert quasi_rrho_weight(100.0, 100.0) == pytest.approx(0.5)
    assert quasi_rrho_weight(50.0, 0) == 1.0 and quasi_rrho_weight(50.0, None) == 1.0
    assert vibrational_entropy(100.0) == pytest.approx(
        0.5 * (harmonic_entropy(100.0) + free_rotor_entropy(100.0)), rel=1e-9)
    # enthalpy and ZPE stay harmonic
    q = rrho_thermo([30.0], [1.0, 1.0], [[0, 0, 0], [0, 0, 1.0]], T)
    h = rrho_thermo([30.0], [1.0, 1.0], [[0, 0, 0], [0, 0, 1.0]], T, quasi_harmonic_cutoff_cm1=0)
    assert q.vibrational_enthalpy_kcal_mol == h.vibrational_enthalpy_kcal_mol
    assert q.zpe_kcal_mol == h.zpe_kcal_mol


def test_thermo_input_errors():
    with pytest.raises(ValueError):
        rrho_thermo([0.0], [1.0, 1.0], [[0, 0, 0], [0, 0, 1.0]], T)
    with pytest.raises(ValueError):
        rrho_thermo([100.0], [1.0, 1.0], [[0, 0, 0], [0, 0, 1.0]], 0.0)


# ---------------------------------------------------------------- populations


def test_conformer_populations():
    p = conformer_populations([0.0, 1.0], T)
    rt = R * T / 4184.0  # kcal/mol
    assert p.sum() == pytest.approx(1.0)
    assert p[0] == pytest.approx(1.0 / (1.0 + math.exp(-1.0 / rt)), rel=1e-9)
    assert p[0] == pytest.approx(0.843935, abs=1e-6)
    shifted = conformer_populations([-1e6, -1e6 + 1.0, np.inf], T)  # no overflow/underflow
    assert np.allclose(shifted, [p[0], p[1], 0.0])
    assert np.allclose(conformer_populations([2.0, 2.0, 2.0, 2.0], 100.0), 0.25)
