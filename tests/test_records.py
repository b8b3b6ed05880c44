"""The result records and their plain-data form: exact round trips, refusal of what this
version did not write."""

import json

import numpy as np
import pytest
from rdkit import Chem

import torsionscan
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import InputError
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.records import SCHEMA_VERSION, ScanResult


@pytest.fixture(scope="module")
def model_result():
    molecule = load_molecule("C=CC(C)=O")
    bond = find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (0.4, -1.5, 0.2), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC(C)=O", engine=engine, settings=torsionscan.ScanSettings(conformers=1))


def test_the_summary_round_trips_exactly_through_json(model_result):
    text = json.dumps(model_result.to_dict(), allow_nan=False)
    again = ScanResult.from_dict(json.loads(text))
    assert again.to_dict() == model_result.to_dict()
    first, second = model_result.bonds[0], again.bonds[0]
    assert all(np.array_equal(a.coords_bohr, b.coords_bohr) for a, b in zip(first.points, second.points))
    assert second.points[0].energy_hartree == first.points[0].energy_hartree  # bit for bit, no rounding
    assert Chem.MolToSmiles(again.mol) == Chem.MolToSmiles(model_result.mol)
    assert again.settings == model_result.settings


def test_non_finite_numbers_survive_and_the_json_stays_strict(model_result):
    data = model_result.to_dict()
    data["bonds"][0]["points"][0]["central_bond_order"] = "nan"
    data["start_energy_hartree"] = "-inf"
    again = ScanResult.from_dict(json.loads(json.dumps(data, allow_nan=False)))
    assert np.isnan(again.bonds[0].points[0].central_bond_order) and again.start_energy_hartree == -np.inf


@pytest.mark.parametrize("change, words", [
    (lambda d: d.update(schema_version=1), "schema version 1 is not the one"),
    (lambda d: d.pop("schema_version"), "no schema_version"),
    (lambda d: d.update(colour="blue"), "unknown entries colour"),
    (lambda d: d.pop("name"), "ScanResult.name is missing"),
    (lambda d: d["bonds"][0].update(points="many"), "should be an object"),
    (lambda d: d.update(charge="zero"), "should be int"),
])
def test_a_summary_this_version_did_not_write_is_refused_in_one_line(model_result, change, words):
    data = json.loads(json.dumps(model_result.to_dict()))
    change(data)
    with pytest.raises(InputError, match=words) as caught:
        ScanResult.from_dict(data)
    assert "\n" not in str(caught.value)
    assert SCHEMA_VERSION == 2
