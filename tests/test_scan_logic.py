"""Scan bookkeeping: sweep coverage of the scan coordinate, merging of flat stationary pairs and
the verdict on them, the time limit."""

from dataclasses import replace
from types import SimpleNamespace

import numpy as np
import pytest

from torsionscan.records import StationaryRecord
from torsionscan.analysis import merge_flat_extrema
from torsionscan.quality import wrong_stationary_points
from torsionscan.coordinate import ScanCoordinate
from torsionscan.units import HARTREE_KCAL_MOL


def sweep_chains(start, steps_per_turn, symmetric):
    """The coordinate's visit plan for one dihedral as chains of plain grid indices."""
    coordinate = ScanCoordinate(((0, 1, 2, 3),), ((2, 3),), 360.0 / steps_per_turn, symmetric)
    return [[index for (index,) in chain] for chain in coordinate.sweep_chains((start,))]


def _arrivals(chains, modulo=None):
    """grid index -> set of arrival directions (+1 from below, -1 from above) of the chains' steps
    (a chain's first point is turned to from the start structure, not arrived at from a neighbour)."""
    seen = {}
    for chain in chains:
        for previous, index in zip(chain, chain[1:]):
            key = index % modulo if modulo else index
            seen.setdefault(key, set()).add(1 if index > previous else -1)
    return seen


@pytest.mark.parametrize("start", [0, 3, 11, 12])
def test_folded_symmetric_chains_reach_every_angle_from_both_sides(start):
    chains = sweep_chains(start, 24, symmetric=True)
    assert len(chains) == 2
    seen = _arrivals(chains)
    for index in range(1, 12):
        assert seen.get(index) == {1, -1}
    assert seen[0] == {-1} and seen[12] == {1}  # the ends: one arrival each, plus a chain's start
    assert sum(len(chain) for chain in chains) == 26  # every point of 0..180 twice


@pytest.mark.parametrize("start", [0, 5, 23])
def test_full_circle_chains_reach_every_angle_from_both_sides(start):
    chains = sweep_chains(start, 24, symmetric=False)
    assert len(chains) == 2 and chains[0][0] == start
    seen = _arrivals([[start] + chains[1]] + chains[:1], modulo=24)  # the down chain starts next to the start
    for index in range(24):
        if index != start % 24:
            assert seen[index] == {1, -1}
    assert sum(len(chain) for chain in chains) == 47


def _record(kind, angle, kcal):
    return StationaryRecord(kind, angle, angle, kcal / HARTREE_KCAL_MOL, "test", True, np.zeros((1, 3)))


def test_flat_pair_at_the_mirror_plane_merges_into_one_planar_point():
    records = [
        _record("minimum", 180.0, 0.0), _record("maximum", -95.0, 5.4), _record("minimum", -12.0, 2.000),
        _record("maximum", 0.0, 2.004), _record("minimum", 12.0, 2.000), _record("maximum", 95.0, 5.4),
    ]
    merged = merge_flat_extrema(records, symmetric=True, flat_hartree=0.01 / HARTREE_KCAL_MOL)
    assert sorted((r.angle_deg, r.kind, r.flat_region) for r in merged) == [
        (-95.0, "maximum", False), (0.0, "minimum", True), (95.0, "maximum", False), (180.0, "minimum", False)
    ]


def _checked(kind, imaginary, along, flat=False):
    return replace(_record(kind, 0.0, 0.0), imaginary_count=imaginary, imaginary_along_torsion=along, flat_region=flat)


def test_a_flat_region_may_turn_either_way_but_nothing_else_may_be_imaginary():
    def wrong(*points):
        analysis = SimpleNamespace(minima=tuple(p for p in points if p.kind == "minimum"),
                                   maxima=tuple(p for p in points if p.kind == "maximum"))
        return wrong_stationary_points(analysis)

    assert wrong(_checked("minimum", 1, True)) and not wrong(_checked("minimum", 1, True, flat=True))
    assert not wrong(_checked("minimum", 0, None, flat=True), _checked("maximum", 0, None, flat=True))
    assert wrong(_checked("minimum", 1, False, flat=True)) and wrong(_checked("minimum", 2, True, flat=True))
    assert wrong(_checked("maximum", 0, None)) and not wrong(_checked("maximum", 1, True))


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
    with pytest.raises(TimeLimitExceeded, match="time limit reached"):
        scan("C=CC=Cc1ccccc1", time_limit_s=0.3)
    assert time.monotonic() - started < 3.0  # one gradient of this molecule takes milliseconds
