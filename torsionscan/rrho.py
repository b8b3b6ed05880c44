"""Harmonic frequencies from a Cartesian Hessian and ideal-gas RRHO thermochemistry.

Inputs are in atomic units where they come from a calculation (Hessian in Hartree/Bohr^2,
coordinates in Bohr) and masses in unified atomic mass units (amu); frequencies are
wavenumbers in cm^-1, imaginary ones given as negative numbers. Thermochemical results are
in kcal/mol and cal/(mol K) for one mole of ideal gas; temperatures in kelvin, pressures in Pa.

Vibrational entropies of low modes can be given a quasi-harmonic treatment: each mode's
entropy is interpolated between the harmonic-oscillator value and that of a free rotor of
comparable moment of inertia (S. Grimme, Chem. Eur. J. 2012, 18, 9955). The zero-point
energy and the enthalpy always stay harmonic.
"""

import math
from dataclasses import dataclass

import numpy as np

from .units import (
    AMU_KG, AVOGADRO_PER_MOL, BOHR_M, BOLTZMANN_J_K, CAL_J, GAS_CONSTANT_J_MOL_K, HARTREE_J, PLANCK_J_S,
    SPEED_OF_LIGHT_M_S, rt_kcal_mol,
)

# sqrt(eigenvalue in Hartree/(Bohr^2 amu)) -> wavenumber in cm^-1
AU_TO_CM1 = math.sqrt(HARTREE_J / (BOHR_M**2 * AMU_KG)) / (2.0 * math.pi * SPEED_OF_LIGHT_M_S * 100.0)

# Average moment of inertia (kg m^2) that caps the free-rotor moment of very soft modes
QUASI_RRHO_AVERAGE_MOMENT_KG_M2 = 1e-44

# Singular values (of unit-normalised projector columns) below this count as dependent; a
# molecule whose rotations span only two directions at this tolerance is treated as linear.
_RANK_TOL = 1e-6


def _as_geometry(masses_amu, coords_bohr):
    masses = np.asarray(masses_amu, dtype=float).ravel()
    coords = np.asarray(coords_bohr, dtype=float).reshape(-1, 3)
    if len(masses) != len(coords):
        raise ValueError(f"{len(masses)} masses for {len(coords)} atoms")
    if len(masses) == 0 or not np.all(np.isfinite(masses)) or np.any(masses <= 0.0):
        raise ValueError("masses must be finite and positive, at least one atom")
    if not np.all(np.isfinite(coords)):
        raise ValueError("coordinates must be finite")
    return masses, coords


def _rigid_body_mass_weighted(masses, coords):
    """Columns (3N, 6): translations and rotations about the centre of mass, mass-weighted."""
    n = len(masses)
    sqrt_m = np.sqrt(masses)
    centred = coords - masses @ coords / masses.sum()
    columns = []
    for axis in np.eye(3):
        columns.append((sqrt_m[:, None] * np.tile(axis, (n, 1))).ravel())
    for axis in np.eye(3):
        columns.append((sqrt_m[:, None] * np.cross(axis, centred)).ravel())
    return np.array(columns).T


def _orthonormal_columns(columns):
    """(orthonormal basis of the span, orthonormal basis of its complement), both as columns."""
    dim = columns.shape[0]
    norms = np.linalg.norm(columns, axis=0)
    keep = norms > _RANK_TOL * max(norms.max(initial=0.0), 1e-300)
    if not np.any(keep):
        return np.zeros((dim, 0)), np.eye(dim)
    unit = columns[:, keep] / norms[keep]
    u, s, _ = np.linalg.svd(unit, full_matrices=True)
    rank = int(np.sum(s > _RANK_TOL * s[0]))
    return u[:, :rank], u[:, rank:]


def internal_basis(masses_amu, coords_bohr, extra_directions=None):
    """(3N, 3N-6-k) orthonormal columns spanning the mass-weighted displacements that neither
    translate nor rotate the structure (3N-5 for a linear one) nor change, to first order, the
    constraints whose Cartesian gradients are extra_directions (each 3N or (N, 3), any units):
    the space the frequencies live in. A constraint gradient g is removed as M^-1/2 g."""
    masses, coords = _as_geometry(masses_amu, coords_bohr)
    columns = _rigid_body_mass_weighted(masses, coords)
    if extra_directions is not None:
        extra = np.asarray(extra_directions, dtype=float)
        if extra.size:
            extra = extra.reshape(-1, 3 * len(masses))
            if not np.all(np.isfinite(extra)):
                raise ValueError("extra directions must be finite")
            columns = np.hstack([columns, (extra * np.repeat(1.0 / np.sqrt(masses), 3)).T])
    return _orthonormal_columns(columns)[1]


def harmonic_frequencies(hessian_hartree_bohr2, masses_amu, coords_bohr, extra_directions=None):
    """Harmonic frequencies (cm^-1) and normal modes from a Cartesian Hessian.

    hessian_hartree_bohr2: (3N, 3N) second derivatives in Hartree/Bohr^2 (symmetrised here);
    masses_amu: N masses in amu; coords_bohr: (N, 3) or 3N coordinates in Bohr.
    extra_directions: optional Cartesian vectors (each 3N or (N, 3)) that are gradients of
    constraints, e.g. of a frozen torsion, in any units. A constraint gradient g is removed
    in mass-weighted coordinates as M^-1/2 g, so the returned modes satisfy g . x = 0 and
    leave the constraint unchanged to first order.

    The mass-weighted Hessian is diagonalised in the orthogonal complement of the
    translations and rotations about the centre of mass (two rotations for a linear
    molecule) and the extra directions, so those are exactly removed: 3N-6 values (3N-5
    linear), minus one per independent extra direction.

    Returns (frequencies_cm1, modes): frequencies ascending, imaginary ones as negative
    numbers; modes of shape (n_modes, 3N), each a unit-length Cartesian (not mass-weighted)
    displacement vector.
    """
    masses, coords = _as_geometry(masses_amu, coords_bohr)
    dim = 3 * len(masses)
    hessian = np.asarray(hessian_hartree_bohr2, dtype=float)
    if hessian.shape != (dim, dim):
        raise ValueError(f"Hessian must be ({dim}, {dim}) for {len(masses)} atoms, got {hessian.shape}")
    if not np.all(np.isfinite(hessian)):
        raise ValueError("Hessian must be finite")
    hessian = 0.5 * (hessian + hessian.T)

    inv_sqrt_m = np.repeat(1.0 / np.sqrt(masses), 3)
    hessian_mw = hessian * np.outer(inv_sqrt_m, inv_sqrt_m)

    complement = internal_basis(masses, coords, extra_directions)

    eigenvalues, vectors = np.linalg.eigh(complement.T @ hessian_mw @ complement)
    frequencies = np.sign(eigenvalues) * np.sqrt(np.abs(eigenvalues)) * AU_TO_CM1
    modes = (inv_sqrt_m[:, None] * (complement @ vectors)).T
    if len(modes):
        modes /= np.linalg.norm(modes, axis=1, keepdims=True)
    return frequencies, modes


def principal_moments(masses_amu, coords_bohr):
    """Principal moments of inertia about the centre of mass, ascending, in amu Bohr^2."""
    masses, coords = _as_geometry(masses_amu, coords_bohr)
    centred = coords - masses @ coords / masses.sum()
    r2 = np.sum(centred**2, axis=1)
    tensor = np.eye(3) * np.sum(masses * r2) - np.einsum("i,ij,ik->jk", masses, centred, centred)
    return np.clip(np.linalg.eigvalsh(tensor), 0.0, None)


def quasi_rrho_weight(frequencies_cm1, cutoff_cm1=100.0):
    """Weight of the harmonic entropy, 1 / (1 + (cutoff/nu)^4), for positive nu in cm^-1.

    A cutoff of 0 or None gives 1 (pure harmonic).
    """
    nu = np.asarray(frequencies_cm1, dtype=float)
    if not cutoff_cm1:
        return np.ones_like(nu)
    return 1.0 / (1.0 + (cutoff_cm1 / nu) ** 4)


def _harmonic_terms(nu_cm1, temperature_k):
    """Per-mode ZPE and thermal energy (J/mol) and entropy (J/(mol K)) of harmonic oscillators."""
    energy_quantum = PLANCK_J_S * SPEED_OF_LIGHT_M_S * 100.0 * nu_cm1  # J per molecule
    x = energy_quantum / (BOLTZMANN_J_K * temperature_k)
    one_minus = -np.expm1(-x)  # 1 - e^-x, no overflow for large x
    occupation = x * np.exp(-x) / one_minus  # x / (e^x - 1)
    zpe = 0.5 * AVOGADRO_PER_MOL * energy_quantum
    thermal = GAS_CONSTANT_J_MOL_K * temperature_k * occupation
    entropy = GAS_CONSTANT_J_MOL_K * (occupation - np.log(one_minus))
    return zpe, thermal, entropy


def _free_rotor_entropy(nu_cm1, temperature_k):
    """Per-mode entropy (J/(mol K)) of the free rotor standing in for a mode of nu cm^-1."""
    nu_hz = SPEED_OF_LIGHT_M_S * 100.0 * nu_cm1
    mu = PLANCK_J_S / (8.0 * math.pi**2 * nu_hz)
    b_av = QUASI_RRHO_AVERAGE_MOMENT_KG_M2
    mu_eff = mu * b_av / (mu + b_av)
    arg = 8.0 * math.pi**3 * mu_eff * BOLTZMANN_J_K * temperature_k / PLANCK_J_S**2
    return GAS_CONSTANT_J_MOL_K * (0.5 + 0.5 * np.log(arg))


@dataclass(frozen=True)
class Thermo:
    """Ideal-gas RRHO corrections to the electronic energy of one mole of molecules.

    Energies in kcal/mol, entropies in cal/(mol K), temperature in K, pressure in Pa.
    enthalpy_correction = H - E_el = ZPE + thermal vibrational energy + translational (5/2 RT,
    including pV = RT) + rotational (RT linear, 3/2 RT nonlinear, 0 for an atom);
    gibbs_correction = G - E_el = H - T S. vibrational_enthalpy includes the ZPE.
    Imaginary frequencies are left out of every term; excluded_imaginary counts them.
    With a nonzero quasi_harmonic_cutoff_cm1 only the vibrational entropy is quasi-harmonic.
    """

    temperature_k: float
    pressure_pa: float
    zpe_kcal_mol: float
    enthalpy_correction_kcal_mol: float
    entropy_cal_mol_k: float
    gibbs_correction_kcal_mol: float
    translational_enthalpy_kcal_mol: float
    rotational_enthalpy_kcal_mol: float
    vibrational_enthalpy_kcal_mol: float
    translational_entropy_cal_mol_k: float
    rotational_entropy_cal_mol_k: float
    vibrational_entropy_cal_mol_k: float
    linear: bool
    symmetry_number: int
    quasi_harmonic_cutoff_cm1: float
    vibrations_used: int
    excluded_imaginary: int


def rrho_thermo(frequencies_cm1, masses_amu, coords_bohr, temperature_k, pressure_pa=101325.0,
                symmetry_number=1, quasi_harmonic_cutoff_cm1=100.0):
    """Ideal-gas rigid-rotor / harmonic-oscillator thermochemistry at temperature_k (K).

    frequencies_cm1: vibrational wavenumbers in cm^-1 (negative = imaginary, excluded and
    counted); masses_amu: N masses in amu; coords_bohr: (N, 3) geometry in Bohr, used for the
    total mass and the principal moments of inertia; pressure_pa: pressure in Pa for the
    translational entropy (the default is 1 atm; use 1e5 for the 1 bar standard state);
    symmetry_number: rotational symmetry number sigma.

    Translation: Sackur-Tetrode entropy, H = 5/2 RT. Rotation: classical rigid rotor,
    S = R[ln(sqrt(pi)/sigma (T^3/(Ta Tb Tc))^1/2) + 3/2] and H = 3/2 RT (nonlinear) or
    S = R[ln(T/(sigma T_rot)) + 1] and H = RT (linear), with T_x = h^2/(8 pi^2 I_x k).
    Vibration: harmonic oscillators for ZPE, thermal energy and entropy. With
    quasi_harmonic_cutoff_cm1 = nu0 > 0 each mode's entropy is w S_HO + (1 - w) S_rotor with
    w = 1/(1 + (nu0/nu)^4), S_rotor that of a free rotor of moment mu' = mu B/(mu + B),
    mu = h/(8 pi^2 nu), B = 1e-44 kg m^2; ZPE and enthalpy stay harmonic. A cutoff of 0 or
    None is the pure harmonic treatment. Returns a Thermo.
    """
    masses, coords = _as_geometry(masses_amu, coords_bohr)
    if not (math.isfinite(temperature_k) and temperature_k > 0):
        raise ValueError(f"temperature must be a finite number of kelvin > 0, got {temperature_k!r}")
    if not (math.isfinite(pressure_pa) and pressure_pa > 0):
        raise ValueError(f"pressure must be a finite number of pascal > 0, got {pressure_pa!r}")
    if not (symmetry_number >= 1):
        raise ValueError(f"symmetry number must be >= 1, got {symmetry_number!r}")
    cutoff = float(quasi_harmonic_cutoff_cm1 or 0.0)
    if not (math.isfinite(cutoff) and cutoff >= 0):
        raise ValueError(f"quasi-harmonic cutoff must be >= 0 cm^-1, got {quasi_harmonic_cutoff_cm1!r}")
    nu = np.asarray(frequencies_cm1, dtype=float).ravel()
    if not np.all(np.isfinite(nu)) or np.any(nu == 0.0):
        raise ValueError("frequencies must be finite and nonzero (drop translations and rotations)")
    imaginary = int(np.sum(nu < 0.0))
    nu = nu[nu > 0.0]

    t = float(temperature_k)
    r = GAS_CONSTANT_J_MOL_K
    kt = BOLTZMANN_J_K * t

    # translation
    mass_kg = masses.sum() * AMU_KG
    thermal_volume = (2.0 * math.pi * mass_kg * kt / PLANCK_J_S**2) ** 1.5 * kt / pressure_pa
    s_trans = r * (math.log(thermal_volume) + 2.5)
    h_trans = 2.5 * r * t

    # rotation
    moments = principal_moments(masses, coords) * AMU_KG * BOHR_M**2  # kg m^2
    linear = False
    if len(masses) == 1 or moments[2] <= 0.0:
        s_rot = h_rot = 0.0
    else:
        rot_temps = PLANCK_J_S**2 / (8.0 * math.pi**2 * np.clip(moments, 1e-300, None) * BOLTZMANN_J_K)
        linear = math.sqrt(moments[0] / moments[2]) < _RANK_TOL
        if linear:
            s_rot = r * (math.log(t / (symmetry_number * rot_temps[2])) + 1.0)
            h_rot = r * t
        else:
            s_rot = r * (math.log(math.sqrt(math.pi) / symmetry_number
                                  * math.sqrt(t**3 / np.prod(rot_temps))) + 1.5)
            h_rot = 1.5 * r * t

    # vibration
    zpe, thermal, s_ho = _harmonic_terms(nu, t)
    if cutoff > 0.0 and len(nu):
        w = quasi_rrho_weight(nu, cutoff)
        s_modes = w * s_ho + (1.0 - w) * _free_rotor_entropy(nu, t)
    else:
        s_modes = s_ho
    zpe_total = float(np.sum(zpe))
    h_vib = zpe_total + float(np.sum(thermal))
    s_vib = float(np.sum(s_modes))

    kcal = 1.0 / (1000.0 * CAL_J)  # J/mol -> kcal/mol
    cal = 1.0 / CAL_J  # J/(mol K) -> cal/(mol K)
    enthalpy = h_trans + h_rot + h_vib
    entropy = s_trans + s_rot + s_vib
    return Thermo(
        temperature_k=t,
        pressure_pa=float(pressure_pa),
        zpe_kcal_mol=zpe_total * kcal,
        enthalpy_correction_kcal_mol=enthalpy * kcal,
        entropy_cal_mol_k=entropy * cal,
        gibbs_correction_kcal_mol=(enthalpy - t * entropy) * kcal,
        translational_enthalpy_kcal_mol=h_trans * kcal,
        rotational_enthalpy_kcal_mol=h_rot * kcal,
        vibrational_enthalpy_kcal_mol=h_vib * kcal,
        translational_entropy_cal_mol_k=s_trans * cal,
        rotational_entropy_cal_mol_k=s_rot * cal,
        vibrational_entropy_cal_mol_k=s_vib * cal,
        linear=linear,
        symmetry_number=symmetry_number,
        quasi_harmonic_cutoff_cm1=cutoff,
        vibrations_used=len(nu),
        excluded_imaginary=imaginary,
    )


def conformer_populations(free_energies_kcal_mol, temperature_k):
    """Boltzmann fractions exp(-G_i/RT) / sum_j exp(-G_j/RT); G in kcal/mol, T in K.

    Energies are shifted by their minimum first, so large absolute values are safe; +inf
    gives a population of 0.
    """
    g = np.asarray(free_energies_kcal_mol, dtype=float)
    if not (math.isfinite(temperature_k) and temperature_k > 0):
        raise ValueError(f"temperature must be a finite number of kelvin > 0, got {temperature_k!r}")
    if g.size == 0:
        return g.copy()
    if np.any(np.isnan(g)) or np.any(g == -np.inf) or not np.any(np.isfinite(g)):
        raise ValueError("free energies must be finite (or +inf), with at least one finite value")
    weights = np.exp(-(g - g[np.isfinite(g)].min()) / rt_kcal_mol(temperature_k))
    return weights / weights.sum()
