"""The run database: exact round trip of a real scan, statuses, settings and input-change checks."""

import json
import sqlite3

import pytest

from torsionscan.compounds import CompoundEntry
from torsionscan.errors import InputError
from torsionscan.output import structure_texts
from torsionscan.output.summary import summary_dict
from torsionscan.scan import ScanSettings
from torsionscan.store import DATABASE_NAME, RunStore, settings_hash


def _entry(name, smiles, **fields):
    return CompoundEntry(name=name, where="line 2", smiles=smiles, **fields)


def test_a_real_summary_comes_back_exactly(tmp_path, butadiene_scan):
    summary = json.loads(json.dumps(summary_dict(butadiene_scan)))  # as written to summary.json
    structures = structure_texts(butadiene_scan)
    with RunStore(tmp_path) as store:
        store.claim_settings(ScanSettings().as_dict(), "list.csv")
        store.add_compounds([_entry("butadiene", "C=CC=C", extra={"supplier": "X-1"})])
        session = store.start_session("test")
        store.record_done("butadiene", summary, structures, session, wall_time_s=1.5)
    with RunStore(tmp_path, create=False) as store:
        back = store.summary("butadiene")
        assert back == summary
        # key order survives too, so a rebuilt summary.json is byte-identical
        assert json.dumps(back) == json.dumps(summary)
        assert store.structures("butadiene") == structures
        record = store.compound("butadiene")
        assert (record["status"], record["attempts"], record["extra"]) == ("done", 1, {"supplier": "X-1"})
    # plain SQL sees the profile as rows: 24 grid angles at 15 degrees
    with sqlite3.connect(tmp_path / DATABASE_NAME) as db:
        (count,) = db.execute("SELECT COUNT(*) FROM points WHERE compound = 'butadiene'").fetchone()
    assert count == 24


def test_statuses_counts_and_failures(tmp_path):
    with RunStore(tmp_path) as store:
        store.add_compounds([
            _entry("a", "C=CC=C"), _entry("b", "C=CC=O"), _entry("c", "", problem="no SMILES on line 4"),
        ])
        assert store.counts() == {"pending": 2, "done": 0, "failed": 1}
        assert store.compound("c")["reason"] == "no SMILES on line 4"
        session = store.start_session("test")
        store.record_failed("b", "SCF failed", session)
        assert store.names("failed") == ["b", "c"]
        assert store.names() == ["a", "b", "c"]
        # a failed compound's input may be corrected: it becomes pending again
        store.add_compounds([_entry("b", "C=CC=O", charge=0)])
        assert store.compound("b")["status"] == "pending"


def test_a_done_compound_with_another_input_is_refused(tmp_path, butadiene_scan):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("butadiene", "C=CC=C")])
        store.record_done("butadiene", summary_dict(butadiene_scan), {}, store.start_session("t"), 1.0)
        store.add_compounds([_entry("butadiene", "C=CC=C")])  # same input: accepted, still done
        assert store.compound("butadiene")["status"] == "done"
        with pytest.raises(InputError, match="differs from the one already computed"):
            store.add_compounds([_entry("butadiene", "C=CC=C", charge=1)])


def test_changed_settings_are_refused_with_the_differences_named(tmp_path):
    settings = ScanSettings().as_dict()
    with RunStore(tmp_path) as store:
        store.claim_settings(settings, "list.csv")
        store.claim_settings(ScanSettings().as_dict(), "list.csv")  # the same: fine
        with pytest.raises(InputError, match=r"step_deg: 15.0 -> 30.0"):
            store.claim_settings(ScanSettings(step_deg=30.0).as_dict(), "list.csv")
    assert settings_hash(settings) != settings_hash(ScanSettings(step_deg=30.0).as_dict())


def test_opening_a_folder_without_a_run_is_a_clear_error(tmp_path):
    with pytest.raises(InputError, match="holds no batch run"):
        RunStore(tmp_path, create=False)


def test_rescored_points_survive_the_store(tmp_path, butadiene_scan):
    summary = json.loads(json.dumps(summary_dict(butadiene_scan)))
    entry = summary["bonds"][0]
    for n, point in enumerate(entry["points"]):  # stand-in values: this checks the plumbing only
        point["energy_rescored_rel_kcal_mol"] = 0.5 * n
    entry.update(rescore_level="X/def2-svp", rescored={"minima": []}, method_disagreement={"warning": None})
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("butadiene", "C=CC=C")])
        store.record_done("butadiene", summary, {}, store.start_session("t"), 1.0)
        assert json.dumps(store.summary("butadiene")) == json.dumps(summary)


def test_a_list_problem_fixed_without_changing_the_structure_becomes_pending(tmp_path):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("a", "C=CC=C", problem="line 2 has 4 cells but the header has 2")])
        assert store.compound("a")["status"] == "failed"
        store.add_compounds([_entry("a", "C=CC=C")])
        assert (store.compound("a")["status"], store.compound("a")["reason"]) == ("pending", "")
