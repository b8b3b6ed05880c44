"""Fourier fits of torsion profiles and their stationary points (torsionscan.profile)."""

import math

import numpy as np
import pytest

from torsionscan.profile import FourierSeries, fit_fourier, fit_profile, stationary_points

GENERAL = FourierSeries(0.7, (1.2, -2.1, 0.45), (0.3, -0.25, 0.6))
SYMMETRIC = FourierSeries(-0.4, (0.9, -1.7, 0.35, 0.12), (0.0, 0.0, 0.0, 0.0))
SCAN_ANGLES = np.arange(-180.0, 180.0, 15.0)


def dense_grid_extrema(series, points=360_000):
    """Reference extrema by brute force: local minima and maxima of a dense periodic grid."""
    angles = -180.0 + 360.0 * np.arange(points) / points
    energies = series.value(angles)
    left, right = np.roll(energies, 1), np.roll(energies, -1)
    minima = angles[(energies < left) & (energies < right)]
    maxima = angles[(energies > left) & (energies > right)]
    return minima, maxima


def circular_difference(a, b):
    return abs((a - b + 180.0) % 360.0 - 180.0)


def test_value_is_vectorised_and_scalar_for_scalar_input():
    grid = np.linspace(-180.0, 180.0, 12).reshape(3, 4)
    assert GENERAL.value(grid).shape == (3, 4)
    assert isinstance(GENERAL.value(30.0), float)
    phi = math.radians(30.0)
    expected = 0.7 + sum(
        a * math.cos(n * phi) + b * math.sin(n * phi)
        for n, (a, b) in enumerate(zip(GENERAL.cos, GENERAL.sin), start=1)
    )
    assert GENERAL.value(30.0) == pytest.approx(expected, abs=1e-13)


def test_series_rejects_unequal_coefficient_lengths():
    with pytest.raises(ValueError):
        FourierSeries(0.0, (1.0, 2.0), (0.0,))


def test_general_fit_recovers_known_coefficients():
    fit = fit_fourier(SCAN_ANGLES, GENERAL.value(SCAN_ANGLES), order=3)
    assert not fit.symmetric
    assert fit.series.order == 3
    assert fit.series.constant == pytest.approx(GENERAL.constant, abs=1e-9)
    np.testing.assert_allclose(fit.series.cos, GENERAL.cos, rtol=0, atol=1e-9)
    np.testing.assert_allclose(fit.series.sin, GENERAL.sin, rtol=0, atol=1e-9)
    assert fit.rmse_kcal_mol < 1e-9 and fit.max_residual_kcal_mol < 1e-9


def test_symmetric_fit_recovers_known_coefficients_from_half_circle():
    angles = np.arange(0.0, 181.0, 20.0)
    fit = fit_fourier(angles, SYMMETRIC.value(angles), order=4, symmetric=True)
    assert fit.symmetric
    assert fit.series.constant == pytest.approx(SYMMETRIC.constant, abs=1e-9)
    np.testing.assert_allclose(fit.series.cos, SYMMETRIC.cos, rtol=0, atol=1e-9)
    assert fit.series.sin == (0.0, 0.0, 0.0, 0.0)


def test_fit_reports_residuals_of_inexact_data():
    noise = np.random.default_rng(7).normal(0.0, 0.1, SCAN_ANGLES.size)
    energies = GENERAL.value(SCAN_ANGLES) + noise
    fit = fit_fourier(SCAN_ANGLES, energies, order=3)
    residuals = fit.series.value(SCAN_ANGLES) - energies
    assert fit.rmse_kcal_mol == pytest.approx(np.sqrt(np.mean(residuals**2)), rel=1e-12)
    assert fit.max_residual_kcal_mol == pytest.approx(np.max(np.abs(residuals)), rel=1e-12)


def test_fit_rejects_fewer_distinct_points_than_parameters():
    angles = np.array([-180.0, -90.0, 0.0, 90.0, 180.0])  # -180 and 180 are one point
    with pytest.raises(ValueError):
        fit_fourier(angles, np.zeros(5), order=2)
    fit_fourier(angles[:-1], np.zeros(4), order=1)
    mirrored = np.array([-60.0, 0.0, 60.0, 120.0, -120.0])  # three distinct |phi|
    with pytest.raises(ValueError):
        fit_fourier(mirrored, np.cos(np.radians(mirrored)), order=3, symmetric=True)
    fit_fourier(mirrored, np.cos(np.radians(mirrored)), order=2, symmetric=True)


def test_force_field_terms_rebuild_the_series():
    angles = np.random.default_rng(11).uniform(-720.0, 720.0, 200)
    for series in (GENERAL, SYMMETRIC):
        terms = series.force_field_terms()
        assert [t.periodicity for t in terms] == list(range(1, series.order + 1))
        assert all(t.barrier_kcal_mol >= 0.0 and 0.0 <= t.phase_deg < 360.0 for t in terms)
        rebuilt = series.force_field_constant + sum(
            t.barrier_kcal_mol / 2.0 * (1.0 + np.cos(np.radians(t.periodicity * angles - t.phase_deg)))
            for t in terms
        )
        np.testing.assert_allclose(rebuilt, series.value(angles), rtol=0, atol=1e-10)


def test_force_field_term_conventions():
    terms = FourierSeries(0.0, (-1.0, 0.0, 0.5), (0.0, 2.0, 0.0)).force_field_terms()
    assert (terms[0].barrier_kcal_mol, terms[0].phase_deg) == pytest.approx((2.0, 180.0))
    assert (terms[1].barrier_kcal_mol, terms[1].phase_deg) == pytest.approx((4.0, 90.0))
    assert (terms[2].barrier_kcal_mol, terms[2].phase_deg) == pytest.approx((1.0, 0.0))
    assert terms[1].barrier_kj_mol == pytest.approx(4.0 * 4.184)
    assert FourierSeries(0.0, (1e-300,), (-1e-320,)).force_field_terms()[0].phase_deg < 360.0


def test_derivatives_match_central_finite_differences():
    angles = np.linspace(-180.0, 180.0, 37)
    step_deg = 1e-3
    step_rad = math.radians(step_deg)
    for series in (GENERAL, SYMMETRIC):
        up, down = series.value(angles + step_deg), series.value(angles - step_deg)
        np.testing.assert_allclose(series.derivative(angles), (up - down) / (2 * step_rad), atol=1e-6)
        d_up, d_down = series.derivative(angles + step_deg), series.derivative(angles - step_deg)
        np.testing.assert_allclose(series.second_derivative(angles), (d_up - d_down) / (2 * step_rad), atol=1e-6)


def test_fit_profile_picks_lowest_sufficient_order():
    fit = fit_profile(SCAN_ANGLES, GENERAL.value(SCAN_ANGLES), symmetric=False)
    assert fit.series.order == 3
    assert fit.rmse_kcal_mol <= 0.05
    three = FourierSeries(0.0, (1.0, -2.0, 0.5), (0.0, 0.0, 0.0))
    fit = fit_profile(SCAN_ANGLES, three.value(SCAN_ANGLES), symmetric=True)
    assert fit.series.order == 3
    loose = fit_profile(SCAN_ANGLES, three.value(SCAN_ANGLES), symmetric=True, rmse_target_kcal_mol=1.0)
    assert loose.series.order == 2 and loose.rmse_kcal_mol <= 1.0


def test_fit_profile_falls_back_to_highest_allowed_order():
    angles = np.arange(-180.0, 180.0, 30.0)  # 12 distinct points: order 5 leaves one spare
    energies = np.random.default_rng(3).normal(0.0, 1.0, angles.size)
    assert fit_profile(angles, energies, symmetric=False).series.order == 5
    assert fit_profile(angles, energies, symmetric=False, max_order=3).series.order == 3
    half = np.arange(0.0, 181.0, 30.0)  # 7 distinct |phi|: symmetric order 5 leaves one spare
    assert fit_profile(half, np.random.default_rng(4).normal(size=7), symmetric=True).series.order == 5
    with pytest.raises(ValueError):
        fit_profile(angles[:3], energies[:3], symmetric=False)


def test_two_fold_cosine_has_extrema_exactly_at_grid_angles():
    points = stationary_points(FourierSeries(1.0, (0.0, -1.0), (0.0, 0.0)))
    assert [(p.angle_deg, p.kind) for p in points] == [
        (-180.0, "minimum"), (-90.0, "maximum"), (0.0, "minimum"), (90.0, "maximum"),
    ]
    assert [p.energy_kcal_mol for p in points] == pytest.approx([0.0, 2.0, 0.0, 2.0], abs=1e-12)


def test_shallow_extra_minimum_matches_dense_grid():
    series = FourierSeries(0.0, (0.8, -1.5, -1.0), (0.0, 0.0, 0.0))
    points = stationary_points(series)
    minima, maxima = dense_grid_extrema(series)
    assert [p.kind for p in points] == ["maximum", "minimum", "maximum", "minimum", "maximum", "minimum"]
    found_minima = [p.angle_deg for p in points if p.kind == "minimum"]
    found_maxima = [p.angle_deg for p in points if p.kind == "maximum"]
    np.testing.assert_allclose(found_minima, minima, atol=2e-3)
    np.testing.assert_allclose(found_maxima, maxima, atol=2e-3)
    gauche = [p for p in points if p.kind == "minimum" and 100.0 < abs(p.angle_deg) < 170.0]
    assert len(gauche) == 2
    assert all(abs(series.derivative(p.angle_deg)) < 1e-9 for p in points)
    assert all(p.energy_kcal_mol == pytest.approx(series.value(p.angle_deg), abs=1e-14) for p in points)


def test_random_general_series_match_dense_grid():
    rng = np.random.default_rng(2024)
    for _ in range(5):
        series = FourierSeries(0.0, tuple(rng.normal(size=4)), tuple(rng.normal(size=4)))
        points = stationary_points(series, min_depth_kcal_mol=0.0)
        minima, maxima = dense_grid_extrema(series)
        found_minima = [p.angle_deg for p in points if p.kind == "minimum"]
        found_maxima = [p.angle_deg for p in points if p.kind == "maximum"]
        np.testing.assert_allclose(found_minima, minima, atol=2e-3)
        np.testing.assert_allclose(found_maxima, maxima, atol=2e-3)
        kinds = [p.kind for p in points]
        assert all(kinds[i] != kinds[i - 1] for i in range(len(kinds)))


def test_wiggles_shallower_than_min_depth_are_removed():
    # cos(phi) - 0.28 cos(2 phi): a 0.0064 kcal/mol dip at 0 between maxima at +-26.8 deg
    series = FourierSeries(0.0, (1.0, -0.28), (0.0, 0.0))
    detailed = stationary_points(series, min_depth_kcal_mol=0.001)
    assert [(round(p.angle_deg, 1), p.kind) for p in detailed] == [
        (-180.0, "minimum"), (-26.8, "maximum"), (0.0, "minimum"), (26.8, "maximum"),
    ]
    smoothed = stationary_points(series)
    assert [p.kind for p in smoothed] == ["minimum", "maximum"]
    assert smoothed[0].angle_deg == -180.0
    assert abs(smoothed[1].angle_deg) == pytest.approx(26.7655, abs=1e-3)
    assert stationary_points(series, min_depth_kcal_mol=100.0) == []


def test_constant_series_has_no_stationary_points():
    assert stationary_points(FourierSeries(2.5, (), ())) == []
    assert stationary_points(FourierSeries(2.5, (0.0, 0.0), (0.0, 0.0))) == []


@pytest.mark.parametrize("minimum_deg", [180.0, 179.95, 179.999, -179.95, -179.999, 0.1])
def test_extrema_next_to_the_wrap_are_found_once(minimum_deg):
    # E = -cos(phi - gamma): one minimum at gamma, one maximum opposite
    gamma = math.radians(minimum_deg)
    series = FourierSeries(0.0, (-math.cos(gamma),), (-math.sin(gamma),))
    points = stationary_points(series)
    assert [p.kind for p in sorted(points, key=lambda p: p.kind)] == ["maximum", "minimum"]
    assert all(-180.0 <= p.angle_deg < 180.0 for p in points)
    minimum = next(p for p in points if p.kind == "minimum")
    maximum = next(p for p in points if p.kind == "maximum")
    assert circular_difference(minimum.angle_deg, minimum_deg) < 1e-9
    assert circular_difference(maximum.angle_deg, minimum_deg + 180.0) < 1e-9
