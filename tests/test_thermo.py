"""Boltzmann populations over a torsion profile (torsionscan.thermo)."""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from torsionscan.profile import FourierSeries
from torsionscan.thermo import region_populations, region_populations_over
from torsionscan.units import rt_kcal_mol


def gauche_profile(angle_deg):
    """1.5 (1 + cos 2 phi) + 0.8 (1 - cos phi): minima near +-82 deg, kcal/mol."""
    phi = np.radians(angle_deg)
    return 1.5 * (1.0 + np.cos(2.0 * phi)) + 0.8 * (1.0 - np.cos(phi))


def planar_profile(angle_deg):
    """1.5 (1 - cos 2 phi) + 0.8 (1 + cos phi): s-trans minimum 0 at 180, s-cis minimum 1.6 at 0."""
    phi = np.radians(angle_deg)
    return 1.5 * (1.0 - np.cos(2.0 * phi)) + 0.8 * (1.0 + np.cos(phi))


def flat_profile(angle_deg):
    return np.zeros_like(angle_deg)


def quad_weight(profile, temperature_k, lower, upper):
    rt = rt_kcal_mol(temperature_k)
    integrand = lambda x: math.exp(-float(profile(np.array(x))) / rt)  # noqa: E731
    return quad(integrand, lower, upper, epsabs=0.0, epsrel=1e-13, limit=200)[0]


@pytest.mark.parametrize("profile", [gauche_profile, planar_profile])
@pytest.mark.parametrize("temperature_k", [150.0, 298.15, 600.0])
@pytest.mark.parametrize("window_deg", [30.0, 37.3])
def test_populations_match_adaptive_quadrature(profile, temperature_k, window_deg):
    result = region_populations(profile, temperature_k, window_deg)
    cis = quad_weight(profile, temperature_k, -90.0, 90.0)
    trans = quad_weight(profile, temperature_k, 90.0, 270.0)
    window = quad_weight(profile, temperature_k, -window_deg, window_deg)
    assert result.s_cis == pytest.approx(cis / (cis + trans), rel=1e-8)
    assert result.s_trans == pytest.approx(trans / (cis + trans), rel=1e-8)
    assert result.scis_window == pytest.approx(window / (cis + trans), rel=1e-8)
    expected_delta_g = -rt_kcal_mol(temperature_k) * math.log(cis / trans)
    assert result.delta_g_kcal_mol == pytest.approx(expected_delta_g, rel=1e-8)
    assert result.temperature_k == temperature_k and result.scis_window_deg == window_deg


def test_fractions_sum_to_one_and_window_is_inside_s_cis():
    for temperature_k in (50.0, 298.15, 2000.0):
        result = region_populations(gauche_profile, temperature_k, 45.0)
        assert result.s_cis + result.s_trans == pytest.approx(1.0, abs=1e-15)
        assert 0.0 < result.scis_window < result.s_cis


def test_flat_profile_is_uniform():
    for window_deg in (10.0, 30.0, 90.0):
        result = region_populations(flat_profile, 298.15, window_deg)
        assert result.s_cis == 0.5 and result.s_trans == 0.5
        assert result.delta_g_kcal_mol == 0.0
        assert result.scis_window == pytest.approx(window_deg / 180.0, rel=1e-14)


def test_accepts_a_fourier_series():
    series = FourierSeries(2.3, (0.8, -1.5), (0.0, 0.0))  # planar_profile as a series
    from_series = region_populations(series.value, 298.15)
    from_function = region_populations(planar_profile, 298.15)
    assert from_series.s_cis == pytest.approx(from_function.s_cis, rel=1e-12)
    assert from_series.scis_window == pytest.approx(from_function.scis_window, rel=1e-12)
    assert from_series.delta_g_kcal_mol == pytest.approx(from_function.delta_g_kcal_mol, rel=1e-12)


def test_high_temperature_tends_to_uniform():
    for temperature_k in (1e5, 1e6):
        result = region_populations(planar_profile, temperature_k)
        rt = rt_kcal_mol(temperature_k)
        # to first order in 1/RT: s_cis = 1/2 - (<E>_cis - <E>_trans) / 4RT, difference 3.2/pi
        assert result.s_cis == pytest.approx(0.5 - 0.8 / (math.pi * rt), abs=1.0 / rt**2)
        assert result.scis_window == pytest.approx(30.0 / 180.0, abs=1e-3)


def test_low_temperature_fills_the_lower_well():
    result = region_populations(planar_profile, 50.0)
    assert result.s_trans > 1.0 - 1e-5
    # harmonic wells: delta G -> delta E + RT/2 ln(k_cis / k_trans), k = E''(0) = 5.2, E''(180) = 6.8
    cold = region_populations(planar_profile, 5.0)
    harmonic = 1.6 + 0.5 * rt_kcal_mol(5.0) * math.log(5.2 / 6.8)
    assert cold.delta_g_kcal_mol == pytest.approx(harmonic, abs=1e-4)
    frozen = region_populations(planar_profile, 1.0)
    assert frozen.s_cis == 0.0 and frozen.s_trans == 1.0
    assert frozen.delta_g_kcal_mol == math.inf
    mirrored = region_populations(lambda a: planar_profile(np.asarray(a) + 180.0), 1.0)
    assert mirrored.delta_g_kcal_mol == -math.inf


@pytest.mark.parametrize(
    "temperature_k, window_deg",
    [(0.0, 30.0), (-10.0, 30.0), (math.nan, 30.0), (math.inf, 30.0),
     (298.15, 0.0), (298.15, -5.0), (298.15, 90.5), (298.15, math.nan)],
)
def test_bad_temperature_or_window_raises(temperature_k, window_deg):
    with pytest.raises(ValueError):
        region_populations(flat_profile, temperature_k, window_deg)


def test_energy_function_must_return_finite_values_per_angle():
    with pytest.raises(ValueError):
        region_populations(lambda a: np.full_like(a, np.nan), 298.15)
    with pytest.raises(ValueError):
        region_populations(lambda a: 0.0, 298.15)


def test_populations_over_temperatures_equal_one_at_a_time_with_one_evaluation_of_the_profile():
    calls = []

    def counted(angles):
        calls.append(len(angles))
        return gauche_profile(angles)

    temperatures = (150.0, 298.15, 450.0)
    together = region_populations_over(counted, temperatures, 45.0)
    assert len(calls) == 1
    for temperature, population in zip(temperatures, together):
        assert population == region_populations(gauche_profile, temperature, 45.0)
    assert region_populations_over(gauche_profile, iter(temperatures), 45.0) == together
    with pytest.raises(ValueError, match="temperature"):
        region_populations_over(gauche_profile, (298.15, -1.0))
