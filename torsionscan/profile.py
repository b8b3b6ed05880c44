"""Fourier-series fits of periodic torsion profiles and their stationary points.

Angles are in degrees at this interface (0 = s-cis, 180 = s-trans), energies in kcal/mol,
derivatives with respect to the angle in radians. A series of order n is
E(phi) = constant + sum_k a_k cos(k phi) + b_k sin(k phi), k = 1..n.
"""

import math
from dataclasses import dataclass

import numpy as np

from .units import KCAL_KJ, wrap_deg

FIT_TARGET_KCAL_MOL = 0.05  # default RMSE a profile fit aims for
_SCAN_STEP_DEG = 0.25  # grid on which stationary points are bracketed
_ZERO_SLOPE = 1e-12  # |dE/dphi| below this times the largest possible slope counts as zero
_ROOT_XTOL_DEG = 1e-12


@dataclass(frozen=True)
class ForceFieldTerm:
    """One term V_n/2 [1 + cos(n phi - gamma_n)]: barrier V_n >= 0 in kcal/mol, phase in [0, 360) deg."""

    periodicity: int
    barrier_kcal_mol: float
    phase_deg: float

    @property
    def barrier_kj_mol(self):
        """Barrier V_n in kJ/mol."""
        return self.barrier_kcal_mol * KCAL_KJ


@dataclass(frozen=True)
class FourierSeries:
    """E(phi) = constant + sum_k cos[k-1] cos(k phi) + sin[k-1] sin(k phi); coefficients in kcal/mol."""

    constant: float
    cos: tuple[float, ...]
    sin: tuple[float, ...]

    def __post_init__(self):
        if len(self.cos) != len(self.sin):
            raise ValueError(f"cos and sin need the same length, got {len(self.cos)} and {len(self.sin)}")
        object.__setattr__(self, "constant", float(self.constant))
        object.__setattr__(self, "cos", tuple(float(a) for a in self.cos))
        object.__setattr__(self, "sin", tuple(float(b) for b in self.sin))

    @property
    def order(self):
        """Highest harmonic n."""
        return len(self.cos)

    def _harmonics(self, angle_deg):
        """Multipliers k, cos(k phi) and sin(k phi) with k along a new last axis."""
        phi = np.radians(np.asarray(angle_deg, dtype=float))
        k = np.arange(1, self.order + 1)
        k_phi = phi[..., np.newaxis] * k
        return k, np.cos(k_phi), np.sin(k_phi)

    def value(self, angle_deg):
        """E at angles in degrees (scalar or array), kcal/mol."""
        _, cos_k, sin_k = self._harmonics(angle_deg)
        return self.constant + cos_k @ np.array(self.cos) + sin_k @ np.array(self.sin)

    def derivative(self, angle_deg):
        """dE/dphi at angles in degrees, kcal/mol per radian."""
        k, cos_k, sin_k = self._harmonics(angle_deg)
        return cos_k @ (k * np.array(self.sin)) - sin_k @ (k * np.array(self.cos))

    def second_derivative(self, angle_deg):
        """d2E/dphi2 at angles in degrees, kcal/mol per radian squared."""
        k, cos_k, sin_k = self._harmonics(angle_deg)
        return -(cos_k @ (k**2 * np.array(self.cos)) + sin_k @ (k**2 * np.array(self.sin)))

    def force_field_terms(self):
        """The series as terms V_n/2 [1 + cos(n phi - gamma_n)], one per n = 1..order."""
        terms = []
        for n, (a, b) in enumerate(zip(self.cos, self.sin), start=1):
            phase = math.degrees(math.atan2(b, a)) % 360.0
            terms.append(ForceFieldTerm(n, 2.0 * math.hypot(a, b), 0.0 if phase >= 360.0 else phase))
        return tuple(terms)

    @property
    def force_field_constant(self):
        """C in E = C + sum V_n/2 [1 + cos(n phi - gamma_n)], kcal/mol."""
        return self.constant - sum(math.hypot(a, b) for a, b in zip(self.cos, self.sin))


@dataclass(frozen=True)
class FourierFit:
    """A least-squares Fourier fit and how well it reproduces the data (kcal/mol)."""

    series: FourierSeries
    rmse_kcal_mol: float
    max_residual_kcal_mol: float
    symmetric: bool


def _distinct_angles(angles_deg, symmetric):
    """Number of different points on the circle (on the half circle [0, 180] if symmetric)."""
    wrapped = wrap_deg(np.round(np.asarray(angles_deg, dtype=float), 6))
    if symmetric:
        wrapped = np.abs(wrapped)
    return len(np.unique(np.round(wrapped, 6)))


def _parameter_count(order, symmetric):
    return 1 + order if symmetric else 1 + 2 * order


def fit_fourier(angles_deg, energies_kcal_mol, order, symmetric=False):
    """Least-squares Fourier series of the given order through (angle in deg, energy in kcal/mol).

    symmetric=True fits cosines only, so E(phi) = E(-phi). Raises ValueError if there are
    fewer distinct angles (distinct |angle| if symmetric) than fitted parameters.
    """
    angles = np.asarray(angles_deg, dtype=float)
    energies = np.asarray(energies_kcal_mol, dtype=float)
    if angles.ndim != 1 or angles.shape != energies.shape:
        raise ValueError(
            f"angles and energies must be 1-D and equally long, got shapes {angles.shape} and {energies.shape}"
        )
    if not (np.all(np.isfinite(angles)) and np.all(np.isfinite(energies))):
        raise ValueError("angles and energies must be finite")
    if order < 0:
        raise ValueError(f"order must be >= 0, got {order}")
    parameters = _parameter_count(order, symmetric)
    distinct = _distinct_angles(angles, symmetric)
    if distinct < parameters:
        raise ValueError(f"a {'symmetric ' if symmetric else ''}order-{order} fit has {parameters} parameters "
                         f"but there are only {distinct} distinct angles")
    k_phi = np.radians(angles)[:, np.newaxis] * np.arange(1, order + 1)
    columns = [np.ones((len(angles), 1)), np.cos(k_phi)]
    if not symmetric:
        columns.append(np.sin(k_phi))
    design = np.hstack(columns)
    coefficients = np.linalg.lstsq(design, energies, rcond=None)[0]
    sin = (0.0,) * order if symmetric else coefficients[1 + order:]
    series = FourierSeries(coefficients[0], coefficients[1:1 + order], sin)
    residuals = design @ coefficients - energies
    return FourierFit(
        series=series,
        rmse_kcal_mol=float(np.sqrt(np.mean(residuals**2))),
        max_residual_kcal_mol=float(np.max(np.abs(residuals))),
        symmetric=bool(symmetric),
    )


def fit_profile(angles_deg, energies_kcal_mol, symmetric, rmse_target_kcal_mol=FIT_TARGET_KCAL_MOL, max_order=8):
    """Fourier fit of a scanned profile with the lowest order that reproduces it (deg, kcal/mol).

    Orders 1, 2, ... are tried up to the highest allowed one, which is max_order or, if
    smaller, the highest order whose parameter count is at most the number of distinct angles
    minus one (so at least one degree of freedom is left to measure the misfit). The first
    order whose RMSE is <= rmse_target_kcal_mol is returned; if none reaches the target, the
    fit at the highest allowed order (the lowest RMSE) is returned. Raises ValueError if the
    data do not support even an order-1 fit with a spare point.
    """
    distinct = _distinct_angles(angles_deg, symmetric)
    supported = distinct - 2 if symmetric else (distinct - 2) // 2
    highest = min(max_order, supported)
    if highest < 1:
        raise ValueError(f"{distinct} distinct angles are too few for an order-1 fit with a spare point")
    for order in range(1, highest + 1):
        fit = fit_fourier(angles_deg, energies_kcal_mol, order, symmetric)
        if fit.rmse_kcal_mol <= rmse_target_kcal_mol:
            break
    return fit


@dataclass(frozen=True)
class StationaryPoint:
    """A minimum or maximum of a fitted series: angle in [-180, 180) deg, fit energy in kcal/mol."""

    angle_deg: float
    energy_kcal_mol: float
    kind: str


def _remove_shallow_pairs(points, min_depth_kcal_mol):
    """Drop the shallowest neighbouring minimum/maximum pair (cyclically) while it is below min_depth."""
    points = list(points)
    while len(points) >= 2:
        count = len(points)
        gaps = [abs(points[i].energy_kcal_mol - points[(i + 1) % count].energy_kcal_mol) for i in range(count)]
        i = int(np.argmin(gaps))
        if gaps[i] >= min_depth_kcal_mol:
            break
        drop = {i, (i + 1) % count}
        points = [p for j, p in enumerate(points) if j not in drop]
    return points


def _slope_root(series, low_deg, high_deg):
    """The angle (deg) in [low_deg, high_deg] where the series' slope, of opposite signs at the two
    ends, vanishes: Newton steps on the slope, kept inside the shrinking bracket by bisection,
    until a step is below _ROOT_XTOL_DEG."""
    low_slope = float(series.derivative(low_deg))
    if low_slope == 0.0:
        return low_deg
    x = 0.5 * (low_deg + high_deg)
    for _ in range(200):
        slope = float(series.derivative(x))
        if slope == 0.0:
            return x
        if (slope < 0) == (low_slope < 0):
            low_deg, low_slope = x, slope
        else:
            high_deg = x
        curvature = float(series.second_derivative(x)) * math.pi / 180.0  # per degree
        step = x - slope / curvature if curvature else math.nan
        if not low_deg < step < high_deg:
            step = 0.5 * (low_deg + high_deg)
        if abs(step - x) <= _ROOT_XTOL_DEG or high_deg - low_deg <= _ROOT_XTOL_DEG:
            return step
        x = step
    return x


def stationary_points(series, min_depth_kcal_mol=0.01):
    """Minima and maxima of a series around the full circle, sorted by angle (deg, kcal/mol).

    Sign changes of dE/dphi between points of a 0.25 deg grid are refined by bracketed
    Newton steps (_slope_root); a grid point where the slope vanishes to rounding (1e-12 of its largest possible
    value) and changes sign across its neighbours is a root itself, so symmetric series have
    extrema at exactly 0 and -180. A minimum is where the slope goes from negative to
    positive. Two extrema closer together than the grid step are not resolved. Then, while
    the neighbouring minimum/maximum pair with the smallest energy difference differs by less
    than min_depth_kcal_mol, that pair is removed as a fit wiggle, so minima and maxima still
    alternate around the circle. A constant series has no stationary points.
    """
    if min_depth_kcal_mol < 0:
        raise ValueError(f"min_depth_kcal_mol must be >= 0, got {min_depth_kcal_mol}")
    k = np.arange(1, series.order + 1)
    steepest = float(np.sum(k * (np.abs(series.cos) + np.abs(series.sin))))
    if steepest == 0.0:
        return []
    grid = -180.0 + _SCAN_STEP_DEG * np.arange(round(360.0 / _SCAN_STEP_DEG))
    slope = series.derivative(grid)
    sign = np.where(np.abs(slope) <= _ZERO_SLOPE * steepest, 0.0, np.sign(slope))
    before, after = np.roll(sign, 1), np.roll(sign, -1)
    roots = [
        (_slope_root(series, grid[i], grid[i] + _SCAN_STEP_DEG), sign[i])
        for i in np.flatnonzero(sign * after < 0)
    ]
    roots += [(grid[i], before[i]) for i in np.flatnonzero((sign == 0) & (before * after < 0))]
    points = []
    for root, slope_before in roots:
        angle = float(wrap_deg(root))
        kind = "minimum" if slope_before < 0 else "maximum"
        points.append(StationaryPoint(angle, float(series.value(angle)), kind))
    points.sort(key=lambda p: p.angle_deg)
    return _remove_shallow_pairs(points, min_depth_kcal_mol)
