"""Classical Boltzmann populations of the s-cis and s-trans regions of a torsion profile.

The populations are those of a classical one-dimensional Boltzmann distribution,
p(phi) proportional to exp(-E(phi)/RT), over the relaxed (adiabatic) electronic-energy
profile E(phi): all other degrees of freedom are assumed to follow the minimum-energy path,
and the reduced moment of inertia of the torsion is taken as constant, so it cancels. What
they include is the energy difference between the regions and the width of each well along
the torsion itself. What they omit: zero-point energy, vibrational entropy differences
between conformers (the other modes), and quantum effects (torsional level quantisation,
tunnelling). Angles in degrees (0 = s-cis, 180 = s-trans), energies in kcal/mol,
temperatures in kelvin.
"""

import math
from dataclasses import dataclass

import numpy as np

from .units import rt_kcal_mol, wrap_deg

_NODES_PER_PANEL = 8  # Gauss-Legendre nodes in each panel of the composite rule
SCIS_LIMIT_DEG = 90.0  # the s-cis region is |phi| < 90 deg, the s-trans region |phi| > 90 deg


def is_s_cis(angle_deg):
    """True where a dihedral (degrees) lies in the s-cis region, |phi| < 90 deg: the one definition."""
    return abs(float(wrap_deg(angle_deg))) < SCIS_LIMIT_DEG


@dataclass(frozen=True)
class RegionPopulations:
    """Fractions of the population by region at one temperature (K); delta G in kcal/mol.

    s_cis: |phi| < 90 deg; s_trans: |phi| > 90 deg; scis_window: |phi| <= scis_window_deg.
    delta_g_kcal_mol = -RT ln(s_cis / s_trans): positive when s-trans is favoured, +inf or
    -inf when one population underflows to zero.
    """

    temperature_k: float
    s_cis: float
    s_trans: float
    scis_window: float
    scis_window_deg: float
    delta_g_kcal_mol: float


def region_delta_g(temperature_k, s_cis, s_trans):
    """-RT ln(s_cis / s_trans) in kcal/mol from two region weights (any common scale): +inf when
    s_cis is zero, -inf when s_trans is."""
    if s_cis == 0.0:
        return math.inf
    if s_trans == 0.0:
        return -math.inf
    return rt_kcal_mol(temperature_k) * (math.log(s_trans) - math.log(s_cis))


def _composite_gauss_legendre(lower, upper, panels):
    """Nodes and weights of a composite Gauss-Legendre rule on [lower, upper] (degrees)."""
    x, w = np.polynomial.legendre.leggauss(_NODES_PER_PANEL)
    edges = np.linspace(lower, upper, panels + 1)
    middles = 0.5 * (edges[1:] + edges[:-1])[:, np.newaxis]
    halves = 0.5 * (edges[1:] - edges[:-1])[:, np.newaxis]
    return (middles + halves * x).ravel(), (halves * w).ravel()


def region_populations(energy_kcal_mol, temperature_k, scis_window_deg=30.0, samples=7200):
    """Boltzmann fractions of the s-cis, s-trans and |phi| <= window regions at temperature_k (K):
    region_populations_over at one temperature."""
    return region_populations_over(energy_kcal_mol, (temperature_k,), scis_window_deg, samples)[0]


def region_populations_over(energy_kcal_mol, temperatures_k, scis_window_deg=30.0, samples=7200):
    """RegionPopulations at each of temperatures_k (K), the profile evaluated once for all of them.

    energy_kcal_mol maps an array of angles in degrees (given in [-180, 180)) to kcal/mol,
    e.g. FourierSeries.value. The s-cis half is split at -90, -window, window and 90 deg and
    each piece integrated with its own composite Gauss-Legendre rule, so the region
    boundaries are exact; the s-trans half uses the same rule shifted by 180 deg. About
    `samples` energy evaluations are made over the whole circle.
    """
    temperatures_k = tuple(temperatures_k)  # an iterator is read twice below
    for temperature_k in temperatures_k:
        if not (math.isfinite(temperature_k) and temperature_k > 0):
            raise ValueError(f"temperature must be a finite number of kelvin > 0, got {temperature_k!r}")
    if not 0 < scis_window_deg <= 90:
        raise ValueError(f"scis_window_deg must be in (0, 90], got {scis_window_deg!r}")
    if samples < _NODES_PER_PANEL:
        raise ValueError(f"samples must be at least {_NODES_PER_PANEL}, got {samples!r}")
    edges = (-90.0, -scis_window_deg, scis_window_deg, 90.0)
    panels_per_degree = samples / (_NODES_PER_PANEL * 360.0)
    rules = [
        _composite_gauss_legendre(lower, upper, max(1, round(panels_per_degree * (upper - lower))))
        for lower, upper in zip(edges[:-1], edges[1:])
    ]
    cis_nodes = np.concatenate([rule[0] for rule in rules])
    weights = np.concatenate([rule[1] for rule in rules])
    in_window = np.concatenate([np.full(len(rule[0]), piece == 1) for piece, rule in enumerate(rules)])
    nodes = np.concatenate([cis_nodes, cis_nodes + 180.0])
    energies = np.asarray(energy_kcal_mol(wrap_deg(nodes)), dtype=float)
    if energies.shape != nodes.shape or not np.all(np.isfinite(energies)):
        raise ValueError("energy_kcal_mol must return one finite energy per angle")
    energies = energies - energies.min()
    populations = []
    for temperature_k in temperatures_k:
        boltzmann = np.exp(-energies / rt_kcal_mol(temperature_k))
        cis_boltzmann, trans_boltzmann = boltzmann[:len(cis_nodes)], boltzmann[len(cis_nodes):]
        scis = float(weights @ cis_boltzmann)
        trans = float(weights @ trans_boltzmann)
        window = float(weights[in_window] @ cis_boltzmann[in_window])
        total = scis + trans
        populations.append(RegionPopulations(
            temperature_k=float(temperature_k),
            s_cis=scis / total,
            s_trans=trans / total,
            scis_window=window / total,
            scis_window_deg=float(scis_window_deg),
            delta_g_kcal_mol=region_delta_g(temperature_k, scis, trans),
        ))
    return tuple(populations)
