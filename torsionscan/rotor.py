"""The scanned torsion as a one-dimensional quantum hindered rotor.

The relaxed profile V(phi) (a profile.FourierSeries, kcal/mol, phi in degrees with 0 = s-cis)
and a reduced moment of inertia I define

    H = -B d^2/dphi^2 + V(phi),   B = hbar^2 / (2 I),

solved in the free-rotor basis <phi|m> = exp(i m phi) / sqrt(2 pi), m = -M..M. Its levels
give the torsion's quantum populations of the s-cis (|phi| < 90 deg, thermo.SCIS_LIMIT_DEG)
and s-trans regions, its zero-point energy and partition function, each well's fundamental
and the tunnelling splitting of a mirror pair of wells. Together with the harmonic free
energy of the other modes they give conformer free energies; Eyring's equation with
Wigner's tunnelling factor gives interconversion rates.

Units: masses amu, coordinates Bohr, moments of inertia amu Bohr^2, energies kcal/mol on
the series' own scale (the same zero as V), wavenumbers cm^-1, temperatures K, rates s^-1.
"""

import math
import numbers
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .geometry import internal_rotation, orthonormal_rows
from .profile import stationary_points
from .thermo import SCIS_LIMIT_DEG, is_s_cis, region_delta_g
from .units import (
    AMU_KG, AVOGADRO_PER_MOL, BOHR_M, BOLTZMANN_J_K, CAL_J, PLANCK_J_S, SPEED_OF_LIGHT_M_S, rt_kcal_mol,
    wrap_deg,
)

_HBAR_J_S = PLANCK_J_S / (2.0 * math.pi)
_J_PER_KCAL_MOL = 1000.0 * CAL_J / AVOGADRO_PER_MOL  # J per molecule for 1 kcal/mol
# B = hbar^2 / (2 I) in kcal/mol for I = 1 amu Bohr^2
_B_KCAL_MOL_AMU_BOHR2 = _HBAR_J_S**2 / (2.0 * AMU_KG * BOHR_M**2) / _J_PER_KCAL_MOL
KCAL_MOL_CM1 = _J_PER_KCAL_MOL / (PLANCK_J_S * SPEED_OF_LIGHT_M_S * 100.0)  # cm^-1 per kcal/mol

DEFAULT_WINDOW_KCAL_MOL = 25.0  # levels kept above the ground level by default (42 RT at 298.15 K)
BOLTZMANN_WINDOW_RT = 40.0  # thermal sums keep levels up to E_0 + 40 RT (dropped weight < e^-40 per level)
_EDGE_AMPLITUDE = 1e-10  # largest |c_m| allowed in the outermost shells of a converged level
_MAX_M = 20000
_MIRROR_TOL = 1e-9  # sin coefficients below this times the largest coefficient: V(phi) = V(-phi)
_PAIR_TOL_DEG = 1e-3
_AUTOCORRELATION_CHUNK = 256  # levels per FFT batch in the region integrals


def _is_number(value):
    return isinstance(value, numbers.Real) and not isinstance(value, bool) and math.isfinite(value)


def _check_temperature(temperature_k):
    if not (_is_number(temperature_k) and temperature_k > 0):
        raise InputError(f"temperature {temperature_k!r} K: give a finite temperature above 0 K")
    return float(temperature_k)


def _check_inertia(inertia_amu_bohr2):
    if not (_is_number(inertia_amu_bohr2) and inertia_amu_bohr2 > 0):
        raise InputError(f"moment of inertia {inertia_amu_bohr2!r} amu Bohr^2: give a finite value above 0")
    return float(inertia_amu_bohr2)


# -- moment of inertia ----------------------------------------------------------------------------
def reduced_moment_of_inertia(masses_amu, coords_bohr, j, k, moving_atoms, definition="I(2,3)"):
    """Reduced moment of inertia (amu Bohr^2) of the torsion about bond j-k.

    The molecule is cut at j-k into two rigid fragments: `moving_atoms` (0-based, containing
    k and not j, e.g. molecule.side_atoms) and the rest. definition:

    - "I(2,3)" (default), East and Radom's I^(2,3) (A. L. L. East and L. Radom, J. Chem. Phys.
      1997, 106, 6655, from memory; the procedure of K. S. Pitzer, J. Chem. Phys. 1946, 14, 239):
      each fragment's moment I_f = sum_a m_a d_a^2 about the axis through the centres of mass
      of the two fragments (d_a: distance of atom a from that axis), combined as
      I = I_1 I_2 / (I_1 + I_2).
    - "I(2,1)": the same with the bond axis through atoms j and k.
    - "projected": the rigorous moment of rigid fragments turning about the bond axis with no
      net translation or rotation (what the Kilpatrick-Pitzer formula computes): the moving
      fragment is turned about j->k, the overall translations and rotations are projected out
      of that displacement in mass-weighted coordinates, and I = sum_a m_a |d_a|^2 of the rest.

    All three agree when both fragments' centres of mass lie on the bond (ethane). When they
    do not, I(2,3) drops the coupling with overall rotation: for s-trans 1,3-butadiene it is
    about half the projected value. Raises InputError for fragments that do not split the
    molecule at j-k or that have no moment about the axis.
    """
    masses = np.asarray(masses_amu, dtype=float).ravel()
    coords = np.asarray(coords_bohr, dtype=float).reshape(-1, 3)
    count = len(coords)
    if len(masses) != count or count < 2:
        raise InputError(f"{len(masses)} masses for {count} atoms: give one mass per atom, at least two atoms")
    if not (np.all(np.isfinite(masses)) and np.all(masses > 0) and np.all(np.isfinite(coords))):
        raise InputError("masses must be positive and coordinates finite")
    if not (0 <= j < count and 0 <= k < count and j != k):
        raise InputError(f"bond atoms {j}, {k}: give two different 0-based atom indices below {count}")
    moving = np.unique(np.asarray(moving_atoms, dtype=int))
    if len(moving) == 0 or moving.min() < 0 or moving.max() >= count:
        raise InputError(f"moving atoms {list(moving)}: give 0-based atom indices below {count}")
    if k not in moving or j in moving:
        raise InputError(f"moving atoms must contain atom {k} and not atom {j}: pass the side of k of bond {j}-{k}")
    fixed = np.setdiff1d(np.arange(count), moving)
    bond = coords[k] - coords[j]
    if np.linalg.norm(bond) < 1e-8:
        raise InputError(f"atoms {j} and {k} coincide: check the geometry")

    if definition == "projected":
        displacement = internal_rotation(coords, j, k, moving)
        root_m = np.sqrt(masses)[:, np.newaxis]
        centred = coords - masses @ coords / masses.sum()
        rigid = [root_m * np.tile(axis, (count, 1)) for axis in np.eye(3)]
        rigid += [root_m * np.cross(axis, centred) for axis in np.eye(3)]
        basis = orthonormal_rows(np.array([r.ravel() for r in rigid]))
        weighted = (root_m * displacement).ravel()
        weighted = weighted - basis.T @ (basis @ weighted)
        inertia = float(weighted @ weighted)
        if inertia <= 1e-12 * float(masses @ np.sum((coords - coords[k]) ** 2, axis=1)):
            raise InputError("turning the fragments moves no mass relative to each other: no torsion to treat")
        return inertia
    if definition == "I(2,3)":
        origin = masses[fixed] @ coords[fixed] / masses[fixed].sum()
        axis = masses[moving] @ coords[moving] / masses[moving].sum() - origin
    elif definition == "I(2,1)":
        origin, axis = coords[j], bond
    else:
        raise InputError(f"definition {definition!r}: use 'I(2,3)', 'I(2,1)' or 'projected'")
    length = np.linalg.norm(axis)
    if length < 1e-8:
        raise InputError("the fragments' centres of mass coincide, so they define no axis: use definition 'I(2,1)'")
    unit = axis / length

    def moment(atoms):
        r = coords[atoms] - origin
        perpendicular = r - np.outer(r @ unit, unit)
        return float(masses[atoms] @ np.sum(perpendicular**2, axis=1))

    first, second = moment(fixed), moment(moving)
    if first <= 0.0 or second <= 0.0:
        raise InputError("a fragment lies on the rotation axis and has no moment of inertia: no torsion to treat")
    return first * second / (first + second)


def rotational_constant_kcal_mol(inertia_amu_bohr2):
    """B = hbar^2 / (2 I) in kcal/mol for a moment of inertia in amu Bohr^2."""
    return _B_KCAL_MOL_AMU_BOHR2 / _check_inertia(inertia_amu_bohr2)


# -- levels ---------------------------------------------------------------------------------------
def _series_range(series):
    """(min, max) of V over the circle, kcal/mol: a 0.1 deg grid and the series' stationary points."""
    values = list(series.value(np.arange(-180.0, 180.0, 0.1)))
    values += [p.energy_kcal_mol for p in stationary_points(series, min_depth_kcal_mol=0.0)]
    return float(min(values)), float(max(values))


def default_basis_size(series, inertia_amu_bohr2, window_kcal_mol=DEFAULT_WINDOW_KCAL_MOL):
    """Starting M for levels up to E_0 + window (kcal/mol): m_cl + 6 sqrt(m_cl) + 2 order + 8.

    m_cl = sqrt(K / B) is the largest |m| a classical rotor reaches with kinetic energy
    K = (c_0 - V_min) + window, an upper bound since E_0 <= c_0 (the mean of V, the energy of
    the m = 0 function). Beyond m_cl a level's coefficients decay faster than exponentially;
    the margin covers that tail. torsional_levels then checks convergence and enlarges M.
    """
    b = rotational_constant_kcal_mol(inertia_amu_bohr2)
    v_min, _ = _series_range(series)
    m_cl = math.sqrt(max(series.constant - v_min + window_kcal_mol, 0.0) / b)
    return int(math.ceil(m_cl + 6.0 * math.sqrt(m_cl) + 2 * series.order + 8))


def _is_mirror(series):
    """True when V(phi) = V(-phi): every sin coefficient below 1e-9 of the largest coefficient."""
    scale = max([abs(x) for x in series.cos + series.sin] + [1e-300])
    return all(abs(s) <= _MIRROR_TOL * scale for s in series.sin)


def _even_part(series, d):
    """A(d) = Re <m + d|V|m>: c_0 at d = 0, a_|d|/2 for 1 <= |d| <= order, else 0 (kcal/mol)."""
    d = np.abs(d)
    a = np.concatenate([[series.constant], 0.5 * np.array(series.cos, dtype=float)])
    return np.where(d <= series.order, a[np.minimum(d, series.order)], 0.0)


def _odd_part(series, d):
    """S(d) = Im <m + d|V|m>: -b_d/2 for 1 <= d <= order, +b_|d|/2 for -order <= d <= -1, else 0."""
    b = np.concatenate([[0.0], 0.5 * np.array(series.sin, dtype=float)])
    inside = np.abs(d) <= series.order
    return np.where(inside, -np.sign(d) * b[np.minimum(np.abs(d), series.order)], 0.0)


def _real_hamiltonian(series, b, kinds, ms, width):
    """H (symmetric, banded: elements more than width off the diagonal vanish) in a real basis:
    kinds 0 = 1/sqrt(2 pi), 1 = cos(m phi)/sqrt(pi), 2 = sin(m phi)/sqrt(pi).

    With A and S the real and imaginary parts of the plane-wave elements <m'|V|m> = A(m' - m) +
    i S(m' - m): <c_m'|V|c_m> = A(m' - m) + A(m' + m), <s_m'|V|s_m> = A(m' - m) - A(m' + m),
    <c_m'|V|s_m> = S(m' - m) - S(m' + m), <1|V|c_m> = sqrt(2) A(m), <1|V|s_m> = -sqrt(2) S(m),
    <1|V|1> = c_0; kinetic B m^2 on the diagonal.
    """
    size = len(kinds)
    hamiltonian = np.zeros((size, size))
    root2 = math.sqrt(2.0)
    for p in range(min(width, size - 1) + 1):
        col = np.arange(size - p)
        row = col + p
        ki, kj, mi, mj = kinds[row], kinds[col], ms[row], ms[col]
        plus, minus = mi + mj, mi - mj
        value = np.zeros(len(col))
        value = np.where((ki == 1) & (kj == 1), _even_part(series, minus) + _even_part(series, plus), value)
        value = np.where((ki == 2) & (kj == 2), _even_part(series, minus) - _even_part(series, plus), value)
        value = np.where((ki == 1) & (kj == 2), _odd_part(series, minus) - _odd_part(series, plus), value)
        value = np.where((ki == 2) & (kj == 1), _odd_part(series, -minus) - _odd_part(series, plus), value)
        value = np.where((ki == 0) & (kj == 0), series.constant, value)
        value = np.where((ki == 0) & (kj == 1), root2 * _even_part(series, mj), value)
        value = np.where((ki == 1) & (kj == 0), root2 * _even_part(series, mi), value)
        value = np.where((ki == 0) & (kj == 2), -root2 * _odd_part(series, mj), value)
        value = np.where((ki == 2) & (kj == 0), -root2 * _odd_part(series, mi), value)
        hamiltonian[row, col] = hamiltonian[col, row] = value
    hamiltonian[np.arange(size), np.arange(size)] += b * ms.astype(float) ** 2
    return hamiltonian


def _real_bases(m_max, mirror):
    """[(kinds, ms)] of the real basis up to m_max: two parity blocks if V is even, else one interleaved."""
    m = np.arange(1, m_max + 1)
    if mirror:
        return [(np.concatenate([[0], np.ones(m_max, int)]), np.concatenate([[0], m])),
                (np.full(m_max, 2), m)]
    return [(np.concatenate([[0], np.tile([1, 2], m_max)]), np.concatenate([[0], np.repeat(m, 2)]))]


def _solve(series, b, m_max, upper_kcal_mol):
    """Levels below upper_kcal_mol and their plane-wave coefficients (2M + 1, levels), M = m_max."""
    mirror = _is_mirror(series)
    width = series.order if mirror else 2 * series.order + 1
    energies, columns = [], []
    for kinds, ms in _real_bases(m_max, mirror):
        values, vectors = np.linalg.eigh(_real_hamiltonian(series, b, kinds, ms, width))
        keep = values <= upper_kcal_mol
        values, vectors = values[keep], vectors[:, keep]
        # back to exp(i m phi)/sqrt(2 pi): c_0 = <1|psi>, c_+-m = (alpha_m -+ i beta_m)/sqrt(2)
        coefficients = np.zeros((2 * m_max + 1, len(values)), dtype=complex)
        for kind, sign in ((1, 1.0), (2, -1j)):
            rows = np.flatnonzero(kinds == kind)
            coefficients[m_max + ms[rows]] += sign * vectors[rows] / math.sqrt(2.0)
            coefficients[m_max - ms[rows]] += np.conj(sign) * vectors[rows] / math.sqrt(2.0)
        coefficients[m_max] += vectors[kinds == 0].sum(axis=0)
        energies.append(values)
        columns.append(coefficients)
    energies = np.concatenate(energies)
    order = np.argsort(energies, kind="stable")
    return energies[order], np.hstack(columns)[:, order]


def torsional_levels(series, inertia_amu_bohr2, basis_size=None, window_kcal_mol=DEFAULT_WINDOW_KCAL_MOL):
    """Levels E_i (kcal/mol, ascending, on the series' scale) and eigenvectors of the torsion.

    Solves H = -B d^2/dphi^2 + V(phi), B = hbar^2/(2 I), V = c_0 + sum_n a_n cos(n phi) +
    b_n sin(n phi), in the basis exp(i m phi)/sqrt(2 pi), m = -M..M. Matrix elements in closed
    form: <m|H|m> = B m^2 + c_0 and <m + n|H|m> = (a_n - i b_n)/2, <m - n|H|m> = (a_n + i b_n)/2
    (cos n phi and sin n phi couple m with m +- n). Because H is real, it is diagonalised in
    the equivalent real basis 1, cos(m phi), sin(m phi) (LAPACK's symmetric solver; two
    separate parity blocks when V(phi) = V(-phi)). Returned: every level with E_i <= E_0 +
    window_kcal_mol, and the eigenvectors as plane-wave coefficients, columns c[:, i] of shape
    (2M + 1, levels), row r for m = r - M, normalised (sum |c_m|^2 = 1 = the integral of
    |psi|^2 over the circle).

    basis_size = M, the largest |m| (2M + 1 functions). By default M starts at
    default_basis_size and is raised by half until every returned level has |c_m| <= 1e-10
    in its outermost max(order, 1) shells (the truncation is variational and its eigenvalue
    error of the order of the coupling times |c_edge|^2); a given M is used as it is.
    """
    b = rotational_constant_kcal_mol(inertia_amu_bohr2)
    if not (_is_number(window_kcal_mol) and window_kcal_mol >= 0):
        raise InputError(f"energy window {window_kcal_mol!r} kcal/mol: give a finite value >= 0")
    automatic = basis_size is None
    if automatic:
        m_max = default_basis_size(series, inertia_amu_bohr2, window_kcal_mol)
    else:
        if not (isinstance(basis_size, (int, np.integer)) and basis_size >= 1):
            raise InputError(f"basis size {basis_size!r}: give the largest |m| as an integer >= 1")
        m_max = int(basis_size)
    shells = max(series.order, 1)
    while True:
        # E_0 <= c_0 (the energy of the m = 0 function), so c_0 + window bounds every level wanted
        energies, vectors = _solve(series, b, m_max, series.constant + window_kcal_mol)
        keep = energies <= energies[0] + window_kcal_mol
        energies, vectors = energies[keep], vectors[:, keep]
        edge = max(np.abs(vectors[:shells]).max(), np.abs(vectors[-shells:]).max())
        if not automatic or edge <= _EDGE_AMPLITUDE:
            return energies, vectors
        if m_max >= _MAX_M:
            raise InputError(f"the torsional levels need more than {_MAX_M} plane waves: "
                             "check the moment of inertia (amu Bohr^2) and the profile (kcal/mol)")
        m_max = min(_MAX_M, int(math.ceil(1.5 * m_max)))


# -- where the levels are -------------------------------------------------------------------------
def interval_weights(eigenvectors, lower_deg, upper_deg):
    """Probability of each level (column) between two angles, lower_deg < upper_deg <= lower_deg + 360.

    Closed form: with |psi|^2 = (1/2 pi) sum_d A_d exp(i d phi), A_d = sum_m c_m conj(c_{m-d})
    (an autocorrelation, computed by FFT), the integral over [lo, hi] is
    (1/2 pi) [A_0 (hi - lo) + sum_{d != 0} A_d (exp(i d hi) - exp(i d lo)) / (i d)].
    """
    vectors = np.asarray(eigenvectors)
    if vectors.ndim == 1:
        vectors = vectors[:, np.newaxis]
    rows = vectors.shape[0]
    if rows % 2 != 1:
        raise InputError(f"eigenvectors have {rows} rows: expected 2M + 1 (m = -M..M)")
    if not lower_deg < upper_deg <= lower_deg + 360.0:
        raise InputError(f"interval {lower_deg}..{upper_deg} deg: need lower < upper <= lower + 360")
    lo, hi = math.radians(lower_deg), math.radians(upper_deg)
    d = np.fft.fftfreq(2 * rows, 1.0 / (2 * rows)).astype(int)  # 0, 1, ..., -1 (FFT order)
    nonzero = d != 0
    kernel = np.empty(len(d), dtype=complex)
    kernel[~nonzero] = hi - lo
    kernel[nonzero] = (np.exp(1j * d[nonzero] * hi) - np.exp(1j * d[nonzero] * lo)) / (1j * d[nonzero])
    weights = []
    for start in range(0, vectors.shape[1], _AUTOCORRELATION_CHUNK):
        block = vectors[:, start:start + _AUTOCORRELATION_CHUNK]
        spectrum = np.fft.fft(block, n=2 * rows, axis=0)
        autocorrelation = np.fft.ifft(np.abs(spectrum) ** 2, axis=0)  # [d] = sum_m c_{m+d} conj(c_m)
        weights.append(np.real(kernel @ autocorrelation) / (2.0 * math.pi))
    return np.clip(np.concatenate(weights), 0.0, 1.0)


def region_weights(eigenvectors, half_width_deg=SCIS_LIMIT_DEG):
    """Probability of each level in |phi| < half_width_deg; by default the s-cis region of thermo.is_s_cis."""
    if not 0 < half_width_deg <= 180:
        raise InputError(f"half width {half_width_deg!r} deg: give a value in (0, 180]")
    return interval_weights(eigenvectors, -half_width_deg, half_width_deg)


# -- thermodynamics -------------------------------------------------------------------------------
@dataclass(frozen=True)
class RotorPopulations:
    """Quantum hindered-rotor populations of the torsion at one temperature (K).

    s_cis = sum_i w_i P_i / sum_i w_i with w_i = exp(-(E_i - E_0)/RT) and P_i the probability
    of level i in |phi| < 90 deg; s_trans = 1 - s_cis; scis_window likewise for |phi| <=
    scis_window_deg. delta_g_kcal_mol = -RT ln(s_cis/s_trans) (+-inf when one underflows).
    partition_function = sum_i w_i (levels counted from the ground level); zpe_kcal_mol =
    E_0 - min V; free_energy_kcal_mol = zpe - RT ln q, the torsion's Helmholtz energy above
    the profile's minimum. levels: how many levels entered the sums; basis_size: M.
    """

    temperature_k: float
    s_cis: float
    s_trans: float
    scis_window: float
    scis_window_deg: float
    delta_g_kcal_mol: float
    partition_function: float
    zpe_kcal_mol: float
    free_energy_kcal_mol: float
    levels: int
    basis_size: int


def _level_average(energies, weights, rt):
    """The Boltzmann average at RT (kcal/mol) of per-level weights over levels energies (kcal/mol,
    ascending), and the partition function counted from the ground level."""
    boltzmann = np.exp(-(energies - energies[0]) / rt)
    q = float(boltzmann.sum())
    return float(boltzmann @ weights) / q, q


def rotor_populations(series, inertia_amu_bohr2, temperature_k, scis_window_deg=30.0):
    """Boltzmann-weighted s-cis/s-trans split of the torsional levels at temperature_k (K).

    Levels up to E_0 + 40 RT enter the sums (what is left out weighs < e^-40 each). Returns a
    RotorPopulations; series in kcal/mol, inertia in amu Bohr^2, window in degrees.
    """
    t = _check_temperature(temperature_k)
    if not 0 < scis_window_deg <= 90:
        raise InputError(f"s-cis window {scis_window_deg!r} deg: give a half width in (0, 90] degrees")
    rt = rt_kcal_mol(t)
    energies, vectors = torsional_levels(series, inertia_amu_bohr2, window_kcal_mol=BOLTZMANN_WINDOW_RT * rt)
    scis_weight, q = _level_average(energies, region_weights(vectors), rt)
    window, _ = _level_average(energies, region_weights(vectors, scis_window_deg), rt)
    trans_weight = max(0.0, 1.0 - scis_weight)
    zpe = float(energies[0]) - _series_range(series)[0]
    return RotorPopulations(
        temperature_k=t,
        s_cis=scis_weight,
        s_trans=trans_weight,
        scis_window=window,
        scis_window_deg=float(scis_window_deg),
        delta_g_kcal_mol=region_delta_g(t, scis_weight, trans_weight),
        partition_function=q,
        zpe_kcal_mol=zpe,
        free_energy_kcal_mol=zpe - rt * math.log(q),
        levels=len(energies),
        basis_size=(vectors.shape[0] - 1) // 2,
    )


def s_cis_over_temperatures(series, inertia_amu_bohr2, temperatures_k):
    """The rotor's s-cis fraction (rotor_populations(...).s_cis) at each temperature (K), from one
    set of levels: those within 40 RT of the ground level at the highest temperature, so every
    lower temperature has all it needs; one eigenproblem instead of one per temperature."""
    temperatures = [_check_temperature(t) for t in temperatures_k]
    if not temperatures:
        return []
    energies, vectors = torsional_levels(series, inertia_amu_bohr2,
                                         window_kcal_mol=BOLTZMANN_WINDOW_RT * rt_kcal_mol(max(temperatures)))
    weights = region_weights(vectors)
    return [_level_average(energies, weights, rt_kcal_mol(t))[0] for t in temperatures]


@dataclass(frozen=True)
class ConformerFreeEnergies:
    """Free energies (kcal/mol, on the profile's scale) of the s-cis and s-trans regions at temperature_k.

    torsion_*: -RT ln sum_i P_i exp(-E_i/RT) over the torsional levels, weighted by their
    probability P_i in the region; other_modes_*: the caller's free-energy correction of all
    other modes at the region's lowest minimum; g_* = torsion_* + other_modes_*.
    delta_g_kcal_mol = g_s_cis - g_s_trans; s_cis, s_trans the resulting fractions.
    """

    temperature_k: float
    torsion_s_cis_kcal_mol: float
    torsion_s_trans_kcal_mol: float
    other_modes_s_cis_kcal_mol: float
    other_modes_s_trans_kcal_mol: float
    g_s_cis_kcal_mol: float
    g_s_trans_kcal_mol: float
    delta_g_kcal_mol: float
    s_cis: float
    s_trans: float


def conformer_free_energies(level_energies_kcal_mol, scis_weights, other_modes_s_cis_kcal_mol,
                            other_modes_s_trans_kcal_mol, temperature_k):
    """Conformer free energies from torsional levels plus the other modes' free energies.

    For region R (s-cis |phi| < 90 deg, s-trans the rest):

        G_R = -RT ln sum_i P_{i,R} exp(-E_i / RT) + G_other(R)

    with E_i the torsional levels (kcal/mol, on the profile's scale: they already hold the
    relaxed electronic energy along the torsion and the torsional zero-point energy), P_{i,s-cis}
    = scis_weights[i] (region_weights), P_{i,s-trans} = 1 - P_{i,s-cis}, and G_other(R) the
    harmonic or quasi-harmonic free-energy correction (ZPE + thermal energy - TS; translation
    and rotation may be included, they nearly cancel) of every other mode at the region's
    lowest minimum, the torsion projected out of its Hessian, computed by the caller in kcal/mol
    at the same temperature. The levels should reach E_0 + 40 RT. Populations follow as
    exp(-G_R/RT) / sum_R' exp(-G_R'/RT). Returns a ConformerFreeEnergies.
    """
    t = _check_temperature(temperature_k)
    energies = np.asarray(level_energies_kcal_mol, dtype=float).ravel()
    weights = np.asarray(scis_weights, dtype=float).ravel()
    if energies.size == 0 or energies.shape != weights.shape:
        raise InputError(f"{energies.size} levels and {weights.size} weights: give one s-cis weight per level")
    if not (np.all(np.isfinite(energies)) and np.all((weights >= 0) & (weights <= 1))):
        raise InputError("levels must be finite and s-cis weights between 0 and 1")
    others = (float(other_modes_s_cis_kcal_mol), float(other_modes_s_trans_kcal_mol))
    if not all(math.isfinite(g) for g in others):
        raise InputError("the other modes' free-energy corrections must be finite kcal/mol values")
    rt = rt_kcal_mol(t)

    def torsion(region_weights_):
        weighted = region_weights_ > 0  # levels of weight 0 stay out (exp of a far-off level would overflow)
        if not weighted.any():
            return math.inf
        exponents = -energies[weighted] / rt
        top = exponents.max()
        return float(-rt * (top + math.log(np.sum(region_weights_[weighted] * np.exp(exponents - top)))))

    torsion_cis, torsion_trans = torsion(weights), torsion(1.0 - weights)
    g_cis, g_trans = torsion_cis + others[0], torsion_trans + others[1]
    lowest = min(g_cis, g_trans)
    cis_factor = math.exp(-(g_cis - lowest) / rt)
    trans_factor = math.exp(-(g_trans - lowest) / rt)
    total = cis_factor + trans_factor
    return ConformerFreeEnergies(
        temperature_k=t,
        torsion_s_cis_kcal_mol=torsion_cis,
        torsion_s_trans_kcal_mol=torsion_trans,
        other_modes_s_cis_kcal_mol=others[0],
        other_modes_s_trans_kcal_mol=others[1],
        g_s_cis_kcal_mol=g_cis,
        g_s_trans_kcal_mol=g_trans,
        delta_g_kcal_mol=g_cis - g_trans,
        s_cis=cis_factor / total,
        s_trans=trans_factor / total,
    )


# -- wells ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class WellFundamental:
    """The lowest torsional levels localised in one well (or in a mirror pair of wells).

    angle_deg: the minimum (for a pair, the one at +|phi|); mirror_pair: the well and its image
    at -phi are treated together (V(phi) = V(-phi)); s_cis: thermo.is_s_cis of the minimum;
    minimum_kcal_mol: V there; harmonic_cm1: sqrt(2 B V'') at the minimum.
    levels_kcal_mol / localisation: the lowest levels with more than half their probability
    in the well's basin(s) (between the neighbouring maxima) and that probability.
    fundamental_cm1: E(v=1) - E(v=0); for a pair whose ground level lies below the barrier
    between its two wells, the levels come as tunnelling doublets and it is the difference of
    the doublets' means, tunnelling_splitting_cm1 the ground doublet's splitting; above that
    barrier the pair is one well and the splitting is NaN. NaN where too few levels are localised.
    """

    angle_deg: float
    mirror_pair: bool
    s_cis: bool
    minimum_kcal_mol: float
    harmonic_cm1: float
    levels_kcal_mol: tuple[float, ...]
    localisation: tuple[float, ...]
    fundamental_cm1: float
    tunnelling_splitting_cm1: float


def _basins(series):
    """[(minimum, [(lower_deg, upper_deg), ...], inner_barrier_kcal_mol or None)] with mirror pairs merged."""
    points = stationary_points(series)
    minima = [p for p in points if p.kind == "minimum"]
    maxima = [p for p in points if p.kind == "maximum"]
    if not minima or not maxima:
        return []
    max_angles = np.array([p.angle_deg for p in maxima])
    basins = []
    for minimum in minima:
        below = max_angles[max_angles < minimum.angle_deg]
        above = max_angles[max_angles > minimum.angle_deg]
        lower = below.max() if len(below) else max_angles.max() - 360.0
        upper = above.min() if len(above) else max_angles.min() + 360.0
        basins.append((minimum, (float(lower), float(upper))))
    mirror = _is_mirror(series)
    wells, used = [], set()
    for index, (minimum, interval) in enumerate(basins):
        if index in used:
            continue
        partner = None
        if mirror and abs(abs(minimum.angle_deg) - 90.0) < 90.0 - _PAIR_TOL_DEG:
            for other, (other_min, _) in enumerate(basins):
                if other != index and other not in used and \
                        abs(wrap_deg(other_min.angle_deg + minimum.angle_deg)) < _PAIR_TOL_DEG:
                    partner = other
        if partner is None:
            wells.append((minimum, [interval], None))
            used.add(index)
            continue
        used.update((index, partner))
        plus = minimum if minimum.angle_deg > 0 else basins[partner][0]
        # the barrier between the two images: the highest V on the arc joining them through 0 deg
        # (an s-cis pair) or through 180 deg
        if is_s_cis(plus.angle_deg):
            arc = np.linspace(-plus.angle_deg, plus.angle_deg, 3601)
        else:
            arc = np.linspace(plus.angle_deg, 360.0 - plus.angle_deg, 3601)
        inner = float(series.value(arc).max())
        wells.append((plus, [interval, basins[partner][1]], inner))
    return wells


def well_fundamentals(series, inertia_amu_bohr2, basis_size=None):
    """Torsional fundamentals (cm^-1) of every well of the profile, one WellFundamental per well.

    Wells are the basins of profile.stationary_points' minima, between the neighbouring
    maxima; with V(phi) = V(-phi) a minimum and its image at -phi form one mirror pair. A level
    belongs to a well when more than half of its probability (interval_weights) lies in the
    well's basin(s). Levels up to the profile's maximum plus 1 kcal/mol are computed.
    """
    b = rotational_constant_kcal_mol(inertia_amu_bohr2)
    v_min, v_max = _series_range(series)
    energies, vectors = torsional_levels(series, inertia_amu_bohr2, basis_size, window_kcal_mol=v_max - v_min + 1.0)
    results = []
    for minimum, intervals, inner in _basins(series):
        probability = sum(interval_weights(vectors, lower, upper) for lower, upper in intervals)
        local = np.flatnonzero(probability > 0.5)
        levels = energies[local]
        doublets = inner is not None and len(levels) >= 1 and levels[0] < inner
        needed = 4 if doublets else 2
        levels, local = levels[:needed], local[:needed]
        fundamental = splitting = math.nan
        if doublets:
            if len(levels) >= 2:
                splitting = (levels[1] - levels[0]) * KCAL_MOL_CM1
            if len(levels) == 4:
                fundamental = 0.5 * (levels[2] + levels[3] - levels[0] - levels[1]) * KCAL_MOL_CM1
        elif len(levels) == 2:
            fundamental = (levels[1] - levels[0]) * KCAL_MOL_CM1
        curvature = float(series.second_derivative(minimum.angle_deg))
        results.append(WellFundamental(
            angle_deg=float(minimum.angle_deg),
            mirror_pair=inner is not None,
            s_cis=is_s_cis(minimum.angle_deg),
            minimum_kcal_mol=float(minimum.energy_kcal_mol),
            harmonic_cm1=math.sqrt(max(2.0 * b * curvature, 0.0)) * KCAL_MOL_CM1,
            levels_kcal_mol=tuple(float(e) for e in levels),
            localisation=tuple(float(p) for p in probability[local]),
            fundamental_cm1=float(fundamental),
            tunnelling_splitting_cm1=float(splitting),
        ))
    return tuple(results)


def tunnelling_splitting(series, inertia_amu_bohr2, angle_deg=None, basis_size=None):
    """Splitting (cm^-1) of the ground tunnelling doublet of a mirror pair of wells at +-angle_deg.

    The two lowest levels localised in the pair (well_fundamentals); by default the pair with
    the lowest minimum. NaN if the ground level lies above the barrier between the two wells.
    Raises InputError if the profile has no such pair (V(phi) = V(-phi) with minima off 0 and 180).
    """
    pairs = [w for w in well_fundamentals(series, inertia_amu_bohr2, basis_size) if w.mirror_pair]
    if angle_deg is not None:
        pairs = [w for w in pairs if abs(abs(wrap_deg(angle_deg)) - w.angle_deg) < 0.5]
    if not pairs:
        where = "" if angle_deg is None else f" at +-{abs(angle_deg):g} deg"
        raise InputError(f"the profile has no mirror pair of wells{where}: a splitting needs V(phi) = V(-phi) "
                         "with minima away from 0 and 180 deg")
    return min(pairs, key=lambda w: w.minimum_kcal_mol).tunnelling_splitting_cm1


# -- rates ----------------------------------------------------------------------------------------
def wigner_transmission(imaginary_frequency_cm1, temperature_k):
    """Wigner's tunnelling factor kappa = 1 + (1/24) (h c nu / k T)^2 (nu in cm^-1, sign ignored)."""
    t = _check_temperature(temperature_k)
    if not _is_number(imaginary_frequency_cm1):
        raise InputError(f"imaginary frequency {imaginary_frequency_cm1!r} cm^-1: give a finite wavenumber")
    u = PLANCK_J_S * SPEED_OF_LIGHT_M_S * 100.0 * abs(imaginary_frequency_cm1) / (BOLTZMANN_J_K * t)
    return 1.0 + u * u / 24.0


def eyring_rate(delta_g_kcal_mol, temperature_k, imaginary_frequency_cm1=None):
    """Rate constant (s^-1): k = kappa (k_B T / h) exp(-dG / RT), dG the free-energy barrier in kcal/mol.

    kappa = wigner_transmission(imaginary_frequency_cm1, T) where the barrier's imaginary
    frequency is given (cm^-1, either sign), else 1.
    """
    t = _check_temperature(temperature_k)
    if not _is_number(delta_g_kcal_mol):
        raise InputError(f"barrier {delta_g_kcal_mol!r} kcal/mol: give a finite free energy of activation")
    kappa = 1.0 if imaginary_frequency_cm1 is None else wigner_transmission(imaginary_frequency_cm1, t)
    return kappa * BOLTZMANN_J_K * t / PLANCK_J_S * math.exp(-delta_g_kcal_mol / rt_kcal_mol(t))


def half_life_s(rate_per_s):
    """Half-life ln 2 / k (s) of a first-order process with rate constant k (s^-1)."""
    if not (_is_number(rate_per_s) and rate_per_s > 0):
        raise InputError(f"rate {rate_per_s!r} s^-1: give a finite rate constant above 0")
    return math.log(2.0) / rate_per_s
