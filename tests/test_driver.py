"""The scan driver on an analytic model potential: every logic path in milliseconds.

The model engine's relaxed profile of the modelled dihedral is its Fourier series exactly, so
the expected minima, barriers and populations follow from the series alone; they are computed
here independently (dense grid, scipy.integrate.quad), not with the package's own routines.
"""

import math
import threading

import numpy as np
import pytest
from scipy.integrate import quad

import torsionscan
from torsionscan.coordinate import ScanCoordinate
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import TimeLimitExceeded
from torsionscan.molecule import find_conjugated_bonds, load_molecule, select_bond
from torsionscan.profile import FourierSeries
from torsionscan.units import rt_kcal_mol

# E = cos(phi) - 1.5 cos(2 phi) + 1.2 cos(3 phi) kcal/mol: an s-trans global minimum, a gauche pair
# near +-47 deg, barrier tops at 0 and near +-105 deg (a diene-like shape with round numbers)
SERIES = FourierSeries(0.0, (1.0, -1.5, 1.2), (0.0, 0.0, 0.0))
QUICK = torsionscan.ScanSettings(conformers=2, frequencies=False)


def _model_scan(smiles, series=SERIES, settings=QUICK, bond=None, **engine_options):
    molecule = load_molecule(smiles)
    torsion = select_bond(molecule, bond) if bond else find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(torsion.atoms, series)], **engine_options)
    return torsionscan.scan(smiles, bond=bond, engine=engine, settings=settings)


def _dense_extrema(series):
    """(angle, energy, kind) of the series' extrema from a 0.001-degree grid (independent check)."""
    grid = np.arange(-180.0, 180.0, 0.001)
    values = series.value(grid)
    before, after = np.roll(values, 1), np.roll(values, -1)
    minima = [(grid[i], values[i], "minimum") for i in np.flatnonzero((values < before) & (values < after))]
    maxima = [(grid[i], values[i], "maximum") for i in np.flatnonzero((values > before) & (values > after))]
    return minima + maxima


def test_minima_and_barriers_of_the_model_are_recovered():
    result = _model_scan("C=CC=C")
    profile = result.bonds[0].profile
    expected = _dense_extrema(SERIES)
    lowest = min(e for _, e, _ in expected)
    found = [(m.angle_deg, profile.relative_kcal_mol(m.energy_hartree), m.kind)
             for m in profile.minima + profile.maxima]
    assert len(found) == len(expected)
    for angle, energy, kind in expected:
        match = min(found, key=lambda f: abs((f[0] - angle + 180) % 360 - 180))
        assert match[2] == kind
        assert abs((match[0] - angle + 180) % 360 - 180) < 0.01
        assert match[1] == pytest.approx(energy - lowest, abs=1e-5)
    assert all(m.converged for m in profile.minima + profile.maxima)
    side_top = max(e for a, e, kind in expected if kind == "maximum" and abs(a) > 90)
    assert profile.barrier_to_other_region() == pytest.approx(side_top - lowest, abs=1e-5)


def test_populations_match_direct_integration_of_the_model():
    temperature = 298.15
    result = _model_scan("C=CC=C", settings=torsionscan.ScanSettings(conformers=2, frequencies=False,
                                                                     temperatures_k=(temperature,)))
    population = result.bonds[0].profile.populations[0]

    def weight(phi):
        return math.exp(-SERIES.value(phi) / rt_kcal_mol(temperature))

    s_cis = quad(weight, -90, 90, points=[0])[0]
    s_trans = quad(weight, 90, 270, points=[180])[0]
    assert population.s_cis == pytest.approx(s_cis / (s_cis + s_trans), abs=1e-6)


def test_every_grid_point_lies_on_the_model_curve_and_mirror_images_are_exact():
    bond = _model_scan("C=CC=C").bonds[0]
    assert bond.symmetric and any(p.mirrored for p in bond.points)
    computed = [p for p in bond.points if not p.mirrored]
    assert len(computed) == 13  # 0..180 deg at 15 deg; the other half mirrored
    reference = min(SERIES.value(np.arange(-180, 180, 0.001)))
    for point in bond.points:
        assert point.converged
        assert bond.profile.relative_kcal_mol(point.energy_hartree) == pytest.approx(
            SERIES.value(point.angle_deg) - reference, abs=1e-5)
        assert abs((point.measured_angle_deg - point.angle_deg + 180) % 360 - 180) < 1e-6


def test_a_chiral_molecule_gets_the_full_circle_and_an_asymmetric_profile():
    skewed = FourierSeries(0.0, (1.0, 2.0, 0.3), (0.8, 0.0, 0.2))
    result = _model_scan("C[C@H](F)C=CC=C", series=skewed, bond="5-6",
                         settings=torsionscan.ScanSettings(step_deg=30, conformers=1, frequencies=False))
    bond = result.bonds[0]
    assert not bond.symmetric and not any(p.mirrored for p in bond.points)
    assert sorted(p.angle_deg for p in bond.points) == [float(a) for a in range(-150, 181, 30)]
    shift = bond.profile.relative_kcal_mol(bond.points[0].energy_hartree) - skewed.value(bond.points[0].angle_deg)
    for point in bond.points:
        assert bond.profile.relative_kcal_mol(point.energy_hartree) - skewed.value(point.angle_deg) == pytest.approx(
            shift, abs=1e-5)


def test_failed_points_are_recorded_and_the_rest_is_analysed():
    bond = _model_scan("C=CC=C", fail_near_deg=(60.0,)).bonds[0]
    failed = [p for p in bond.points if p.failure]
    assert {abs(p.angle_deg) for p in failed} == {60.0}
    assert all(math.isnan(p.energy_hartree) and not p.converged for p in failed)
    assert "model failure" in failed[0].failure
    assert len(bond.profile.minima) == 3  # s-trans and the gauche pair are still found from the other points


def test_a_failure_at_every_start_structure_stops_the_scan_with_a_calculation_error():
    # every evaluation near the minimum fails: no start structure can be relaxed
    with pytest.raises(torsionscan.CalculationError):
        _model_scan("C=CC=C", fail_near_deg=tuple(range(-180, 180, 2)), fail_tolerance_deg=1.5)


def test_time_limit_stops_the_scan():
    engine = ModelEngine(load_molecule("C=CC=C").mol, [])
    with pytest.raises(TimeLimitExceeded, match="time limit reached"):
        torsionscan.scan("C=CC=C", engine=engine, settings=QUICK, time_limit_s=0.0)


def test_engine_without_conjugation_leaves_bond_orders_out_and_names_itself():
    result = _model_scan("C=CC=C")
    assert result.method == "model potential" and result.engine == "model"
    assert "not a chemical result" in result.caution
    assert all(math.isnan(p.central_bond_order) and math.isnan(p.homo_lumo_gap_ev) for p in result.bonds[0].points)


def test_frequencies_classify_minima_and_barrier_tops_of_the_model():
    result = _model_scan("C=CC=C", settings=torsionscan.ScanSettings(conformers=2))
    profile = result.bonds[0].profile
    assert all(m.imaginary_count == 0 for m in profile.minima)
    # each barrier top has a large imaginary mode that freezing the dihedral removes
    assert all(m.imaginary_along_torsion and m.frequencies_cm1[0] < -100.0 for m in profile.maxima)
    assert len(profile.rrho_populations) == 1
    assert profile.planar_scis is not None and profile.planar_scis.imaginary_count == 0


def test_the_scan_coordinate_handles_grid_points_as_tuples():
    coordinate = ScanCoordinate(((0, 1, 2, 3), (1, 2, 3, 4)), ((2, 3, 4), (3, 4)), 30.0, True)
    assert coordinate.angles_deg((2, -1)) == (60.0, -30.0)
    assert coordinate.canonical((13, -1)) == (1, 11)
    assert coordinate.mirror_index((2, 3)) == (10, 9)
    assert len(coordinate.constraints(coordinate.angles_deg((1, 2)))) == 2
    with pytest.raises(NotImplementedError):
        coordinate.sweep_chains((0, 0))


def test_an_engine_is_refused_for_what_its_capabilities_do_not_cover():
    molecule = load_molecule("C=CC=C")
    engine = ModelEngine(molecule.mol, [])
    with pytest.raises(torsionscan.InputError, match="cannot handle an implicit solvent"):
        torsionscan.scan("C=CC=C", engine=engine, settings=torsionscan.ScanSettings(solvent="water"))
    engine.capabilities = frozenset()  # an engine that states no charge support
    with pytest.raises(torsionscan.InputError, match="cannot handle a charge of 1"):
        torsionscan.scan("C=CC=C[CH2+]", engine=engine, settings=QUICK)


@pytest.mark.xtb
def test_a_scan_on_two_cores_gives_the_one_core_result_bit_for_bit(monkeypatch):
    # every piece of work (start structure, sweep chain, refinement, share of displaced gradients)
    # has an engine of its own, so neither the number of threads nor their timing changes a bit
    from torsionscan import parallel

    threads_seen = set()
    real_map = parallel.ParallelRelaxations.map

    def watched(self, piece, items):
        def noted(relaxer, item):
            threads_seen.add(threading.current_thread().name)
            return piece(relaxer, item)
        return real_map(self, noted, items)

    monkeypatch.setattr(parallel.ParallelRelaxations, "map", watched)
    monkeypatch.setattr(parallel, "MIN_SHARE", 1)  # split even this small molecule's displacements
    settings = torsionscan.ScanSettings(conformers=3, step_deg=30.0)
    one = torsionscan.scan("C=CC=O", settings=settings, cores=1).to_dict()
    threads_seen.discard(threading.current_thread().name)
    assert not threads_seen  # one core: everything in the caller's thread
    two = torsionscan.scan("C=CC=O", settings=settings, cores=2).to_dict()
    assert len(threads_seen) == 2  # two cores: the pieces did run in two threads
    for plain in (one, two):
        for bond in plain["bonds"]:
            bond["wall_time_s"] = bond["frequency_wall_time_s"] = 0.0
            bond["frequency_gradient_evaluations"] = 0  # each share adds one reference gradient
    assert one == two
