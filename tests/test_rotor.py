"""The torsion as a quantum hindered rotor (torsionscan.rotor).

Checked against closed forms (free rotor, Mathieu characteristic values from SciPy, the
harmonic and anharmonic deep-well limits, the Wigner-Kirkwood high-temperature expansion), an
independent finite-difference solution of the same Schroedinger equation, hand computations
of moments of inertia and of Eyring rates, and once against butadiene's measured fundamental.
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.linalg import eigh_tridiagonal
from scipy.sparse import diags
from scipy.sparse.linalg import eigsh
from scipy.special import mathieu_a, mathieu_b

from torsionscan import molecule
from torsionscan.errors import InputError
from torsionscan.profile import FourierSeries
from torsionscan.records import from_plain, to_plain
from torsionscan.rotor import (
    ConformerFreeEnergies, RotorPopulations, WellFundamental, conformer_free_energies, eyring_rate,
    half_life_s, interval_weights, reduced_moment_of_inertia, region_weights, rotational_constant_kcal_mol,
    rotor_populations, s_cis_over_temperatures, torsional_levels, tunnelling_splitting, well_fundamentals,
    wigner_transmission,
)
from torsionscan.thermo import region_populations

# Constants written out independently of the package (CODATA 2018)
H = 6.62607015e-34  # J s
HBAR = H / (2.0 * math.pi)
C_CM = 2.99792458e10  # cm/s
KB = 1.380649e-23  # J/K
NA = 6.02214076e23  # 1/mol
R = KB * NA  # J/(mol K)
AMU = 1.66053906660e-27  # kg
BOHR_A = 0.529177210903  # Angstrom per Bohr
BOHR = BOHR_A * 1e-10  # m
CAL = 4.184  # J
KCAL_J = 1000.0 * CAL / NA  # J per molecule for 1 kcal/mol
CM1_PER_KCAL = KCAL_J / (H * C_CM)
M_C, M_H = 12.011, 1.008


def b_kcal_mol(inertia_amu_bohr2):
    """B = hbar^2 / (2 I) in kcal/mol."""
    return HBAR**2 / (2.0 * inertia_amu_bohr2 * AMU * BOHR**2) / KCAL_J


def cosine_well(v0, n):
    """V = (V0/2)(1 - cos n phi), kcal/mol."""
    cos = [0.0] * n
    cos[n - 1] = -0.5 * v0
    return FourierSeries(0.5 * v0, cos, [0.0] * n)


def rt(temperature_k):
    return R * temperature_k / (1000.0 * CAL)


# -- moment of inertia ----------------------------------------------------------------------------
def ethane_like():
    """Staggered ethane: C-C 1.54 A on z, C-H 1.09 A, H-C-C 111.2 deg. Returns masses, Bohr coords, moving."""
    r_ch, theta = 1.09, math.radians(111.2)
    atoms = [(M_C, (0.0, 0.0, -0.77)), (M_C, (0.0, 0.0, 0.77))]
    for alpha in (0.0, 120.0, 240.0):  # on carbon 0; angle to the C0->C1 direction (+z) is theta
        a = math.radians(alpha)
        atoms.append((M_H, (r_ch * math.sin(theta) * math.cos(a), r_ch * math.sin(theta) * math.sin(a),
                            -0.77 + r_ch * math.cos(theta))))
    for alpha in (60.0, 180.0, 300.0):  # on carbon 1, staggered
        a = math.radians(alpha)
        atoms.append((M_H, (r_ch * math.sin(theta) * math.cos(a), r_ch * math.sin(theta) * math.sin(a),
                            0.77 - r_ch * math.cos(theta))))
    masses = [m for m, _ in atoms]
    coords = np.array([xyz for _, xyz in atoms]) / BOHR_A
    return masses, coords, [1, 5, 6, 7]


@pytest.mark.parametrize("definition", ["I(2,3)", "I(2,1)", "projected"])
def test_ethane_like_moment_is_half_a_methyl_moment(definition):
    masses, coords, moving = ethane_like()
    # by hand: each H is r sin(theta) from the C-C axis, which holds both centres of mass
    d_bohr = 1.09 * math.sin(math.radians(111.2)) / BOHR_A
    methyl = 3 * M_H * d_bohr**2
    expected = methyl * methyl / (methyl + methyl)
    assert reduced_moment_of_inertia(masses, coords, 0, 1, moving, definition) == pytest.approx(expected, rel=1e-12)


def butadiene_like():
    """Planar s-trans butadiene in the xy plane, C2-C3 on x through the origin (C2h), Angstrom.

    C=C 1.34, C-C 1.47, C-H 1.08, every angle 120 deg. Atoms: C1 C2 C3 C4 H1a H1b H2 H3 H4a H4b.
    """
    s, c = math.sin(math.radians(60.0)), 0.5
    c2 = (-0.735, 0.0)
    c1 = (c2[0] - 1.34 * c, c2[1] + 1.34 * s)
    h2 = (c2[0] - 1.08 * c, c2[1] - 1.08 * s)
    h1a = (c1[0] + 1.08 * c, c1[1] + 1.08 * s)
    h1b = (c1[0] - 1.08, c1[1])
    left = [c1, c2, h1a, h1b, h2]
    right = [(-x, -y) for x, y in left]  # inversion through the bond midpoint
    xy = [left[0], left[1], right[1], right[0], left[2], left[3], left[4], right[4], right[2], right[3]]
    masses = [M_C] * 4 + [M_H] * 6
    return masses, xy, [2, 3, 7, 8, 9]


def test_butadiene_like_i23_and_i21_by_hand():
    masses, xy, moving = butadiene_like()
    coords = np.array([(x, y, 0.0) for x, y in xy]) / BOHR_A
    left = [0, 1, 4, 5, 6]
    # centre of mass of the left vinyl group; the right one is its inversion image, so the
    # axis through both passes through the origin with direction (ux, uy)
    mass_left = sum(masses[a] for a in left)
    cx = sum(masses[a] * xy[a][0] for a in left) / mass_left
    cy = sum(masses[a] * xy[a][1] for a in left) / mass_left
    ux, uy = cx / math.hypot(cx, cy), cy / math.hypot(cx, cy)
    # distance of (x, y) from that line: |x uy - y ux|; both groups have the same moment
    i_left = sum(masses[a] * (xy[a][0] * uy - xy[a][1] * ux) ** 2 for a in left) / BOHR_A**2
    expected_23 = i_left * i_left / (2 * i_left)
    assert reduced_moment_of_inertia(masses, coords, 1, 2, moving) == pytest.approx(expected_23, rel=1e-12)
    # I(2,1): the axis is the x axis, distances |y|
    i_left_bond = sum(masses[a] * xy[a][1] ** 2 for a in left) / BOHR_A**2
    assert reduced_moment_of_inertia(masses, coords, 1, 2, moving, "I(2,1)") == pytest.approx(
        i_left_bond / 2, rel=1e-12)


def test_butadiene_like_projected_moment_by_hand():
    masses, xy, moving = butadiene_like()
    coords = np.array([(x, y, 0.0) for x, y in xy]) / BOHR_A
    # turning the right group by a small angle about +x moves each of its atoms by y out of the
    # plane; the motions to remove that also move atoms along z are the z translation and the
    # rotations about x and y (z displacements 1, y and -x). Least squares by hand:
    # I = sum m d^2 - b^T A^-1 b, A = sum m g g^T, b = sum m g d, g = (1, y, -x).
    d = [xy[a][1] if a in moving else 0.0 for a in range(10)]
    g = [(1.0, y, -x) for x, y in xy]
    a_matrix = np.array([[sum(masses[a] * g[a][p] * g[a][q] for a in range(10)) for q in range(3)]
                         for p in range(3)])
    b_vector = np.array([sum(masses[a] * g[a][p] * d[a] for a in range(10)) for p in range(3)])
    expected = (sum(masses[a] * d[a] ** 2 for a in range(10))
                - b_vector @ np.linalg.solve(a_matrix, b_vector)) / BOHR_A**2
    assert reduced_moment_of_inertia(masses, coords, 1, 2, moving, "projected") == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("definition", ["I(2,3)", "I(2,1)", "projected"])
def test_moment_does_not_depend_on_orientation_or_on_which_side_moves(definition):
    masses, xy, moving = butadiene_like()
    coords = np.array([(x, y, 0.05 * x * y) for x, y in xy]) / BOHR_A  # slightly non-planar
    reference = reduced_moment_of_inertia(masses, coords, 1, 2, moving, definition)
    rng = np.random.default_rng(7)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    moved = coords @ q.T + np.array([1.0, -2.0, 3.0])
    assert reduced_moment_of_inertia(masses, moved, 1, 2, moving, definition) == pytest.approx(reference, rel=1e-10)
    other_side = [a for a in range(10) if a not in moving]
    assert reduced_moment_of_inertia(masses, coords, 2, 1, other_side, definition) == pytest.approx(
        reference, rel=1e-10)


def test_bad_fragments_are_refused_in_one_line():
    masses, coords, moving = ethane_like()
    for j, k, atoms in ((0, 1, [0, 2, 3, 4]), (0, 1, [5, 6, 7]), (0, 0, moving), (0, 1, [1, 5, 6, 99])):
        with pytest.raises(InputError) as error:
            reduced_moment_of_inertia(masses, coords, j, k, atoms)
        assert "\n" not in str(error.value)
    with pytest.raises(InputError):
        reduced_moment_of_inertia(masses, coords, 0, 1, moving, "I(9,9)")


# -- levels ---------------------------------------------------------------------------------------
# Mathieu mapping. With B = hbar^2/(2I) and V = (V0/2)(1 - cos n phi), the torsional equation
# -B psi'' + (V0/2)(1 - cos n phi) psi = E psi becomes, with z = n phi/2 + pi/2 (so that
# cos n phi = -cos 2z and d^2/dphi^2 = (n^2/4) d^2/dz^2),
#     psi_zz + [(4E - 2 V0)/(B n^2) - 2 (V0/(B n^2)) cos 2z] psi = 0,
# Mathieu's equation y'' + (a - 2q cos 2z) y = 0 (Abramowitz & Stegun 20.1.1) with
#     q = V0/(B n^2),  a = (4E - 2V0)/(B n^2),  i.e.  E = B n^2 a/4 + V0/2.
# psi must be 2 pi-periodic in phi, i.e. n pi-periodic in z. The integer-order solutions ce_r
# (value a_r) and se_r (b_r) have period pi for even r and 2 pi for odd r (A&S 20.2), so for
# n = 1 the spectrum is {a_r, b_r : r even}, for n = 2 every a_r and b_r; for n >= 3 it also
# holds non-integer Floquet orders, and the even-order values are only part of it.
def mathieu_levels(v0, n, b, count):
    q = v0 / (b * n * n)
    step = 2 if n == 1 else 1
    values = [mathieu_a(r, q) for r in range(0, 2 * count, step)]
    values += [mathieu_b(r, q) for r in range(step, 2 * count, step)]
    return np.sort(b * n * n * np.array(values) / 4.0 + 0.5 * v0)[:count]


@pytest.mark.parametrize("n, v0", [(1, 0.25), (2, 1.0), (2, 0.3)])
def test_levels_of_a_cosine_well_are_mathieu_characteristic_values(n, v0):
    inertia = 10.0
    b = b_kcal_mol(inertia)  # q = V0/(B n^2) = 14.5, 14.5, 4.4
    energies, _ = torsional_levels(cosine_well(v0, n), inertia)
    expected = mathieu_levels(v0, n, b, 16)
    assert energies[:16] == pytest.approx(expected, rel=1e-6)  # Abramowitz & Stegun ch. 20


def test_three_fold_well_holds_the_even_order_mathieu_values():
    inertia, v0, n = 10.0, 2.0, 3
    b = b_kcal_mol(inertia)
    energies, _ = torsional_levels(cosine_well(v0, n), inertia)
    q = v0 / (b * n * n)
    for r in range(0, 12, 2):  # A&S 20.2: period pi in z, hence 2 pi/3 in phi
        for value in (mathieu_a(r, q), mathieu_b(r + 2, q)):
            level = b * n * n * value / 4.0 + 0.5 * v0
            assert np.min(np.abs(energies - level)) <= 1e-6 * level


def test_free_rotor_levels_and_weights():
    inertia, constant = 30.0, 0.7
    energies, vectors = torsional_levels(FourierSeries(constant, (), ()), inertia)
    b = b_kcal_mol(inertia)
    expected = np.sort([constant + b * m * m for m in range(-30, 31)])[:41]  # E_m = m^2 hbar^2 / 2I
    assert energies[:41] == pytest.approx(expected, rel=1e-12)
    assert rotational_constant_kcal_mol(inertia) == pytest.approx(b, rel=1e-12)
    # |psi|^2 of exp(i m phi) and of any mix of +-m is symmetric enough that |phi| < 90 deg holds half
    assert region_weights(vectors) == pytest.approx(0.5, abs=1e-12)


@pytest.mark.parametrize("n", [2, 3])
def test_deep_well_levels_tend_to_harmonic(n):
    inertia, v0 = 60.0, 40.0
    b = b_kcal_mol(inertia)
    omega = n * math.sqrt(v0 * KCAL_J / (2.0 * inertia * AMU * BOHR**2))  # omega = n sqrt(V0 / 2I), rad/s
    quantum = HBAR * omega / KCAL_J  # kcal/mol
    q = v0 / (b * n * n)
    energies, _ = torsional_levels(cosine_well(v0, n), inertia)
    for v in range(4):
        group = energies[n * v:n * (v + 1)]  # n equivalent wells: n-fold (tunnelling-split) levels
        w = 2 * v + 1
        # A&S 20.2.30 (from memory): a ~ -2q + 2w sqrt(q) - (w^2 + 1)/8 - (w^3 + 3w)/(2^7 sqrt(q)) - ...
        # so E_v = hbar omega (v + 1/2) - B n^2 (w^2 + 1)/32 - B n^2 (w^3 + 3w)/(2^9 sqrt(q)) - ...
        anharmonic = b * n * n * (w * w + 1) / 32.0
        next_term = b * n * n * (w**3 + 3 * w) / (2**9 * math.sqrt(q))
        for level in group:
            assert level < quantum * (v + 0.5)
            assert abs(level - quantum * (v + 0.5)) <= 1.2 * anharmonic  # anharmonicity bounded
            assert abs(level - (quantum * (v + 0.5) - anharmonic)) <= 1.1 * next_term
        assert abs(group[0] / (quantum * (v + 0.5)) - 1.0) < 0.012  # within 1.2% of harmonic here


def test_default_basis_is_converged():
    series = FourierSeries(1.0, (0.5, -1.2, 0.3), (0.7, -0.4, 0.2))
    energies, vectors = torsional_levels(series, 25.0)
    m_max = (vectors.shape[0] - 1) // 2
    larger, _ = torsional_levels(series, 25.0, basis_size=2 * m_max)
    assert energies == pytest.approx(larger[:len(energies)], rel=1e-12, abs=1e-12)
    assert np.allclose(vectors.conj().T @ vectors, np.eye(len(energies)), atol=1e-10)


def periodic_finite_differences(series, b, points, count=4):
    """Lowest levels and grid eigenvectors of -B psi'' + V psi on a periodic 3-point grid."""
    h = 2.0 * math.pi / points
    phi = h * np.arange(points)
    potential = series.value(np.degrees(phi))
    off = np.full(points - 1, -b / h**2)
    matrix = diags([2.0 * b / h**2 + potential, off, off], [0, -1, 1], format="lil")
    matrix[0, points - 1] = matrix[points - 1, 0] = -b / h**2
    values, vectors = eigsh(matrix.tocsc(), k=count, sigma=potential.min() - 1.0, which="LM")
    order = np.argsort(values)
    return values[order], vectors[:, order]


def test_a_general_series_matches_finite_differences():
    # sin terms make V(phi) != V(-phi): minima near -166 and -14 deg
    series = FourierSeries(1.0, (0.5, -1.2, 0.3), (0.7, -0.4, 0.2))
    inertia = 60.0
    b = b_kcal_mol(inertia)
    energies, vectors = torsional_levels(series, inertia)
    coarse, coarse_vectors = periodic_finite_differences(series, b, 3600)
    fine, fine_vectors = periodic_finite_differences(series, b, 7200)
    extrapolated = (4.0 * fine - coarse) / 3.0  # Richardson: the 3-point error is O(h^2)
    assert energies[:4] == pytest.approx(extrapolated, rel=1e-8)

    def grid_weight(vector, points, lower_deg, upper_deg):  # trapezoid rule on grid points
        density = vector**2 / np.sum(vector**2)
        i, j = round(lower_deg * points / 360.0), round(upper_deg * points / 360.0)
        indices = np.arange(i, j + 1) % points
        return density[indices].sum() - 0.5 * (density[indices[0]] + density[indices[-1]])

    for lower, upper in ((-60.0, 30.0), (-200.0, -100.0), (-90.0, 90.0)):
        ours = interval_weights(vectors[:, :4], lower, upper)
        for level in range(4):
            w_coarse = grid_weight(coarse_vectors[:, level], 3600, lower, upper)
            w_fine = grid_weight(fine_vectors[:, level], 7200, lower, upper)
            assert ours[level] == pytest.approx((4.0 * w_fine - w_coarse) / 3.0, abs=1e-6)


def test_region_weights_equal_direct_integration_of_the_density():
    series = FourierSeries(1.0, (0.5, -1.2, 0.3), (0.7, -0.4, 0.2))
    _, vectors = torsional_levels(series, 60.0)
    m_max = (vectors.shape[0] - 1) // 2
    m = np.arange(-m_max, m_max + 1)
    for level in (0, 1, 5, 20):
        c = vectors[:, level]

        def density(phi):
            return abs(np.sum(c * np.exp(1j * m * phi))) ** 2 / (2.0 * math.pi)

        direct = quad(density, -math.pi / 2, math.pi / 2, epsabs=1e-13, limit=400)[0]
        assert region_weights(vectors[:, level])[0] == pytest.approx(direct, abs=1e-10)
        assert interval_weights(vectors[:, level], -180.0, 180.0)[0] == pytest.approx(1.0, abs=1e-12)


# -- thermodynamics -------------------------------------------------------------------------------
BUTADIENE_LIKE = FourierSeries(2.95, (0.55, -2.15, 0.54, 0.28), (0.0, 0.0, 0.0, 0.0))


def wigner_kirkwood_scis(series, b, temperature_k):
    """Classical s-cis fraction and the same with the leading hbar^2 correction of the density.

    rho(phi) ~ exp(-beta V) [1 - (B beta^2/6) V'' + (B beta^3/12) V'^2] (Wigner, Phys. Rev. 1932,
    40, 749; Kirkwood, Phys. Rev. 1933, 44, 31; from memory), with hbar^2/(12 I) = B/6.
    """
    beta = 1.0 / rt(temperature_k)

    def plain(x):
        return math.exp(-beta * float(series.value(x)))

    def corrected(x):
        return plain(x) * (1.0 - b * beta**2 / 6.0 * float(series.second_derivative(x))
                           + b * beta**3 / 12.0 * float(series.derivative(x)) ** 2)

    fractions = []
    for f in (plain, corrected):
        cis = quad(f, -90.0, 90.0, epsabs=0.0, epsrel=1e-12, limit=200)[0]
        trans = quad(f, 90.0, 270.0, epsabs=0.0, epsrel=1e-12, limit=200)[0]
        fractions.append(cis / (cis + trans))
    return fractions


def test_quantum_populations_tend_to_the_classical_ones_as_temperature_grows():
    # Pitzer and Gwinn (J. Chem. Phys. 1942, 10, 428; from memory): the hindered-rotor sums tend
    # to the classical integrals at high temperature. Here the quantum s-cis fraction minus
    # thermo.region_populations' classical one must equal the leading Wigner-Kirkwood hbar^2
    # correction to within 5% of it (what is left is O(hbar^4), smaller by another factor of
    # order B V''/(RT)^2), and shrink as T grows.
    inertia = 12.0
    b = b_kcal_mol(inertia)
    differences = []
    for temperature_k in (300.0, 1000.0, 3000.0):
        quantum = rotor_populations(BUTADIENE_LIKE, inertia, temperature_k).s_cis
        classical = region_populations(BUTADIENE_LIKE.value, temperature_k).s_cis
        plain, corrected = wigner_kirkwood_scis(BUTADIENE_LIKE, b, temperature_k)
        assert classical == pytest.approx(plain, rel=1e-8)
        assert quantum - classical == pytest.approx(corrected - plain, rel=0.05)
        differences.append(abs(quantum - classical))
    assert differences[0] > differences[1] > differences[2]
    assert differences[2] < 1e-5


def test_the_temperature_curve_from_one_set_of_levels_equals_the_rotor_at_each_temperature():
    # the populations figure's curve: levels solved once for the hottest point serve every colder one
    temperatures = [150.0, 298.15, 450.0, 1200.0]
    for inertia in (12.0, 45.0):
        curve = s_cis_over_temperatures(BUTADIENE_LIKE, inertia, temperatures)
        for t, fraction in zip(temperatures, curve):
            assert fraction == pytest.approx(rotor_populations(BUTADIENE_LIKE, inertia, t).s_cis, rel=1e-10, abs=1e-14)
    assert s_cis_over_temperatures(BUTADIENE_LIKE, 12.0, []) == []


def test_free_energy_tends_to_the_classical_one_with_the_landau_lifshitz_correction():
    # Classical q = sqrt(RT / (4 pi B)) integral exp(-(V - V_min)/RT) dphi; the leading quantum
    # correction of the free energy is +(B/12) <V'^2>/(RT)^2 (hbar^2/(24 I (kT)^2) <V'^2>; Landau
    # and Lifshitz, Statistical Physics, section 33; from memory).
    inertia, temperature_k = 12.0, 1000.0
    b, rt_value = b_kcal_mol(inertia), rt(temperature_k)
    v_min = min(BUTADIENE_LIKE.value(np.linspace(-180.0, 180.0, 36001)))

    def boltzmann(x):
        return math.exp(-(float(BUTADIENE_LIKE.value(math.degrees(x))) - v_min) / rt_value)

    integral = quad(boltzmann, -math.pi, math.pi, epsabs=0.0, epsrel=1e-12, limit=200)[0]
    mean_slope2 = quad(lambda x: boltzmann(x) * float(BUTADIENE_LIKE.derivative(math.degrees(x))) ** 2,
                       -math.pi, math.pi, epsabs=0.0, epsrel=1e-12, limit=200)[0] / integral
    classical = -rt_value * math.log(math.sqrt(rt_value / (4.0 * math.pi * b)) * integral)
    correction = b / 12.0 * mean_slope2 / rt_value**2
    result = rotor_populations(BUTADIENE_LIKE, inertia, temperature_k)
    assert result.free_energy_kcal_mol - classical == pytest.approx(correction, rel=0.05)


def test_rotor_populations_are_consistent():
    inertia, temperature_k = 20.0, 298.15
    result = rotor_populations(BUTADIENE_LIKE, inertia, temperature_k, scis_window_deg=30.0)
    energies, vectors = torsional_levels(BUTADIENE_LIKE, inertia, window_kcal_mol=40 * rt(temperature_k))
    weights = np.exp(-(energies - energies[0]) / rt(temperature_k))
    assert result.partition_function == pytest.approx(weights.sum(), rel=1e-12)
    assert result.s_cis == pytest.approx(weights @ region_weights(vectors) / weights.sum(), rel=1e-12)
    assert result.scis_window == pytest.approx(weights @ region_weights(vectors, 30.0) / weights.sum(), rel=1e-12)
    assert result.s_cis + result.s_trans == pytest.approx(1.0, abs=1e-15)
    assert 0.0 < result.scis_window < result.s_cis
    assert result.delta_g_kcal_mol == pytest.approx(-rt(temperature_k) * math.log(result.s_cis / result.s_trans))
    v_min = BUTADIENE_LIKE.value(np.linspace(-180.0, 180.0, 3601)).min()
    assert result.zpe_kcal_mol == pytest.approx(energies[0] - v_min, abs=1e-6)
    assert result.free_energy_kcal_mol == pytest.approx(
        result.zpe_kcal_mol - rt(temperature_k) * math.log(result.partition_function))
    assert result.levels == len(energies)
    # free rotor: the partition function is the theta sum of exp(-B m^2 / RT)
    free = rotor_populations(FourierSeries(0.0, (), ()), inertia, temperature_k)
    b = b_kcal_mol(inertia)
    theta = sum(math.exp(-b * m * m / rt(temperature_k)) for m in range(-2000, 2001))
    assert free.partition_function == pytest.approx(theta, rel=1e-12)
    assert free.s_cis == pytest.approx(0.5, abs=1e-12)


def test_conformer_free_energies_by_hand():
    levels, weights, temperature_k = [0.0, 0.5, 1.2], [0.1, 0.9, 0.5], 300.0
    rt_value = rt(temperature_k)
    cis = -rt_value * math.log(0.1 + 0.9 * math.exp(-0.5 / rt_value) + 0.5 * math.exp(-1.2 / rt_value))
    trans = -rt_value * math.log(0.9 + 0.1 * math.exp(-0.5 / rt_value) + 0.5 * math.exp(-1.2 / rt_value))
    result = conformer_free_energies(levels, weights, 0.3, -0.2, temperature_k)
    assert result.torsion_s_cis_kcal_mol == pytest.approx(cis, rel=1e-12)
    assert result.torsion_s_trans_kcal_mol == pytest.approx(trans, rel=1e-12)
    assert result.g_s_cis_kcal_mol == pytest.approx(cis + 0.3, rel=1e-12)
    assert result.g_s_trans_kcal_mol == pytest.approx(trans - 0.2, rel=1e-12)
    assert result.delta_g_kcal_mol == pytest.approx(cis + 0.3 - trans + 0.2, rel=1e-12)
    ratio = math.exp(-(result.delta_g_kcal_mol) / rt_value)
    assert result.s_cis == pytest.approx(ratio / (1.0 + ratio), rel=1e-12)
    assert result.s_cis + result.s_trans == pytest.approx(1.0, abs=1e-15)


def test_a_level_of_zero_weight_far_below_the_others_leaves_a_region_free_energy_finite():
    # the s-cis weights of the levels are clipped to [0, 1]: a region may own none of the ground level
    result = conformer_free_energies([0.0, 500.0], [0.0, 1.0], 0.0, 0.0, 300.0)
    assert result.torsion_s_cis_kcal_mol == pytest.approx(500.0, rel=1e-12)
    assert result.torsion_s_trans_kcal_mol == pytest.approx(0.0, abs=1e-12)


def test_conformer_free_energies_without_other_modes_are_the_rotor_populations():
    inertia, temperature_k = 20.0, 298.15
    energies, vectors = torsional_levels(BUTADIENE_LIKE, inertia, window_kcal_mol=40 * rt(temperature_k))
    result = conformer_free_energies(energies, region_weights(vectors), 0.0, 0.0, temperature_k)
    populations = rotor_populations(BUTADIENE_LIKE, inertia, temperature_k)
    assert result.s_cis == pytest.approx(populations.s_cis, rel=1e-10)
    assert result.delta_g_kcal_mol == pytest.approx(populations.delta_g_kcal_mol, rel=1e-10)
    with pytest.raises(InputError):
        conformer_free_energies(energies, region_weights(vectors)[:-1], 0.0, 0.0, temperature_k)


# -- wells ----------------------------------------------------------------------------------------
def double_well(a):
    """V = A (cos phi - 1/2)^2: minima 0 at +-60 deg, barriers A/4 at 0 and 9A/4 at 180 deg."""
    return FourierSeries(0.75 * a, (-a, 0.5 * a), (0.0, 0.0))


def half_circle_finite_differences(series, b, points):
    """(even, odd) lowest levels of -B psi'' + V psi for V(phi) = V(-phi), on [0, pi] (tridiagonal).

    Even states: psi' = 0 at 0 and pi (ghost points, symmetrised end links); odd: psi = 0 there.
    """
    h = math.pi / points
    potential = series.value(np.degrees(h * np.arange(points + 1)))
    odd = eigh_tridiagonal(2 * b / h**2 + potential[1:points], np.full(points - 2, -b / h**2),
                           select="i", select_range=(0, 1))[0]
    links = np.full(points, -b / h**2)
    links[[0, -1]] *= math.sqrt(2.0)
    even = eigh_tridiagonal(2 * b / h**2 + potential, links, select="i", select_range=(0, 1))[0]
    return even, odd


def test_a_symmetric_double_well_has_a_small_splitting_that_shrinks_as_the_barrier_grows():
    inertia = 6.0
    b = b_kcal_mol(inertia)
    splittings = []
    for a in (1.0, 2.0, 4.0, 8.0):
        series = double_well(a)
        splitting = tunnelling_splitting(series, inertia)
        (well,) = well_fundamentals(series, inertia)
        assert well.mirror_pair and well.s_cis and well.angle_deg == pytest.approx(60.0, abs=1e-6)
        assert well.tunnelling_splitting_cm1 == splitting
        assert 0.0 < splitting < 0.1 * well.fundamental_cm1
        # against an independent solution: the ground doublet from the even and odd
        # half-circle problems, Richardson-extrapolated (3-point error O(h^2))
        coarse = half_circle_finite_differences(series, b, 20000)
        fine = half_circle_finite_differences(series, b, 40000)
        even = (4.0 * fine[0][0] - coarse[0][0]) / 3.0
        odd = (4.0 * fine[1][0] - coarse[1][0]) / 3.0
        assert splitting == pytest.approx((odd - even) * CM1_PER_KCAL, rel=1e-4)
        splittings.append(splitting)
    assert all(x > y for x, y in zip(splittings, splittings[1:]))


def test_well_fundamental_of_a_single_well_is_mathieu():
    inertia, v0 = 10.0, 2.0
    b = b_kcal_mol(inertia)
    (well,) = well_fundamentals(cosine_well(v0, 1), inertia)
    q = v0 / b
    # n = 1: the two lowest levels are a_0 and b_2 (A&S 20.2); E = B a/4 + V0/2
    expected = b * (mathieu_b(2, q) - mathieu_a(0, q)) / 4.0 * CM1_PER_KCAL
    assert well.fundamental_cm1 == pytest.approx(expected, rel=1e-6)
    assert not well.mirror_pair and math.isnan(well.tunnelling_splitting_cm1)
    assert well.harmonic_cm1 == pytest.approx(math.sqrt(v0 * b) * CM1_PER_KCAL, rel=1e-9)  # hbar omega
    assert well.localisation[0] > 0.999
    with pytest.raises(InputError):
        tunnelling_splitting(cosine_well(v0, 1), inertia)


def test_results_serialise_as_plain_data():
    inertia = 20.0
    records = [rotor_populations(BUTADIENE_LIKE, inertia, 298.15), *well_fundamentals(BUTADIENE_LIKE, inertia),
               conformer_free_energies([0.0, 1.0], [0.2, 0.7], 0.1, 0.0, 298.15)]
    for record in records:
        plain = to_plain(record)
        assert all(isinstance(v, (float, int, str, bool, list)) for v in plain.values())
        kind = type(record)
        assert kind in (RotorPopulations, WellFundamental, ConformerFreeEnergies)
        assert to_plain(from_plain(kind, plain)) == plain


# -- rates ----------------------------------------------------------------------------------------
def test_eyring_rate_and_half_life_by_hand():
    t = 298.15
    # k = kT/h exp(-dG/RT): 6.2124e12 s^-1 x exp(-33.7565) = 1.36e-2 s^-1 for 20 kcal/mol
    expected = KB * t / H * math.exp(-20.0 * 1000.0 * CAL / (R * t))
    assert eyring_rate(20.0, t) == pytest.approx(expected, rel=1e-12)
    assert eyring_rate(20.0, t) == pytest.approx(1.36e-2, rel=0.005)
    kappa = 1.0 + (H * C_CM * 300.0 / (KB * t)) ** 2 / 24.0  # Wigner: 1 + (h nu / kT)^2 / 24 = 1.0873
    assert wigner_transmission(-300.0, t) == pytest.approx(kappa, rel=1e-12)
    assert kappa == pytest.approx(1.0873, abs=1e-4)
    assert eyring_rate(20.0, t, imaginary_frequency_cm1=-300.0) == pytest.approx(kappa * expected, rel=1e-12)
    assert half_life_s(eyring_rate(20.0, t)) == pytest.approx(math.log(2.0) / expected, rel=1e-12)
    for bad in (lambda: eyring_rate(20.0, 0.0), lambda: half_life_s(0.0), lambda: eyring_rate(math.nan, t)):
        with pytest.raises(InputError):
            bad()


# -- a real profile -------------------------------------------------------------------------------
@pytest.mark.xtb
def test_butadiene_s_trans_torsional_fundamental(butadiene_scan):
    bond = butadiene_scan.bonds[0]
    series = bond.profile.fit.series
    s_trans = min(bond.profile.minima, key=lambda m: m.energy_hartree)
    masses = [a.GetMass() for a in butadiene_scan.mol.GetAtoms()]
    j, k = bond.dihedral_atoms[1:3]
    moving = molecule.side_atoms(molecule.load_molecule("C=CC=C"), j, k)

    def fundamental(definition):
        inertia = reduced_moment_of_inertia(masses, s_trans.coords_bohr, j, k, moving, definition)
        return next(w for w in well_fundamentals(series, inertia) if not w.s_cis).fundamental_cm1

    # s-trans-1,3-butadiene torsional fundamental nu13 = 163 cm-1 (gas-phase infrared; from
    # memory). 30 cm-1, as for the harmonic value in test_free_energy, allows GFN2-xTB's ~1 kcal/mol
    # torsion error on this shallow mode. I(2,3) is about half the rigorous moment here (the
    # vinyl groups' centres of mass lie off the bond), which alone raises nu by ~35%.
    assert fundamental("I(2,3)") == pytest.approx(163.0, abs=30.0)
    # With the rigorous moment the 1-D rotor on the relaxed profile and the normal-mode analysis
    # of the same GFN2-xTB surface must agree within 10%: they differ only by the torsion's
    # anharmonicity (~1% here) and by the relaxed path's coupling to the other modes.
    assert fundamental("projected") == pytest.approx(s_trans.frequencies_cm1[0], rel=0.10)
    # what the package reports (its default, the rigorous moment) against the same gas-phase value:
    # 134 cm-1, low by GFN2-xTB's soft torsional curvature (its harmonic value is 144); the same
    # 30 cm-1 allowance for the method's error
    reported = next(w for w in bond.profile.wells if not w.s_cis).fundamental_cm1
    assert reported == pytest.approx(fundamental("projected"), rel=1e-6)
    assert reported == pytest.approx(163.0, abs=30.0)
