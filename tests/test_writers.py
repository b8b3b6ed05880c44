"""The writers of a result folder, driven by the analytic model engine (fast; no chemistry claims):
every file, an exact summary round trip, the profile table's values, the figures' panels,
the terminal summary and the one-line errors of reading a summary back."""

import csv
import dataclasses
import json
import math

import pytest
from rdkit import Chem

import torsionscan
from torsionscan.analysis import analyse_profile
from torsionscan.cli import format_summary
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import InputError
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.output import bond_stem, render_figures, write_results
from torsionscan.output.plot import profile_figure
from torsionscan.output.summary import POPULATION_DISAGREEMENT, read_summary_file
from torsionscan.profile import FourierSeries
from torsionscan.records import MethodDisagreement, RescoredProfile, RrhoPopulations, ScanResult
from torsionscan.units import KCAL_KJ

FILE_ENDINGS = ("profile.csv", "scan.xyz", "minima.sdf", "profile.png", "profile.svg", "populations.png")


@pytest.fixture(scope="module")
def model_result():
    """A butadiene-shaped model profile: minima at +-90.72 deg, barriers 2.70 (180) and 5.30 (0) kcal/mol."""
    molecule = load_molecule("C=CC=C")
    bond = find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC=C", name="model-diene", engine=engine,
                            settings=torsionscan.ScanSettings(conformers=2, frequencies=False))


@pytest.fixture(scope="module")
def written(model_result, tmp_path_factory):
    out = tmp_path_factory.mktemp("model")
    write_results(model_result, out)
    return out


def _rescored(result, shift_hartree=1e-4):
    """The result with a made-up re-scored profile on its one bond (scan energies plus a tilt)."""
    bond = result.bonds[0]
    energies = tuple(p.energy_hartree + shift_hartree * math.cos(math.radians(p.angle_deg))
                     for p in bond.relaxed_points)
    pairs = bond.points_with_frames()
    analysis = analyse_profile([p.angle_deg for p, _ in pairs], [energies[n] for _, n in pairs], bond.symmetric,
                               result.settings.temperatures_k, result.settings.scis_window_deg)
    rescored = RescoredProfile(
        level="test-level", level_reference="none", energies_hartree=energies, analysis=analysis,
        disagreement=MethodDisagreement(0.1, 0.2, 1.0, "profiles differ: made up for a test"), wall_time_s=0.0)
    return dataclasses.replace(result, bonds=(dataclasses.replace(bond, rescored=rescored),))


def test_every_file_is_written(model_result, written):
    assert (written / "summary.json").stat().st_size > 0
    for bond in model_result.bonds:
        for ending in FILE_ENDINGS:
            assert (written / f"{bond_stem(bond.label)}_{ending}").stat().st_size > 0, ending
    assert not list(written.glob(".*")), "temporary files left behind"


def test_summary_round_trips_exactly(model_result, written):
    text = (written / "summary.json").read_text()
    assert ScanResult.from_dict(json.loads(text)).to_dict() == model_result.to_dict()
    assert read_summary_file(written / "summary.json").to_dict() == model_result.to_dict()


def test_profile_table_holds_the_records_energies(model_result, written):
    bond = model_result.bonds[0]
    rows = list(csv.DictReader((written / f"{bond_stem(bond.label)}_profile.csv").open()))
    assert len(rows) == len(bond.points)
    assert "energy_rescored_rel_kcal_mol" not in rows[0]
    for row, point in zip(rows, bond.points):
        kcal = bond.profile.relative_kcal_mol(point.energy_hartree)
        assert float(row["angle_deg"]) == point.angle_deg
        assert float(row["energy_rel_kcal_mol"]) == pytest.approx(kcal, abs=5e-6)
        assert float(row["energy_rel_kj_mol"]) == pytest.approx(kcal * KCAL_KJ, abs=5e-6)
        assert float(row["fit_kcal_mol"]) == pytest.approx(bond.profile.fit.series.value(point.angle_deg), abs=5e-6)
        assert row["mirrored"] == str(point.mirrored)
        assert row["central_bond_order"] == ""  # the model engine reports no bond order


def test_structures_match_the_records(model_result, written):
    bond = model_result.bonds[0]
    lines = (written / f"{bond_stem(bond.label)}_scan.xyz").read_text().splitlines()
    n_atoms = int(lines[0])
    assert len(lines) == len(bond.relaxed_points) * (n_atoms + 2)
    minima = list(Chem.SDMolSupplier(str(written / f"{bond_stem(bond.label)}_minima.sdf"), removeHs=False))
    assert len(minima) == len(bond.profile.minima)
    assert all(m.GetProp("method") == model_result.method for m in minima)


def test_profile_figure_has_one_panel_without_bond_orders(model_result):
    bond = model_result.bonds[0]
    figure = profile_figure(model_result, bond)
    assert len(figure.axes) == 1
    assert model_result.method in figure.axes[0].get_title()
    with_orders = dataclasses.replace(bond, points=tuple(dataclasses.replace(p, central_bond_order=1.2)
                                                         for p in bond.points))
    assert len(profile_figure(model_result, with_orders).axes) == 2


def test_rescored_column_overlay_and_lines(model_result, tmp_path):
    result = _rescored(model_result)
    bond = result.bonds[0]
    write_results(result, tmp_path)
    rows = list(csv.DictReader((tmp_path / f"{bond_stem(bond.label)}_profile.csv").open()))
    expected = {id(p): bond.rescored.analysis.relative_kcal_mol(bond.rescored.energies_hartree[n])
                for p, n in bond.points_with_frames()}
    for row, point in zip(rows, bond.points):
        assert float(row["energy_rescored_rel_kcal_mol"]) == pytest.approx(expected[id(point)], abs=5e-6)
    assert read_summary_file(tmp_path / "summary.json").to_dict() == result.to_dict()
    assert set(render_figures(result)[bond.label]) == {"profile.png", "profile.svg", "populations.png"}
    text = format_summary(result, tmp_path)
    assert "re-scored at test-level" in text and "WARNING: profiles differ" in text
    assert f"difference to {result.method}" in text


def test_terminal_summary_uses_the_engines_words(model_result):
    text = format_summary(model_result, "out")
    assert text.splitlines()[-1] == model_result.caution
    assert "Semi-empirical" not in text and "GFN" not in text
    assert "minima (kcal/mol)" in text and "-90.7°" in text
    # a symmetric profile shows each barrier once: over 0 deg (5.30) and over 180 deg (2.70)
    barriers = [line for line in text.splitlines() if "barrier" in line]
    assert len(barriers) == 2
    assert any("5.30 kcal/mol" in line for line in barriers) and any("2.70 kcal/mol" in line for line in barriers)
    assert "disagree" not in text


def test_rrho_disagreement_flag_uses_the_threshold(model_result):
    bond = model_result.bonds[0]
    integrated = bond.profile.populations[0]

    def text_with(s_cis):
        rrho = RrhoPopulations(integrated.temperature_k, s_cis, 1.0 - s_cis, 0.0)
        profile = dataclasses.replace(bond.profile, rrho_populations=(rrho,))
        result = dataclasses.replace(model_result, bonds=(dataclasses.replace(bond, profile=profile),))
        return format_summary(result, "out")

    assert "from free energies of the minima" in text_with(integrated.s_cis)
    assert "disagree" not in text_with(integrated.s_cis + 0.9 * POPULATION_DISAGREEMENT)
    assert "[the two estimates disagree]" in text_with(integrated.s_cis + 1.1 * POPULATION_DISAGREEMENT)


@pytest.mark.parametrize("content, words", [
    (None, "not found"),
    ("this is not json", "not JSON"),
    ("{}", "no schema_version"),
    ('{"schema_version": 1}', "schema version 1"),
])
def test_reading_a_bad_summary_gives_one_line(tmp_path, content, words):
    path = tmp_path / "summary.json"
    if content is not None:
        path.write_text(content)
    with pytest.raises(InputError) as caught:
        read_summary_file(path)
    message = str(caught.value)
    assert words in message and len(message.splitlines()) == 1
