"""Batch runs under faults: Ctrl-C (once and twice), worker processes that die, a full or unwritable
disk, a corrupt run database and a Dask scheduler without workers.

Interrupts and dying workers use real batch processes with real GFN2-xTB workers on tiny molecules
and a coarse grid (60 degrees, one start structure, no frequencies): the processes are the point.
Storage faults feed model-engine outcomes to the real parent (no workers), milliseconds each.
"""

import errno
import json
import os
import pathlib
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

import torsionscan
from torsionscan import batch
from torsionscan.batch import EXIT_IN_WORKER_STATUS, EXIT_IN_WORKER_VARIABLE, BatchOptions, run_batch
from torsionscan.cli import main
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import CalculationError, InputError, StorageError
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.output import render_figures
from torsionscan.profile import FourierSeries
from torsionscan.settings import ScanSettings
from torsionscan.store import DATABASE_NAME, RunStore

COARSE = ["--step", "60", "--conformers", "1", "--no-frequencies"]
SMALL = [("acrolein", "C=CC=O"), ("butadiene", "C=CC=C"), ("isoprene", "C=CC(C)=C"), ("vinyl-ketone", "C=CC(C)=O"),
         ("crotonaldehyde", "C/C=C/C=O"), ("methacrolein", "C=C(C)C=O"), ("piperylene", "C/C=C/C=C"),
         ("acrylic-acid", "C=CC(=O)O")]


def _listing(folder, compounds):
    path = folder / "list.csv"
    path.write_text("name,smiles\n" + "".join(f"{name},{smiles}\n" for name, smiles in compounds))
    return path


def _statuses(out):
    with sqlite3.connect(f"file:{out / DATABASE_NAME}?mode=ro", uri=True) as db:
        return {name: (status, reason, attempts) for name, status, reason, attempts in
                db.execute("SELECT name, status, reason, attempts FROM compounds")}


def _done(out):
    try:
        return {name for name, (status, *_) in _statuses(out).items() if status == "done"}
    except sqlite3.Error:  # not created yet, or the writer is creating the tables
        return set()


def _start(listing, out, *extra):
    """The batch command in its own process group, as a terminal starts it."""
    command = [sys.executable, "-m", "torsionscan.cli", "batch", str(listing), "--out", str(out), *extra]
    return subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)


def _wait_for(condition, process, seconds=240):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline and process.poll() is None:
        if condition():
            return
        time.sleep(0.05)
    raise AssertionError("the batch ended (or took too long) before the moment the test waits for")


def _stat(pid):
    """(state, ppid, process group) of a live process from /proc, or None."""
    try:
        text = pathlib.Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = text[text.rindex(")") + 2:].split()
    return fields[0], int(fields[1]), int(fields[2])


def _group_members(group):
    """Processes of a process group that are still running (zombies have ended)."""
    members = []
    for entry in pathlib.Path("/proc").iterdir():
        if entry.name.isdigit():
            stat = _stat(entry.name)
            if stat is not None and stat[2] == group and stat[0] != "Z":
                members.append(int(entry.name))
    return members


def _workers(pid):
    """Worker processes (spawned children running a worker loop) of a batch process."""
    children = []
    for task in pathlib.Path(f"/proc/{pid}/task").iterdir():
        try:
            children += [int(c) for c in (task / "children").read_text().split()]
        except OSError:
            continue
    workers = []
    for child in children:
        try:
            command = pathlib.Path(f"/proc/{child}/cmdline").read_bytes()
        except OSError:
            continue
        if b"spawn_main" in command:
            workers.append(child)
    return workers


def _cpu_ticks(pid):
    try:
        text = pathlib.Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return 0
    fields = text[text.rindex(")") + 2:].split()
    return int(fields[11]) + int(fields[12])  # utime + stime


def _busy_worker(pid):
    """A worker of the batch that is computing: the one that used the most CPU time over a moment."""
    workers = _workers(pid)
    before = {worker: _cpu_ticks(worker) for worker in workers}
    time.sleep(0.3)
    used = {worker: _cpu_ticks(worker) - ticks for worker, ticks in before.items()}
    busiest = max(used, key=used.get)
    assert used[busiest] > 0, used
    return busiest


def _assert_nothing_left(group):
    deadline = time.monotonic() + 3.0
    while _group_members(group) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert _group_members(group) == [], subprocess.run(["ps", "-o", "pid,ppid,pgid,stat,cmd", "-g", str(group)],
                                                       capture_output=True, text=True).stdout


# -- Ctrl-C ----------------------------------------------------------------------------------------
@pytest.mark.xtb
def test_ctrl_c_keeps_what_is_stored_ends_the_workers_and_exits_130(tmp_path):
    out = tmp_path / "run"
    process = _start(_listing(tmp_path, SMALL), out, "--workers", "2", *COARSE)
    _wait_for(lambda: _done(out), process)
    stored = _done(out)
    interrupted = time.monotonic()
    os.killpg(process.pid, signal.SIGINT)  # to the whole group, as a terminal's Ctrl-C
    stdout, stderr = process.communicate(timeout=30)
    took = time.monotonic() - interrupted
    assert process.returncode == 130, stderr
    assert took < 5.0
    assert "Traceback" not in stderr
    assert "torsionscan: interrupted (" in stderr.splitlines()[-1]
    _assert_nothing_left(process.pid)
    statuses = _statuses(out)
    assert stored <= _done(out) and len(_done(out)) < len(SMALL)  # kept, and the rest not computed
    assert {status for status, *_ in statuses.values()} <= {"done", "pending"}  # the stopped ones stay pending
    with RunStore(out) as store:
        for name in _done(out):
            assert store.result(name).name == name
            assert (out / "compounds" / name / "summary.json").is_file()


@pytest.mark.xtb
def test_a_second_ctrl_c_exits_at_once_without_a_traceback(tmp_path):
    out = tmp_path / "run"
    process = _start(_listing(tmp_path, SMALL[:4]), out, "--workers", "2", *COARSE)
    _wait_for(lambda: len(_workers(process.pid)) == 2, process)  # the workers are starting or computing
    time.sleep(0.5)
    interrupted = time.monotonic()
    os.killpg(process.pid, signal.SIGINT)
    time.sleep(0.05)
    os.killpg(process.pid, signal.SIGINT)
    stdout, stderr = process.communicate(timeout=30)
    took = time.monotonic() - interrupted
    assert process.returncode == 130, stderr
    assert took < 3.0
    assert "Traceback" not in stderr and "KeyboardInterrupt" not in stderr
    _assert_nothing_left(process.pid)
    assert {status for status, *_ in _statuses(out).values()} <= {"done", "pending"}


# -- workers that die ------------------------------------------------------------------------------
@pytest.mark.xtb
def test_a_compound_that_kills_its_worker_fails_after_two_attempts_and_the_rest_finish(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv(EXIT_IN_WORKER_VARIABLE, "butadiene")  # inherited by the spawned workers
    listing = _listing(tmp_path, SMALL[:2])
    out = tmp_path / "run"
    assert main(["batch", str(listing), "--out", str(out), "--workers", "2", *COARSE]) == 4
    statuses = _statuses(out)
    reason = f"worker process died (exit status {EXIT_IN_WORKER_STATUS}) twice"
    assert statuses["butadiene"][0] == "failed" and statuses["butadiene"][1].startswith(reason)
    assert statuses["butadiene"][2] == 2  # two attempts, each in its own process
    assert statuses["acrolein"][0] == "done"
    captured = capsys.readouterr()
    assert f"butadiene: worker process died (exit status {EXIT_IN_WORKER_STATUS}); trying it once more" in captured.err
    assert f"failed: butadiene: {reason}" in captured.out
    assert not (out / "compounds" / "butadiene").exists()


@pytest.mark.xtb
def test_a_worker_killed_from_outside_is_replaced_and_its_compound_retried(tmp_path):
    out = tmp_path / "run"
    # after the small first one, two compounds that take seconds even on this coarse grid, so the
    # worker picked is still busy with one when it is killed
    compounds = SMALL[:1] + [("phenyl-diene", "C=C/C=C/c1ccccc1"), ("stilbene", "c1ccccc1/C=C/c1ccccc1")]
    process = _start(_listing(tmp_path, compounds), out, "--workers", "2", *COARSE)
    # once a compound is stored both workers hold the next ones (a job is handed out before storing)
    _wait_for(lambda: _done(out), process)
    os.kill(_busy_worker(process.pid), signal.SIGKILL)  # as the kernel's out-of-memory killer would
    stdout, stderr = process.communicate(timeout=300)
    assert process.returncode == 0, stderr
    noted = [line for line in stderr.splitlines() if "worker process died (signal 9); trying it once more" in line]
    assert len(noted) == 1, stderr
    victim = noted[0].split(":")[0]
    statuses = _statuses(out)
    assert all(status == "done" for status, *_ in statuses.values())
    assert statuses[victim][2] == 2
    assert "Traceback" not in stderr


# -- storage ---------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def model_outcome():
    """A worker's outcome for a model-engine scan (plumbing values, no chemistry)."""
    molecule = load_molecule("C=CC=C")
    (bond,) = find_conjugated_bonds(molecule)
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    result = torsionscan.scan("C=CC=C", name="model", engine=engine,
                              settings=ScanSettings(step_deg=60.0, conformers=1, frequencies=False))
    return {"status": "done", "reason": "", "worker": "here:1", "wall_time_s": 0.1, "peak_memory_mb": 1.0,
            "result": json.loads(json.dumps(result.to_dict())), "figures": render_figures(result),
            "rescore_failure": ""}


@pytest.fixture
def model_workers(monkeypatch, model_outcome):
    """Replace the worker pool by one that returns the model outcome for every job, named after it."""
    calls = []

    def outcomes(jobs, workers, threads, interrupts, note=None):
        calls.append([job["name"] for job in jobs])
        for job in jobs:
            yield {**model_outcome, "name": job["name"], "result": {**model_outcome["result"], "name": job["name"]}}

    monkeypatch.setattr(batch, "_local_outcomes", outcomes)
    return calls


FOLDER_FILES = {"summary.json", "bond_2-3_profile.csv", "bond_2-3_profile.png", "bond_2-3_scan.xyz", "structure.svg"}


def _fill_disk_after_first_compound(monkeypatch, where):
    """Make every write after the first stored compound fail as on a full disk: the compound files
    (ENOSPC from the file system) or the database (SQLite's page limit, a real SQLITE_FULL).
    Returns the switch: disk["full"] = False frees the space."""
    disk = {"armed": True, "full": False}
    store_outcome = batch.store_outcome

    def storing(store, outcome, session, out_dir):
        store_outcome(store, outcome, session, out_dir)
        if disk["armed"]:
            disk.update(armed=False, full=True)
            if where == "database":
                pages = store._db.execute("PRAGMA page_count").fetchone()[0]
                store._db.execute(f"PRAGMA max_page_count = {pages}")  # this connection only

    def no_space(original):
        def write(self, *args, **kwargs):
            if disk["full"] and where == "files":
                raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self))
            return original(self, *args, **kwargs)
        return write

    monkeypatch.setattr(batch, "store_outcome", storing)
    monkeypatch.setattr(pathlib.Path, "write_bytes", no_space(pathlib.Path.write_bytes))
    monkeypatch.setattr(pathlib.Path, "write_text", no_space(pathlib.Path.write_text))
    return disk


@pytest.mark.parametrize("where", ["files", "database"])
def test_a_full_disk_stops_the_batch_with_exit_5_and_a_rerun_resumes(tmp_path, monkeypatch, capsys, model_workers,
                                                                      where):
    listing = _listing(tmp_path, SMALL[:3])
    out = tmp_path / "run"
    command = ["batch", str(listing), "--out", str(out), *COARSE]
    disk = _fill_disk_after_first_compound(monkeypatch, where)
    order = ("isoprene", "butadiene", "acrolein")  # handed out largest first
    assert main(command) == 5
    lines = capsys.readouterr().err.strip().splitlines()
    error = lines[-1]
    assert error.startswith("torsionscan: error: cannot write ") and "Traceback" not in "".join(lines)
    assert ("(No space left on device)" if where == "files" else "(database or disk is full)") in error
    done_before = _done(out)
    # the database case loses the compound being committed; the files case has it stored, its folder not
    assert done_before == (set(order[:2]) if where == "files" else set(order[:1]))
    assert error.endswith(f"the batch stopped, every compound finished before is stored ({len(done_before)} done): "
                          "rerun the same command to continue")
    assert set(os.listdir(out / "compounds")) == {order[0]}  # the failed folder is absent, no partial one left
    assert FOLDER_FILES <= set(os.listdir(out / "compounds" / order[0]))

    disk["full"] = False  # space freed
    assert main(command) == 0
    assert _done(out) == set(order)
    # the rerun computed only what was not stored; every compound folder is complete
    assert model_workers[1] == [name for name in order if name not in done_before]
    for name in order:
        assert FOLDER_FILES <= set(os.listdir(out / "compounds" / name))
    assert not [name for name in os.listdir(out / "compounds") if name.startswith(".")]


def _read_only(monkeypatch, folder):
    """Make `folder` refuse new files, as a read-only mount does (permissions do not stop root)."""
    if os.geteuid() != 0:
        folder.chmod(0o555)
        return
    import tempfile

    real = tempfile.mkstemp

    def refuse(*args, dir=None, **kwargs):
        if dir is not None and pathlib.Path(dir).resolve() == folder.resolve():
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(dir))
        return real(*args, dir=dir, **kwargs)

    monkeypatch.setattr(tempfile, "mkstemp", refuse)


def test_an_out_that_is_a_file_or_read_only_is_refused_before_any_calculation(tmp_path, monkeypatch, capsys,
                                                                               model_workers):
    listing = _listing(tmp_path, SMALL[:1])
    settings = ScanSettings(step_deg=60.0, conformers=1, frequencies=False)
    a_file = tmp_path / "taken"
    a_file.write_text("not a folder")
    with pytest.raises(InputError, match="is a file, not a folder: choose another --out"):
        run_batch(listing, a_file, settings)
    with pytest.raises(InputError, match="part of its path is a file"):
        run_batch(listing, a_file / "run", settings)
    assert main(["batch", str(listing), "--out", str(a_file), *COARSE]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and "is a file, not a folder" in lines[0]

    locked = tmp_path / "locked"
    locked.mkdir()
    _read_only(monkeypatch, locked)
    try:
        with pytest.raises(StorageError, match=f"cannot write {locked} .*: choose a writable location or fix its "
                                               "permissions$"):
            run_batch(listing, locked, settings)
        assert main(["batch", str(listing), "--out", str(locked), *COARSE]) == 5
    finally:
        locked.chmod(0o755)
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("torsionscan: error: cannot write")
    assert model_workers == []  # nothing was computed
    assert not (locked / DATABASE_NAME).exists()


def test_a_corrupt_run_database_is_one_line_with_exit_5(tmp_path, capsys, model_workers):
    listing = _listing(tmp_path, SMALL[:1])
    out = tmp_path / "run"
    out.mkdir()
    (out / DATABASE_NAME).write_bytes(b"\x00garbage, not SQLite" * 300)
    assert main(["batch", str(listing), "--out", str(out), *COARSE]) == 5
    lines = capsys.readouterr().err.strip().splitlines()
    assert lines == [f"torsionscan: error: {DATABASE_NAME} in {out} is not a readable run database (file is not a "
                     "database); move it away or choose another --out"]
    assert model_workers == []


# -- Dask ------------------------------------------------------------------------------------------
@pytest.mark.cluster
def test_a_dask_scheduler_without_workers_is_given_up_after_the_wait(tmp_path):
    distributed = pytest.importorskip("distributed")
    listing = _listing(tmp_path, SMALL[:2])
    with distributed.LocalCluster(n_workers=0, processes=False, dashboard_address=None) as cluster:
        started = time.monotonic()
        with pytest.raises(CalculationError) as error:
            run_batch(listing, tmp_path / "run", ScanSettings(step_deg=60.0, conformers=1, frequencies=False),
                      BatchOptions(cluster=cluster.scheduler_address, cluster_worker_wait_s=2.0))
        took = time.monotonic() - started
    assert 2.0 <= took < 15.0
    message = str(error.value)
    assert message == (f"the Dask scheduler at {cluster.scheduler_address} has had no worker for 2 s (2 compound(s) "
                       f"not computed); start workers ('dask worker {cluster.scheduler_address}') and rerun the same "
                       "command to continue")
    assert error.value.exit_code == 3
    assert _done(tmp_path / "run") == set()
