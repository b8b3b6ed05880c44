"""Scan bookkeeping: sweep coverage of the scan coordinate, merging of flat stationary pairs, the time limit."""

import numpy as np
import pytest

from torsionscan.records import StationaryRecord
from torsionscan.analysis import merge_flat_extrema
from torsionscan.coordinate import ScanCoordinate
from torsionscan.units import HARTREE_KCAL_MOL


def sweep_plan(start, steps_per_turn, symmetric):
    """The coordinate's visit plan for one dihedral as plain grid indices."""
    coordinate = ScanCoordinate(((0, 1, 2, 3),), ((2, 3),), 360.0 / steps_per_turn, symmetric)
    return [[index for (index,) in leg] for leg in coordinate.sweep_plan((start,))]


def _arrivals(start, legs, modulo=None):
    """grid index -> set of arrival directions (+1 from below, -1 from above)."""
    seen = {}
    for leg in legs:
        previous = start
        for index in leg:
            key = index % modulo if modulo else index
            seen.setdefault(key, set()).add(1 if index > previous else -1)
            previous = index
    return seen


@pytest.mark.parametrize("start", [0, 3, 11, 12])
def test_folded_symmetric_sweep_reaches_every_angle_from_both_sides(start):
    legs = sweep_plan(start, 24, symmetric=True)
    seen = _arrivals(start, legs)
    for index in range(1, 12):
        assert seen.get(index) == {1, -1} or (index == start and seen.get(index))
    assert set(seen) | {start} == set(range(13))
    assert sum(len(leg) for leg in legs) <= 25


@pytest.mark.parametrize("start", [0, 5, 23])
def test_full_circle_sweeps_reach_every_angle_from_both_sides(start):
    legs = sweep_plan(start, 24, symmetric=False)
    seen = _arrivals(start, legs, modulo=24)
    for index in range(24):
        if index != start % 24:
            assert seen[index] == {1, -1}


def _record(kind, angle, kcal):
    return StationaryRecord(kind, angle, angle, kcal / HARTREE_KCAL_MOL, "test", True, np.zeros((1, 3)))


def test_flat_pair_at_the_mirror_plane_merges_into_one_planar_point():
    records = [
        _record("minimum", 180.0, 0.0), _record("maximum", -95.0, 5.4), _record("minimum", -12.0, 2.000),
        _record("maximum", 0.0, 2.004), _record("minimum", 12.0, 2.000), _record("maximum", 95.0, 5.4),
    ]
    merged = merge_flat_extrema(records, symmetric=True, flat_hartree=0.01 / HARTREE_KCAL_MOL)
    assert sorted((r.angle_deg, r.kind) for r in merged) == [
        (-95.0, "maximum"), (0.0, "minimum"), (95.0, "maximum"), (180.0, "minimum")
    ]


def test_real_shallow_wells_are_kept():
    # a 0.03 kcal/mol well (GFN2-xTB butadiene gauche) is above the 0.01 threshold
    records = [
        _record("minimum", 180.0, 0.0), _record("maximum", -95.0, 5.4), _record("minimum", -18.0, 2.13),
        _record("maximum", 0.0, 2.16), _record("minimum", 18.0, 2.13), _record("maximum", 95.0, 5.4),
    ]
    assert len(merge_flat_extrema(records, symmetric=True, flat_hartree=0.01 / HARTREE_KCAL_MOL)) == 6


def test_flat_pair_away_from_a_plane_is_removed_as_a_pair():
    records = [
        _record("minimum", -120.0, 0.0), _record("maximum", -20.0, 3.0),
        _record("minimum", 60.0, 1.000), _record("maximum", 70.0, 0.995),  # wrong way round: not real
    ]
    merged = merge_flat_extrema(records, symmetric=False, flat_hartree=0.01 / HARTREE_KCAL_MOL)
    assert sorted((r.angle_deg, r.kind) for r in merged) == [(-120.0, "minimum"), (-20.0, "maximum")]


@pytest.mark.xtb
def test_a_time_limit_stops_a_real_scan_between_gradients():
    import time

    from torsionscan import scan
    from torsionscan.errors import TimeLimitExceeded

    started = time.monotonic()
    with pytest.raises(TimeLimitExceeded, match="time limit reached after"):
        scan("C=CC=Cc1ccccc1", time_limit_s=0.3)
    assert time.monotonic() - started < 3.0  # one gradient of this molecule takes milliseconds
