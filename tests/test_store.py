"""The run database: exact round trip of a scan result, statuses, settings and input-change checks.

The results stored here come from the analytic model engine: these tests check the plumbing only.
"""

import dataclasses
import json
import math
import sqlite3

import pytest

import torsionscan
from torsionscan.compounds import CompoundEntry
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import InputError, StorageError
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.records import MethodDisagreement, RescoredProfile
from torsionscan.settings import ScanSettings
from torsionscan.store import DATABASE_NAME, POINT_COLUMNS, STORE_SCHEMA, RunStore, settings_hash
from torsionscan.units import HARTREE_KCAL_MOL


@pytest.fixture(scope="module")
def model_scan():
    """A 15-degree scan of butadiene on the model potential (milliseconds, not chemistry)."""
    molecule = load_molecule("C=CC=C")
    (bond,) = find_conjugated_bonds(molecule)
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC=C", name="butadiene", engine=engine,
                            settings=ScanSettings(conformers=2, frequencies=False))


def _entry(name, smiles, **fields):
    return CompoundEntry(name=name, where="line 2", smiles=smiles, **fields)


def _with_rescored(result):
    """The result with stand-in re-scored energies on its bond: plumbing values, not a calculation."""
    (bond,) = result.bonds
    energies = tuple(-1.0 + 0.001 * n for n in range(len(bond.relaxed_points)))
    rescored = RescoredProfile(level="X/def2-svp", level_reference="", energies_hartree=energies,
                               analysis=dataclasses.replace(bond.profile, reference_energy_hartree=-1.0),
                               disagreement=MethodDisagreement(0.1, 0.2, 1.0, None), wall_time_s=0.5)
    return dataclasses.replace(result, bonds=(dataclasses.replace(bond, rescored=rescored),))


def test_a_stored_result_reads_back_exactly(tmp_path, model_scan):
    with RunStore(tmp_path) as store:
        store.claim_settings(ScanSettings().as_dict(), "list.csv")
        store.add_compounds([_entry("butadiene", "C=CC=C", extra={"supplier": "X-1"})])
        session = store.start_session("test")
        store.record_done("butadiene", model_scan, session, wall_time_s=1.5)
    with RunStore(tmp_path, create=False) as store:
        back = store.result("butadiene")
        assert back.to_dict() == model_scan.to_dict()
        # the same text, so a rebuilt summary.json is byte-identical
        assert json.dumps(back.to_dict()) == json.dumps(model_scan.to_dict())
        record = store.compound("butadiene")
        assert (record["status"], record["attempts"], record["extra"]) == ("done", 1, {"supplier": "X-1"})
        assert record["wall_time_s"] == 1.5 and record["rescore_failure"] == ""
    # plain SQL sees the profile as rows: 24 grid angles at 15 degrees, energies relative in kcal/mol
    (bond,) = model_scan.bonds
    with sqlite3.connect(tmp_path / DATABASE_NAME) as db:
        rows = db.execute(f"SELECT {', '.join(POINT_COLUMNS)} FROM points WHERE compound = 'butadiene' "
                          "ORDER BY angle_deg").fetchall()
    assert len(rows) == 24
    for row, point in zip(rows, sorted(bond.points, key=lambda p: p.angle_deg)):
        row = dict(zip(POINT_COLUMNS, row))
        assert row["angle_deg"] == point.angle_deg
        assert row["energy_rel_kcal_mol"] == pytest.approx(
            (point.energy_hartree - bond.profile.reference_energy_hartree) * HARTREE_KCAL_MOL, abs=1e-12)
        assert (bool(row["mirrored"]), bool(row["converged"])) == (point.mirrored, point.converged)
        # the model engine reports no conjugation: no bond order, no gap, no re-scored energy
        assert row["central_bond_order"] is None and row["homo_lumo_gap_ev"] is None
        assert row["energy_rescored_rel_kcal_mol"] is None and row["failure"] == ""
    assert math.isnan(bond.points[0].central_bond_order)


def test_rescored_points_survive_the_store(tmp_path, model_scan):
    result = _with_rescored(model_scan)
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("butadiene", "C=CC=C")])
        store.record_done("butadiene", result, store.start_session("t"), 1.0, rescore_failure="")
        assert store.result("butadiene").to_dict() == result.to_dict()
    with sqlite3.connect(tmp_path / DATABASE_NAME) as db:
        values = dict(db.execute("SELECT angle_deg, energy_rescored_rel_kcal_mol FROM points").fetchall())
    (bond,) = result.bonds
    for point, frame in bond.points_with_frames():  # a mirrored point gets its image's re-scored energy
        assert values[point.angle_deg] == pytest.approx(0.001 * frame * HARTREE_KCAL_MOL, abs=1e-9)


def test_a_rescoring_failure_is_kept_with_the_scan(tmp_path, model_scan):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("butadiene", "C=CC=C")])
        store.record_done("butadiene", model_scan, store.start_session("t"), 1.0,
                          rescore_failure="re-scoring at X/def2-svp failed: no such functional")
        record = store.compound("butadiene")
        assert (record["status"], record["rescore_failure"]) == ("done", "re-scoring at X/def2-svp failed: no such functional")
        assert store.result("butadiene").to_dict() == model_scan.to_dict()


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
        with pytest.raises(KeyError):
            store.result("b")
        # a failed compound's input may be corrected: it becomes pending again
        store.add_compounds([_entry("b", "C=CC=O", charge=0)])
        assert store.compound("b")["status"] == "pending"


def test_a_done_compound_with_another_input_is_refused(tmp_path, model_scan):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("butadiene", "C=CC=C")])
        store.record_done("butadiene", model_scan, store.start_session("t"), 1.0)
        store.add_compounds([_entry("butadiene", "C=CC=C")])  # same input: accepted, still done
        assert store.compound("butadiene")["status"] == "done"
        with pytest.raises(InputError, match="differs from the one already computed"):
            store.add_compounds([_entry("butadiene", "C=CC=C", charge=1)])


def test_a_failure_after_success_clears_the_points(tmp_path, model_scan):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("butadiene", "C=CC=C")])
        session = store.start_session("t")
        store.record_done("butadiene", model_scan, session, 1.0)
        store.record_failed("butadiene", "timeout", session)
        with pytest.raises(KeyError):
            store.result("butadiene")
    with sqlite3.connect(tmp_path / DATABASE_NAME) as db:
        assert db.execute("SELECT COUNT(*) FROM points").fetchone() == (0,)


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


def test_a_corrupt_or_foreign_database_is_a_one_line_error(tmp_path):
    corrupt = tmp_path / "corrupt"
    corrupt.mkdir()
    (corrupt / DATABASE_NAME).write_bytes(b"this is not a database at all" * 100)
    with pytest.raises(StorageError, match=f"run.sqlite in {corrupt} is not a readable run database "
                                           r"\(file is not a database\); move it away or choose another --out"
                       ) as error:
        RunStore(corrupt, create=False)
    assert "\n" not in str(error.value)
    foreign = tmp_path / "foreign"
    foreign.mkdir()
    with sqlite3.connect(foreign / DATABASE_NAME) as db:
        db.execute("CREATE TABLE inventory (item TEXT)")
    with pytest.raises(InputError, match="another program") as error:
        RunStore(foreign)
    assert "\n" not in str(error.value)
    with sqlite3.connect(foreign / DATABASE_NAME) as db:  # left as it was
        assert [r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")] == ["inventory"]


def test_a_run_of_another_database_format_is_refused(tmp_path):
    with RunStore(tmp_path) as store:
        store.claim_settings(ScanSettings().as_dict(), "list.csv")
    with sqlite3.connect(tmp_path / DATABASE_NAME) as db:
        db.execute("UPDATE run SET value = '3' WHERE key = 'store_schema'")
    with pytest.raises(InputError, match=f"another database format \\(3, this version reads {STORE_SCHEMA}\\)"):
        RunStore(tmp_path, create=False)


def test_a_list_problem_fixed_without_changing_the_structure_becomes_pending(tmp_path):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("a", "C=CC=C", problem="line 2 has 4 cells but the header has 2")])
        assert store.compound("a")["status"] == "failed"
        store.add_compounds([_entry("a", "C=CC=C")])
        assert (store.compound("a")["status"], store.compound("a")["reason"]) == ("pending", "")


def test_a_full_or_read_only_database_raises_storage_error_and_keeps_what_was_committed(tmp_path, model_scan):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry("a", "C=CC=C"), _entry("b", "C=CC=C")])
        session = store.start_session("t")
        store.record_done("a", model_scan, session, 1.0)
        pages = store._db.execute("PRAGMA page_count").fetchone()[0]
        store._db.execute(f"PRAGMA max_page_count = {pages}")  # SQLite's own "database or disk is full"
        with pytest.raises(StorageError, match=r"cannot write run.sqlite in .* \(database or disk is full\): free "
                                               "space or choose another --out$"):
            store.record_done("b", model_scan, session, 1.0)
        store._db.execute("PRAGMA query_only = 1")  # refuses writes as a read-only file does
        with pytest.raises(StorageError, match=r"cannot write run.sqlite in .* \(attempt to write a readonly "
                                               r"database\): choose a writable --out or fix its permissions"):
            store.record_failed("b", "reason", session)
    with RunStore(tmp_path, create=False) as store:
        assert store.counts() == {"pending": 1, "done": 1, "failed": 0}
        assert store.result("a").to_dict() == model_scan.to_dict()


def test_a_damaged_database_is_a_storage_error_when_read(tmp_path, model_scan):
    with RunStore(tmp_path) as store:
        store.add_compounds([_entry(f"c{n}", "C=CC=C") for n in range(30)])
        session = store.start_session("t")
        for n in range(30):
            store.record_done(f"c{n}", model_scan, session, 1.0)
        store._db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    path = tmp_path / DATABASE_NAME
    data = bytearray(path.read_bytes())
    data[8192:len(data) - 4096] = b"\xff" * (len(data) - 4096 - 8192)  # pages after the schema overwritten
    path.write_bytes(bytes(data))
    with pytest.raises(StorageError, match="is not a readable run database .*; move it away or choose another --out"):
        with RunStore(tmp_path, create=False) as store:
            [store.result(name) for name in store.names("done")]
