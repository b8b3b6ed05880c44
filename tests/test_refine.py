"""Refinement at a second level, on model potentials: the refined profile is the second model's
exactly, whichever points are refined and however many processes do it."""

import functools

import numpy as np
import pytest

import torsionscan
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import CalculationError, InputError
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.refine import refine_result

SCAN_LEVEL = FourierSeries(0.0, (1.0, -1.5, 1.2), (0.0, 0.0, 0.0))
HIGHER_LEVEL = FourierSeries(0.0, (1.4, -1.2, 1.0), (0.0, 0.0, 0.0))  # deeper gauche wells, other barriers


def _dense(series, kind):
    grid = np.arange(-180.0, 180.0, 0.001)
    values = series.value(grid)
    before, after = np.roll(values, 1), np.roll(values, -1)
    mask = (values < before) & (values < after) if kind == "minimum" else (values > before) & (values > after)
    return sorted(zip(grid[mask], values[mask] - values.min()))


@pytest.fixture(scope="module")
def scanned():
    molecule = load_molecule("C=CC=C")
    atoms = find_conjugated_bonds(molecule)[0].atoms
    result = torsionscan.scan("C=CC=C", engine=ModelEngine(molecule.mol, [(atoms, SCAN_LEVEL)]),
                              settings=torsionscan.ScanSettings(conformers=1))
    return result, functools.partial(ModelEngine, molecule.mol, [(atoms, HIGHER_LEVEL)]), ModelEngine(
        molecule.mol, [(atoms, SCAN_LEVEL)])


@pytest.mark.parametrize("processes", [1, 2])
def test_every_point_refined_gives_the_higher_level_profile(scanned, processes):
    result, factory, start = scanned
    refined = refine_result(result, factory, "second model", start_engine=start, processes=processes).bonds[0].refined
    analysis = refined.analysis
    for kind, records in (("minimum", analysis.minima), ("maximum", analysis.maxima)):
        expected = _dense(HIGHER_LEVEL, kind)
        found = sorted((m.angle_deg if m.angle_deg < 180 else -180.0, analysis.relative_kcal_mol(m.energy_hartree))
                       for m in records)
        assert len(found) == len(expected)
        for (a, e), (b, f) in zip(expected, found):
            # the refinement threshold (2e-5 Hartree/Bohr on any coordinate) leaves up to ~0.1 deg
            # and ~2e-4 kcal/mol on this soft gauche well
            assert abs((a - b + 180) % 360 - 180) < 0.2 and e == pytest.approx(f, abs=1e-3)
    assert refined.points_mode == "all" and len(refined.points) == len(result.bonds[0].points)
    assert all(p.converged for p in refined.points)
    # the disagreement is the two models' difference at the grid angles after the best constant shift
    angles = np.array([p.angle_deg for p in result.bonds[0].points])
    difference = HIGHER_LEVEL.value(angles) - SCAN_LEVEL.value(angles)
    assert refined.disagreement.max_kcal_mol == pytest.approx(np.abs(difference - difference.mean()).max(), abs=1e-4)
    assert refined.disagreement.warning is None  # below 1 kcal/mol, same lowest conformer, same minima
    # free energies with the scan's thermal corrections carried over, and diene readiness
    assert len(analysis.rrho_populations) == 1 and analysis.readiness
    assert "carried over" in refined.thermal_note


def test_only_stationary_points_refined(scanned):
    result, factory, start = scanned
    refined = refine_result(result, factory, "second model", start_engine=start, points_mode="stationary", processes=2).bonds[0].refined
    analysis = refined.analysis
    assert analysis.fit is None and analysis.populations == () and refined.points == ()
    minima = sorted(analysis.relative_kcal_mol(m.energy_hartree) for m in analysis.minima)
    assert minima == pytest.approx(sorted(e for _, e in _dense(HIGHER_LEVEL, "minimum")), abs=1e-3)
    assert analysis.planar_scis.angle_deg == 0.0
    assert analysis.relative_kcal_mol(analysis.planar_scis.energy_hartree) == pytest.approx(
        HIGHER_LEVEL.value(0.0) - min(HIGHER_LEVEL.value(np.arange(-180, 180, 0.001))), abs=1e-5)
    assert analysis.barriers and all(b.height_kcal_mol > 0 for b in analysis.barriers)


def test_an_unknown_point_mode_is_refused(scanned):
    result, factory, start = scanned
    with pytest.raises(InputError, match="--refine-points"):
        refine_result(result, factory, "x", start_engine=start, points_mode="some")


def test_a_refined_result_is_written_drawn_and_reported(scanned, tmp_path):
    import csv
    import json

    from torsionscan.cli import format_summary
    from torsionscan.output import write_results
    from torsionscan.output.report import bond_row
    from torsionscan.records import ScanResult

    result, factory, start = scanned
    for mode in ("all", "stationary"):
        refined = refine_result(result, factory, "second model", start_engine=start, points_mode=mode)
        folder = write_results(refined, tmp_path / mode)
        again = ScanResult.from_dict(json.loads((folder / "summary.json").read_text()))
        assert again.to_dict() == refined.to_dict()
        rows = list(csv.DictReader((folder / "bond_2-3_profile.csv").open()))
        assert ("energy_refined_rel_kcal_mol" in rows[0]) == (mode == "all")
        assert (folder / "bond_2-3_profile.png").stat().st_size > 10_000
        row = bond_row(refined.bonds[0])
        assert row["refine_level"] == "second model" and row["refine_points"] == mode
        assert row["refined_global_min_deg"] == pytest.approx(180.0, abs=0.5)
        text = format_summary(refined, folder)
        assert "refined at second model" in text and "carried over" in text


def test_reference_energies_are_added_at_the_refined_stationary_points(scanned, monkeypatch):
    # the focal-point calculation itself is tested in test_reference.py; here: which structures get one
    import torsionscan.refine as refine_module
    from torsionscan.reference import ReferenceEnergy

    def fake(job):  # energy = the number of the structure's first coordinate, to follow it through
        symbols, coords, charge, threads = job
        return ReferenceEnergy(float(coords[0, 0]), 0.0, 0.0, (0.0, 0.0), 0.0, 0.0)

    monkeypatch.setattr(refine_module, "_reference_job", fake)
    result, factory, start = scanned
    refined = refine_module.add_reference(refine_result(result, factory, "second model", start_engine=start, points_mode="stationary"))
    profile = refined.bonds[0].refined
    kinds = sorted(p.kind for p in profile.reference)
    assert kinds == sorted([m.kind for m in profile.analysis.minima + profile.analysis.maxima] + ["planar s-cis"])
    assert profile.reference_label.startswith("focal point")
    with pytest.raises(InputError, match="needs a refined profile"):
        refine_module.add_reference(result)


def _without_times(result):
    plain = result.to_dict()
    for bond in plain["bonds"]:
        bond["refined"]["wall_time_s"] = 0.0
    return plain


def test_an_interrupted_refinement_resumes_from_its_checkpoint(scanned, tmp_path):
    import sqlite3

    from torsionscan.relaxcache import RelaxationCache

    result, factory, start = scanned
    path = tmp_path / "refinement_points.sqlite"
    first = refine_result(result, factory, "second model", start_engine=start, cache=RelaxationCache(path))
    with sqlite3.connect(path) as connection:
        stored = connection.execute("SELECT count(*) FROM relaxations").fetchone()[0]
    # 13 grid points of the symmetric half circle plus the off-grid minima and barrier top
    assert stored >= len(result.bonds[0].relaxed_points)
    # everything finished is read back: an engine that fails at every angle is never asked
    molecule = load_molecule("C=CC=C")
    atoms = find_conjugated_bonds(molecule)[0].atoms
    broken = functools.partial(ModelEngine, molecule.mol, [(atoms, HIGHER_LEVEL)], fail_near_deg=range(-180, 181))
    fresh_start = ModelEngine(molecule.mol, [(atoms, SCAN_LEVEL)])
    again = refine_result(result, broken, "second model", start_engine=fresh_start, cache=RelaxationCache(path))
    assert _without_times(again) == _without_times(first)
    assert fresh_start.evaluations == 0  # no start Hessian is made for an optimisation read back
    # an interruption after some points: the rest is computed, the result is the same
    with sqlite3.connect(path) as connection:
        connection.execute("DELETE FROM relaxations WHERE rowid % 2 = 0")
    resumed = refine_result(result, factory, "second model", start_engine=start, cache=RelaxationCache(path))
    assert _without_times(resumed) == _without_times(first)
    # another level never reads these points
    with pytest.raises(CalculationError, match="converged"):
        refine_result(result, broken, "third model", start_engine=start, cache=RelaxationCache(path))


def test_an_unusable_checkpoint_file_only_costs_the_resume(scanned, tmp_path, caplog):
    from torsionscan.relaxcache import RelaxationCache

    result, factory, start = scanned
    path = tmp_path / "refinement_points.sqlite"
    path.write_bytes(b"not a database" * 100)
    refined = refine_result(result, factory, "second model", start_engine=start, points_mode="stationary",
                            cache=RelaxationCache(path))
    assert refined.bonds[0].refined.analysis.minima
    assert "refinement checkpoint" in caplog.text


def test_mirror_images_share_one_optimisation(scanned, tmp_path):
    import sqlite3

    from torsionscan.relaxcache import RelaxationCache

    result, factory, start = scanned
    path = tmp_path / "points.sqlite"
    refined = refine_result(result, factory, "second model", start_engine=start, points_mode="stationary",
                            cache=RelaxationCache(path)).bonds[0].refined
    analysis = refined.analysis
    with sqlite3.connect(path) as connection:
        stored = connection.execute("SELECT count(*) FROM relaxations").fetchone()[0]
    # s-trans, one gauche of the pair, one barrier top of the pair, and 0 deg (top and planar s-cis)
    assert stored == 4
    gauche = sorted((m for m in analysis.minima if abs(m.angle_deg) < 90), key=lambda m: m.angle_deg)
    assert len(gauche) == 2 and gauche[0].energy_hartree == gauche[1].energy_hartree
    assert gauche[0].angle_deg == pytest.approx(-gauche[1].angle_deg, abs=1e-9)
    assert analysis.planar_scis.energy_hartree == next(m for m in analysis.maxima if m.angle_deg == 0.0).energy_hartree


def test_a_refined_top_takes_the_verdict_of_a_verified_top_not_another_tops_free_energy():
    # a top verified without a full Hessian (no frequencies, no free energy) stays so at the higher
    # level: the crossing top's corrections at 90 deg are not carried to the top near 0 deg
    from torsionscan.records import StationaryRecord
    from torsionscan.refine import _carried_over

    verified = StationaryRecord("maximum", 0.0, 0.0, -1.0, "scan", True, imaginary_count=1, imaginary_along_torsion=True)
    crossing = StationaryRecord("maximum", 90.0, 90.0, -1.0, "scan", True, frequencies_cm1=(-80.0, 50.0),
                                imaginary_count=1, imaginary_along_torsion=True, gibbs_corrections_kcal_mol=(70.0,))
    refined = StationaryRecord("maximum", 3.0, 3.0, -2.0, "refined", True)
    (carried,), _ = _carried_over((refined,), (verified, crossing))
    assert carried.imaginary_count == 1 and carried.imaginary_along_torsion
    assert carried.gibbs_corrections_kcal_mol == () and carried.frequencies_cm1 == ()
    (far,), _ = _carried_over((StationaryRecord("maximum", 85.0, 85.0, -2.0, "refined", True),), (verified, crossing))
    assert far.gibbs_corrections_kcal_mol == (70.0,)
    # a top the refined profile's rates use takes the nearest top with corrections, not a verdict alone
    (needed,), _ = _carried_over((refined,), (verified, crossing), needed=(refined,))
    assert needed.gibbs_corrections_kcal_mol == (70.0,)
