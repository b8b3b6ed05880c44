"""Batch runs end to end with real GFN2-xTB scans in real worker processes (a worker builds its
engine from the settings), and the worker/parent plumbing with model-engine results.

Coarse grids (30 degrees, 2 start structures) keep them fast; the science is checked elsewhere.
"""

import csv
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from html.parser import HTMLParser

import pytest

import torsionscan
from torsionscan import driver, rescore
from torsionscan.batch import BatchOptions, make_job, run_batch, scan_compound, store_outcome
from torsionscan.compounds import CompoundEntry, input_tag
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import CalculationError
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.output import render_figures
from torsionscan.profile import FourierSeries
from torsionscan.settings import ScanSettings
from torsionscan.store import DATABASE_NAME, RunStore

xtb = pytest.mark.xtb

FAST = ["--step", "30", "--conformers", "2"]
UNNAMED = input_tag("C=CC(C)=O", "", "")  # the automatic name of the list's nameless row
FAST_SETTINGS = ScanSettings(step_deg=30.0, conformers=2)

MIXED_LIST = """name,smiles,charge,supplier_code
# a comment row, skipped
acrolein,C=CC=O,,S-1
butadiene,C=CC=C,,S-2

ethylene,C=C,,S-3
broken,C1=CC,,S-4
overcharged,C=CC=C,-40,S-5
slow-terphenyl-diene,C=CC=Cc1ccc(cc1)-c1ccc(cc1)-c1ccccc1,,S-6
acrolein,C=CC=O,,S-7
,C=CC(C)=O,,S-8
"""


def _batch(*arguments, timeout=600):
    return subprocess.run([sys.executable, "-m", "torsionscan.cli", "batch", *map(str, arguments)],
                          capture_output=True, text=True, timeout=timeout)


def _statuses(out):
    with sqlite3.connect(out / DATABASE_NAME) as db:
        return {name: (status, reason, session, attempts) for name, status, reason, session, attempts in
                db.execute("SELECT name, status, reason, session_id, attempts FROM compounds")}


@pytest.fixture(scope="module")
def mixed_run(tmp_path_factory):
    """A list with good and deliberately bad entries, run by the command with 2 worker processes."""
    folder = tmp_path_factory.mktemp("mixed")
    listing = folder / "mixed.csv"
    listing.write_text(MIXED_LIST)
    out = folder / "run"
    completed = _batch(listing, "--out", out, "--workers", 2, "--timeout-per-compound", 4, *FAST)
    return listing, out, completed


@xtb
def test_each_bad_entry_fails_with_its_reason_and_the_others_finish(mixed_run):
    _, out, completed = mixed_run
    assert completed.returncode == 4, completed.stderr  # 4: finished, some compounds failed
    statuses = _statuses(out)
    done = {name for name, (status, *_) in statuses.items() if status == "done"}
    assert done == {"acrolein", "butadiene", UNNAMED}  # the nameless row got a name from its structure
    assert f"(line 11): no name given; called it {UNNAMED}" in completed.stderr
    reasons = {name: reason for name, (status, reason, *_) in statuses.items() if status == "failed"}
    assert "no conjugated single bond" in reasons["ethylene"]
    assert "could not read 'C1=CC' as SMILES" in reasons["broken"]
    assert "SCF failed" in reasons["overcharged"]  # a real SCF failure: 62 electrons in butadiene's basis
    assert reasons["slow-terphenyl-diene"].startswith("timeout: not finished within 4 s")
    assert "already used on line 3" in reasons["acrolein@line-10"]
    # the terminal summary lists every failure with its reason
    for name in reasons:
        assert f"failed: {name}:" in completed.stdout


@xtb
def test_the_table_has_a_row_per_compound_and_bond_with_extra_columns(mixed_run):
    _, out, _ = mixed_run
    with (out / "scan_table.csv").open() as handle:
        rows = list(csv.DictReader(handle))
    by_name = {row["name"]: row for row in rows}
    assert len(rows) == 8  # 3 one-bond compounds done + 5 failed
    acrolein = by_name["acrolein"]
    assert acrolein["status"] == "done" and acrolein["bond"] == "2-3" and acrolein["supplier_code"] == "S-1"
    # s-trans acrolein is the global minimum (experiment and theory agree; common knowledge)
    assert abs(float(acrolein["global_min_deg"])) > 170
    assert 0.0 < float(acrolein["s_cis_298.15K"]) < 0.5
    assert acrolein["hysteresis"] in ("True", "False")
    assert by_name["broken"]["status"] == "failed" and by_name["broken"]["supplier_code"] == "S-4"


class _ReportReader(HTMLParser):
    def __init__(self):
        super().__init__()
        self.sections, self.images, self.cells = {}, [], []
        self._section = None
        self._in_cell = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "section" and attrs.get("id", "").startswith("c-"):
            self._section = attrs["id"]
            self.sections[self._section] = []
        if tag == "img":
            self.images.append(attrs)
            if self._section:
                self.sections[self._section].append(attrs["alt"])
        if tag == "td":
            self._in_cell = True

    def handle_endtag(self, tag):
        if tag == "td":
            self._in_cell = False

    def handle_data(self, data):
        if self._in_cell:
            self.cells.append(data.strip())


@xtb
def test_the_html_report_is_self_contained_and_shows_every_compound(mixed_run):
    _, out, _ = mixed_run
    page = (out / "report.html").read_text()
    reader = _ReportReader()
    reader.feed(page)
    for name in ("acrolein", "butadiene", UNNAMED, "ethylene", "broken", "overcharged"):
        assert name in reader.cells
    plotted = [alt for alts in reader.sections.values() for alt in alts]
    for name in ("acrolein", "butadiene", UNNAMED):
        assert any(name in alt and "2-3" in alt for alt in plotted), name
    assert all(image["src"].startswith("data:image/png;base64,") for image in reader.images)
    assert "http://" not in page and "https://" not in page
    assert "Semi-empirical estimate" in page


@xtb
def test_rerun_resumes_and_changed_settings_are_refused(mixed_run):
    listing, out, _ = mixed_run
    before = _statuses(out)
    again = _batch(listing, "--out", out, "--workers", 2, "--timeout-per-compound", 4, *FAST)
    assert again.returncode == 4
    assert "0 compound(s) to compute" in again.stderr
    assert _statuses(out) == before  # nothing recomputed, nothing lost
    refused = _batch(listing, "--out", out, "--step", "15", "--conformers", "2")
    assert refused.returncode == 2
    assert "other settings (step_deg: 30.0 -> 15.0)" in refused.stderr
    errors = [line for line in refused.stderr.splitlines() if line.startswith("torsionscan: error:")]
    assert len(errors) == 1 and "Traceback" not in refused.stderr


@xtb
def test_retry_failed_computes_the_failures_again(mixed_run, tmp_path):
    listing, out, _ = mixed_run
    retried = _batch(listing, "--out", out, "--workers", 2, "--timeout-per-compound", 4, "--retry-failed", *FAST)
    assert retried.returncode == 4
    statuses = _statuses(out)
    assert statuses["overcharged"][3] == 2 and statuses["acrolein"][3] == 1
    # entries with a problem in the list itself are not sent to workers again
    assert statuses["acrolein@line-10"][3] == 0


@xtb
def test_report_rebuilds_everything_from_the_database_alone(mixed_run):
    _, out, _ = mixed_run
    folder = out / "compounds" / "acrolein"
    original = (folder / "summary.json").read_bytes()
    for path in [out / "report.html", out / "scan_table.csv", *folder.iterdir()]:
        path.unlink()
    folder.rmdir()
    rebuilt = subprocess.run([sys.executable, "-m", "torsionscan.cli", "report", str(out)],
                             capture_output=True, text=True, timeout=300)
    assert rebuilt.returncode == 0, rebuilt.stderr
    assert (folder / "summary.json").read_bytes() == original
    for name in ("bond_2-3_profile.png", "bond_2-3_scan.xyz", "bond_2-3_minima.sdf", "bond_2-3_profile.csv"):
        assert (folder / name).stat().st_size > 0
    assert (out / "report.html").is_file() and (out / "scan_table.csv").is_file()


KILL_LIST = "name,smiles\n" + "\n".join(
    f"{name},{smiles}" for name, smiles in [
        ("butadiene", "C=CC=C"), ("acrolein", "C=CC=O"), ("isoprene", "C=CC(C)=C"), ("piperylene", "C/C=C/C=C"),
        ("methacrolein", "C=C(C)C=O"), ("crotonaldehyde", "C/C=C/C=O"), ("styrene", "C=Cc1ccccc1"),
        ("vinyl-ketone", "C=CC(C)=O"), ("hexatriene", "C=C/C=C/C=C"), ("sorbaldehyde", "C/C=C/C=C/C=O"),
        ("cinnamaldehyde", "O=C/C=C/c1ccccc1"), ("diene-ester", "C=C/C=C/C(=O)OC"),
    ]
) + "\n"


@xtb
def test_kill_9_mid_run_loses_and_recomputes_no_finished_compound(tmp_path):
    listing = tmp_path / "kill.csv"
    listing.write_text(KILL_LIST)
    out = tmp_path / "run"
    command = [sys.executable, "-m", "torsionscan.cli", "batch", str(listing), "--out", str(out), "--workers", "2",
               "--step", "15", "--conformers", "2"]
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.monotonic() + 300
    done_at_kill = {}
    while time.monotonic() < deadline and process.poll() is None:
        time.sleep(0.05)
        if (out / DATABASE_NAME).is_file():
            try:
                done_at_kill = {k: v for k, v in _statuses(out).items() if v[0] == "done"}
            except sqlite3.OperationalError:  # the writer is creating the tables
                continue
            if len(done_at_kill) >= 3:
                os.killpg(process.pid, signal.SIGKILL)  # the batch and its workers, no chance to clean up
                break
    process.wait(timeout=60)
    assert process.returncode == -signal.SIGKILL, "the batch ended before it could be killed"
    with RunStore(out) as store:
        done_at_kill = {name: store.result(name).to_dict() for name in store.names("done")}
        assert 3 <= len(done_at_kill) < 12

    finished = subprocess.run(command, capture_output=True, text=True, timeout=600)
    assert finished.returncode == 0, finished.stderr
    assert f"{12 - len(done_at_kill)} compound(s) to compute" in finished.stderr
    statuses = _statuses(out)
    with RunStore(out) as store:
        assert store.counts() == {"pending": 0, "done": 12, "failed": 0}
        for name, plain in done_at_kill.items():
            assert statuses[name][2:] == (1, 1)  # computed once, by the killed session
            assert store.result(name).to_dict() == plain
    assert {session for _, _, session, _ in statuses.values()} == {1, 2}


def _stable(result):
    """A result's plain form without the fields that depend on timing."""
    data = json.loads(json.dumps(result.to_dict()))
    for entry in data["bonds"]:
        entry.pop("wall_time_s")
        entry.pop("frequency_wall_time_s")
    return data


@xtb
def test_the_largest_compounds_are_handed_out_first(tmp_path):
    listing = tmp_path / "sizes.csv"
    listing.write_text("name,smiles\nacrolein,C=CC=O\nstyrene,C=Cc1ccccc1\nisoprene,C=CC(C)=C\n")

    class Order:
        def __init__(self):
            self.names = []

        def start(self, to_compute, already_done):
            pass

        def update(self, outcome):
            self.names.append(outcome["name"])

        def close(self):
            pass

    order = Order()
    summary = run_batch(listing, tmp_path / "run", FAST_SETTINGS, BatchOptions(workers=1), progress=order)
    assert summary.counts["done"] == 3
    assert order.names == ["styrene", "isoprene", "acrolein"]  # 16, 13 and 8 atoms with hydrogens
    with RunStore(tmp_path / "run") as store:
        assert store.names() == ["acrolein", "styrene", "isoprene"]  # the table keeps the list's order


@xtb
@pytest.mark.cluster
def test_a_dask_local_cluster_gives_exactly_the_local_results(tmp_path):
    distributed = pytest.importorskip("distributed")
    listing = tmp_path / "few.csv"
    listing.write_text("name,smiles\nacrolein,C=CC=O\nbutadiene,C=CC=C\nisoprene,C=CC(C)=C\n")
    local = run_batch(listing, tmp_path / "local", FAST_SETTINGS, BatchOptions(workers=2))
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        remote = run_batch(listing, tmp_path / "dask", FAST_SETTINGS, BatchOptions(cluster=cluster.scheduler_address))
    assert local.counts == remote.counts == {"pending": 0, "done": 3, "failed": 0}
    with RunStore(tmp_path / "local") as a, RunStore(tmp_path / "dask") as b:
        for name in ("acrolein", "butadiene", "isoprene"):
            assert _stable(a.result(name)) == _stable(b.result(name))
        assert a.settings() == b.settings()


@xtb
def test_an_sdf_list_is_scanned_from_its_own_structures(tmp_path):
    from rdkit import Chem
    from rdkit.Chem import AllChem

    listing = tmp_path / "two.sdf"
    writer = Chem.SDWriter(str(listing))
    for title, smiles in (("enal-record", "C=CC=O"), ("diene-record", "C=CC=C")):
        mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
        AllChem.EmbedMolecule(mol, randomSeed=3)
        mol.SetProp("_Name", title)
        mol.SetProp("batch_code", f"B-{title}")
        writer.write(mol)
    writer.close()
    outcome = run_batch(listing, tmp_path / "run", FAST_SETTINGS, BatchOptions(workers=1))
    assert outcome.counts == {"pending": 0, "done": 2, "failed": 0}
    with RunStore(tmp_path / "run") as store:
        assert store.result("enal-record").smiles == "C=CC=O"
        assert store.compound("diene-record")["extra"] == {"batch_code": "B-diene-record"}


# -- plumbing with model-engine results (milliseconds; no chemistry) -------------------------------
def _model_scan(name="butadiene"):
    molecule = load_molecule("C=CC=C")
    (bond,) = find_conjugated_bonds(molecule)
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC=C", name=name, engine=engine, settings=ScanSettings(conformers=2, frequencies=False))


@pytest.fixture(scope="module")
def model_scan():
    return _model_scan()


def _job(tmp_path, rescore_level=None):
    with RunStore(tmp_path / "jobs") as store:
        store.add_compounds([CompoundEntry(name="butadiene", where="line 2", smiles="C=CC=C")])
        return make_job(store.compound("butadiene"), FAST_SETTINGS,
                        BatchOptions(rescore=rescore_level, timeout_per_compound_s=60.0))


def test_the_worker_returns_plain_data_and_keeps_the_scan_when_rescoring_fails(tmp_path, model_scan, monkeypatch):
    monkeypatch.setattr(driver, "scan", lambda *args, **kwargs: model_scan)

    def refuse(result, level, threads=None):
        raise CalculationError("SCF did not converge")

    monkeypatch.setattr(rescore, "rescore_result", refuse)
    outcome = scan_compound(_job(tmp_path, "b3lyp-d3bj/def2-svp"))
    assert outcome["status"] == "done", outcome.get("reason")
    json.dumps(outcome["result"], allow_nan=False)  # plain data, as sent between processes
    assert outcome["result"] == model_scan.to_dict()
    assert outcome["rescore_failure"] == "re-scoring at b3lyp-d3bj/def2-svp failed: SCF did not converge"
    assert set(outcome["figures"]["2-3"]) == {"profile.png", "profile.svg", "populations.png"}
    assert outcome["wall_time_s"] >= 0 and outcome["peak_memory_mb"] > 0 and ":" in outcome["worker"]


def test_the_worker_rescores_with_the_jobs_level_and_threads(tmp_path, model_scan, monkeypatch):
    monkeypatch.setattr(driver, "scan", lambda *args, **kwargs: model_scan)
    seen = []

    def fake(result, level, threads=None):  # stands in for the DFT single points: plumbing only
        seen.append((level.label, threads))
        return result

    monkeypatch.setattr(rescore, "rescore_result", fake)
    outcome = scan_compound(_job(tmp_path, "b3lyp-d3bj/def2-svp"))
    assert (outcome["status"], outcome["rescore_failure"]) == ("done", "")
    assert seen == [("B3LYP-D3(BJ)/def2-svp", 1)]


def test_a_worker_failure_is_an_outcome_not_an_exception(tmp_path, monkeypatch):
    def fail(*args, **kwargs):
        raise CalculationError("SCF failed")

    monkeypatch.setattr(driver, "scan", fail)
    outcome = scan_compound(_job(tmp_path))
    assert (outcome["status"], outcome["reason"]) == ("failed", "SCF failed")
    assert "result" not in outcome


def test_the_parent_stores_the_outcome_and_writes_the_folder_from_it(tmp_path, model_scan):
    out = tmp_path / "run"
    outcome = {"name": "butadiene", "worker": "here:1", "status": "done", "reason": "",
               "result": json.loads(json.dumps(model_scan.to_dict())), "figures": render_figures(model_scan),
               "rescore_failure": "re-scoring at X/y failed: no", "wall_time_s": 2.5, "peak_memory_mb": 10.0}
    with RunStore(out) as store:
        store.claim_settings(FAST_SETTINGS.as_dict(), "list.csv")
        store.add_compounds([CompoundEntry(name="butadiene", where="line 2", smiles="C=CC=C")])
        store_outcome(store, outcome, store.start_session("t"), out)
        assert store.result("butadiene").to_dict() == model_scan.to_dict()
        record = store.compound("butadiene")
        assert (record["status"], record["worker"], record["wall_time_s"]) == ("done", "here:1", 2.5)
        assert record["rescore_failure"] == "re-scoring at X/y failed: no"
    folder = out / "compounds" / "butadiene"
    assert json.loads((folder / "summary.json").read_text()) == model_scan.to_dict()
    for name in ("bond_2-3_profile.png", "bond_2-3_profile.svg", "bond_2-3_populations.png", "bond_2-3_scan.xyz",
                 "bond_2-3_minima.sdf", "bond_2-3_profile.csv"):
        assert (folder / name).stat().st_size > 0
    assert (folder / "bond_2-3_profile.png").read_bytes() == outcome["figures"]["2-3"]["profile.png"]


def test_an_outcome_the_store_cannot_read_fails_that_compound_only(tmp_path, model_scan):
    out = tmp_path / "run"
    damaged = {**model_scan.to_dict(), "schema_version": 1}
    outcome = {"name": "butadiene", "status": "done", "result": damaged, "figures": {}}
    with RunStore(out) as store:
        store.add_compounds([CompoundEntry(name="butadiene", where="line 2", smiles="C=CC=C")])
        store_outcome(store, outcome, store.start_session("t"), out)
        record = store.compound("butadiene")
        assert record["status"] == "failed" and record["reason"].startswith("could not store the result: InputError")
    assert not (out / "compounds" / "butadiene").exists()


def test_the_worker_fits_torsion_terms_and_the_folder_gets_the_fit_files(tmp_path, model_scan, monkeypatch):
    from torsionscan.records import ScanResult, to_plain
    from torsionscan.store import compound_folder

    monkeypatch.setattr(driver, "scan", lambda *args, **kwargs: model_scan)
    with RunStore(tmp_path / "run") as store:
        store.add_compounds([CompoundEntry(name="butadiene", where="line 2", smiles="C=CC=C")])
        job = make_job(store.compound("butadiene"), FAST_SETTINGS, BatchOptions(fit_for="mmff94"), tmp_path / "run")
        outcome = scan_compound(job)
        assert (outcome["status"], outcome["rescore_failure"]) == ("done", "")
        fit = ScanResult.from_dict(outcome["result"]).bonds[0].torsion_fit
        assert fit is not None and fit.mm_model.startswith("MMFF94") and fit.terms
        session = store.start_session("batch", 1, None)
        store_outcome(store, outcome, session, tmp_path / "run")
        stored = store.result("butadiene").bonds[0].torsion_fit
    assert to_plain(stored) == to_plain(fit)
    files = {p.name for p in compound_folder(tmp_path / "run", "butadiene").iterdir()}
    assert any("torsion" in name or "fit" in name for name in files), files


def test_a_refining_worker_keeps_its_finished_optimisations_in_the_run_folder(tmp_path, model_scan, monkeypatch):
    import torsionscan.workflows as workflows

    monkeypatch.setattr(driver, "scan", lambda *args, **kwargs: model_scan)
    seen = []

    def fake(result, level, points_mode, reference=None, processes=None, threads=None, cache=None):
        seen.append(cache.path)
        return result

    monkeypatch.setattr(workflows, "refine_with_dft", fake)
    with RunStore(tmp_path / "run") as store:
        store.add_compounds([CompoundEntry(name="butadiene", where="line 2", smiles="C=CC=C")])
        job = make_job(store.compound("butadiene"), FAST_SETTINGS, BatchOptions(refine="cheap"), tmp_path / "run")
    assert scan_compound(job)["status"] == "done"
    assert seen == [(tmp_path / "run").resolve() / "refinement_points.sqlite"]
