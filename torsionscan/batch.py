"""Batch scans of a compound list: parallel, resumable, recorded in the run's SQLite store.

Work is spread over local worker processes (started with "spawn", so no process inherits a
running calculation library's threads) or over a Dask distributed cluster. Workers only
compute: each returns a plain-data outcome, and this process alone writes the database and the
files, committing every compound as soon as its outcome arrives. Rerunning on the same folder
skips finished compounds; failed ones are retried on request.
"""

import collections
import json
import logging
import multiprocessing
import multiprocessing.connection
import os
import pickle
import resource
import signal
import socket
import sqlite3
import threading
import time
from dataclasses import dataclass, replace
from pathlib import Path

from .threads import THREAD_VARIABLES, usable_cores
from .compounds import read_compound_list
from .engines import resolve_backend
from .errors import CalculationError, InputError, StorageError, TimeLimitExceeded, TorsionScanError
from .records import FitOptions, ScanResult
from .relaxcache import FILE_NAME as CHECKPOINT_FILE
from .relaxcache import RelaxationCache
from .store import RunStore, compound_folder

log = logging.getLogger(__name__)

# test hook: a worker given the compound of this name ends its process at once (os._exit), as a crash would
EXIT_IN_WORKER_VARIABLE = "TORSIONSCAN_TEST_EXIT_IN_WORKER"
EXIT_IN_WORKER_STATUS = 70
CLUSTER_WORKER_WAIT_S = 60.0


@dataclass(frozen=True)
class BatchOptions:
    """How a batch is spread out. Times in seconds."""

    workers: int | None = None  # local worker processes; None = usable cores
    threads_per_worker: int = 1  # OpenMP/BLAS threads in each worker
    cluster: str | None = None  # Dask scheduler address; replaces local workers
    retry_failed: bool = False
    timeout_per_compound_s: float | None = None
    rescore: str | None = None  # DFT level to re-score every scan with (rescore.parse_level)
    refine: str | None = None  # DFT level to re-optimise every scan at (workflows.refine_with_dft)
    refine_points: str = "all"  # "all" grid points or only the "stationary" ones
    cluster_worker_wait_s: float = CLUSTER_WORKER_WAIT_S  # give up when a Dask scheduler has no worker this long
    fit_for: str | None = None  # "mmff94": fit torsion terms for every scanned bond inside the workers
    fit_options: FitOptions = FitOptions()
    allow_outside_files: bool = False  # structure_file entries outside the list's folder
    allow_large: bool = False  # molecules above molecule.MAX_ATOMS atoms

    def check(self):
        if self.workers is not None and self.workers < 1:
            raise InputError("--workers must be at least 1")
        if self.threads_per_worker < 1:
            raise InputError("--threads-per-worker must be at least 1")
        if self.timeout_per_compound_s is not None and not self.timeout_per_compound_s > 0:
            raise InputError("--timeout-per-compound must be a positive number of seconds")
        if self.fit_for not in (None, "mmff94"):
            raise InputError(f"--fit-for {self.fit_for!r}: the built-in force field is mmff94")
        self.fit_options.check()


@dataclass(frozen=True)
class BatchSummary:
    """What a batch invocation did. Counts are over the whole run folder after it."""

    counts: dict
    computed: int  # compounds computed by this invocation
    failures: list  # (name, reason) of every failed compound in the run
    wall_time_s: float
    out_dir: Path


def scan_compound(job):
    """Scan one compound (runs in a worker). job: dict from make_job. Returns a plain-data outcome:
    name, worker, status ("done"/"failed"), reason, result (ScanResult.to_dict()), figures
    (output.render_figures), rescore_failure, wall_time_s (seconds), peak_memory_mb.

    Never raises for a problem with the compound: the outcome's status is then "failed" with the reason.
    A failed re-scoring keeps the finished scan; its reason is the outcome's rescore_failure.
    """
    if os.environ.get(EXIT_IN_WORKER_VARIABLE) == job["name"]:
        os._exit(EXIT_IN_WORKER_STATUS)
    from rdkit import Chem

    from .driver import scan
    from .output import render_figures

    started = time.perf_counter()
    outcome = {"name": job["name"], "worker": f"{socket.gethostname()}:{os.getpid()}", "reason": ""}
    given = job["input"]
    try:
        source = given["smiles"]
        if given["molblock"]:
            source = Chem.MolFromMolBlock(given["molblock"], removeHs=False)
            if source is None:
                raise InputError("the structure block could not be read")
        result = scan(
            source, bond=given["bond"] or None, name=job["name"], charge=given["charge"],
            unpaired_electrons=given["unpaired_electrons"], settings=job["settings"], time_limit_s=job["time_limit_s"],
        )
        rescore_failure = ""
        if job.get("rescore"):
            result, rescore_failure = _rescored(result, job)
        if job.get("refine"):
            result, refine_failure = _refined(result, job)
            rescore_failure = "; ".join(r for r in (rescore_failure, refine_failure) if r)
        if job.get("fit_for"):
            result, fit_failure = _fitted(result, job)
            rescore_failure = "; ".join(r for r in (rescore_failure, fit_failure) if r)
        plain = result.to_dict()
        json.dumps(plain, allow_nan=False)  # a value the store cannot hold fails this compound, here
        # drawing here keeps the single writing process free to take the next outcome
        outcome.update(status="done", result=plain, figures=render_figures(result), rescore_failure=rescore_failure)
    except TimeLimitExceeded as error:
        outcome.update(status="failed", reason=f"timeout: not finished within {job['time_limit_s']:g} s ({error})")
    except TorsionScanError as error:
        outcome.update(status="failed", reason=str(error))
    except Exception as error:  # a library fault in one compound must not stop the batch
        outcome.update(status="failed", reason=f"internal error: {type(error).__name__}: {error}")
    outcome["wall_time_s"] = time.perf_counter() - started
    outcome["peak_memory_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: KiB
    return outcome


def _rescored(result, job):
    """(result re-scored at the job's DFT level, "") or, if that fails, (the scan unchanged, reason)."""
    from .rescore import parse_level, rescore_result

    try:
        return rescore_result(result, parse_level(job["rescore"]), job["threads"]), ""
    except TorsionScanError as error:  # keep the finished scan; say why the DFT part is missing
        return result, f"re-scoring at {job['rescore']} failed: {error}"


def _refined(result, job):
    """(result refined at the job's DFT level, "") or, if that fails, (the scan unchanged, reason);
    the optimisations run one after the other inside this worker."""
    from .rescore import parse_level
    from .workflows import refine_with_dft

    cache = RelaxationCache(job["checkpoint"]) if job.get("checkpoint") else None
    try:
        return refine_with_dft(result, parse_level(job["refine"]), job["refine_points"], processes=1,
                               threads=job["threads"], cache=cache), ""
    except (TorsionScanError, ValueError) as error:  # keep the finished scan; say why the refinement is missing
        return result, f"refinement at {job['refine']} failed: {error}"
    finally:
        if cache is not None:
            cache.close()


def _fitted(result, job):
    """(result with a torsion-term fit against MMFF94 on every scanned bond, "") or, for a bond that
    cannot be fitted, (the result with the other bonds' fits, reason)."""
    from .forcefield import fit_torsion

    bonds, reasons = [], []
    for bond in result.bonds:
        try:
            bonds.append(replace(bond, torsion_fit=fit_torsion(result, bond, job["fit_options"])))
        except (TorsionScanError, ValueError) as error:
            bonds.append(bond)
            reasons.append(f"torsion fit of bond {bond.label} failed: {error}")
    return replace(result, bonds=tuple(bonds)), "; ".join(reasons)


def make_job(record, settings, options, out_dir=None):
    """The picklable work item of one compound (record: RunStore.compound); refinements by local
    workers keep their finished optimisations in out_dir's checkpoint file (Dask workers, which may
    not share this file system, keep none)."""
    checkpoint = None
    if options.refine and out_dir is not None and not options.cluster:
        checkpoint = str(Path(out_dir).resolve() / CHECKPOINT_FILE)
    return {"name": record["name"], "input": record["input"], "settings": settings,
            "time_limit_s": options.timeout_per_compound_s, "rescore": options.rescore,
            "refine": options.refine, "refine_points": options.refine_points, "threads": options.threads_per_worker,
            "checkpoint": checkpoint, "fit_for": options.fit_for, "fit_options": options.fit_options}


class _Interrupts:
    """Ctrl-C during a batch. The first asks the batch to stop: no new work is handed out, outcomes
    already returned are stored, the workers are ended. A second one stops at once (KeyboardInterrupt;
    while the workers are being ended it only skips their grace time).

    Installed only in the main thread, the one Python delivers signals to; elsewhere a no-op."""

    def __init__(self):
        self.requested = False
        self.forced = False
        self.stopping = False
        self._previous = None
        self._installed = False

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            self._previous = signal.getsignal(signal.SIGINT)
            signal.signal(signal.SIGINT, self._handle)
            self._installed = True
        return self

    def __exit__(self, *exc):
        if self._installed:
            signal.signal(signal.SIGINT, self._previous if self._previous is not None else signal.default_int_handler)

    def _handle(self, signum, frame):
        if self.requested:
            self.forced = True
            if not self.stopping:
                raise KeyboardInterrupt
        self.requested = True


class BatchInterrupted(KeyboardInterrupt):
    """The batch stopped at Ctrl-C; the message says what is stored."""


POLL_S = 0.2  # the pool's longest wait before it looks at an interrupt again
STOP_GRACE_S = 2.0  # a worker asked to end (SIGTERM) is killed (SIGKILL) after this long
START_FAILURES = 3  # workers in a row dying before they are ready: the environment is broken


def _death(exitcode):
    """'signal 9' or 'exit status 70' for a worker process that ended by itself."""
    if exitcode is None:
        return "no exit status"
    return f"signal {-exitcode}" if exitcode < 0 else f"exit status {exitcode}"


def _end_with_parent(parent_pid):
    """Linux: have the kernel kill this process when the parent dies (its outcome could not be stored)."""
    try:
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # not Linux: the worker ends when it next talks to the pipe
        return
    if os.getppid() != parent_pid:  # the parent died before the request took effect
        os._exit(0)


def _worker_loop(connection, parent_pid):
    """Body of one local worker process: say it is ready, then compute each job received and send its
    outcome back; stop at None or when the parent is gone. Ctrl-C is the parent's business only."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})  # blocked by the parent while starting us
    _end_with_parent(parent_pid)
    try:
        connection.send(("ready", None))
        while True:
            job = connection.recv()
            if job is None:
                return
            outcome = scan_compound(job)
            try:
                connection.send(("outcome", outcome))  # pickled whole before anything is written
            except (pickle.PicklingError, TypeError, AttributeError) as error:
                connection.send(("outcome", {"name": job["name"], "status": "failed", "worker": outcome.get("worker"),
                                             "reason": f"the outcome could not be sent back: {type(error).__name__}: "
                                                       f"{error}"}))
    except (EOFError, OSError):  # the parent ended: nobody wants the outcome
        return


class _Worker:
    """One spawned worker process, the pipe to it and the job it holds (at most one)."""

    def __init__(self, context):
        self.connection, self._child_end = context.Pipe()
        # daemon: should one ever be left behind, the exit of this process ends it rather than waiting for it
        self.process = context.Process(target=_worker_loop, args=(self._child_end, os.getpid()),
                                       name="torsionscan-worker", daemon=True)
        self.ready = False
        self.job = None
        self.sent_at = None

    def start(self, threads):
        saved = {variable: os.environ.get(variable) for variable in THREAD_VARIABLES}
        os.environ.update({variable: str(threads) for variable in THREAD_VARIABLES})  # inherited by the child
        # the child starts with Ctrl-C ignored (an ignored signal stays ignored across exec and Python then
        # installs no KeyboardInterrupt handler), so a terminal's Ctrl-C reaches only this process
        mask = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
        previous = None
        try:
            if threading.current_thread() is threading.main_thread():
                previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
            self.process.start()
        finally:
            for variable, value in saved.items():
                if value is None:
                    os.environ.pop(variable, None)
                else:
                    os.environ[variable] = value
            self._child_end.close()
            if previous is not None:
                signal.signal(signal.SIGINT, previous)
            signal.pthread_sigmask(signal.SIG_SETMASK, mask)  # last: a Ctrl-C meanwhile is delivered now

    def give(self, job):
        self.job, self.sent_at = job, time.perf_counter()
        self.connection.send(job)

    def receive(self):
        """The next message, or None when the pipe broke (the process died, perhaps mid-message)."""
        try:
            return self.connection.recv()
        except (EOFError, OSError, pickle.UnpicklingError, ValueError, TypeError, AttributeError):
            return None

    def alive(self):
        return self.process.pid is not None and self.process.is_alive()


def _stop_workers(pool, interrupts):
    """End every worker: a clean stop to idle ones, SIGTERM to busy ones, SIGKILL after the grace time
    (at once after a second Ctrl-C); then reap them so no process is left behind."""
    interrupts.stopping = True
    try:
        _end_workers(pool, interrupts)
    finally:
        interrupts.stopping = False


def _end_workers(pool, interrupts):
    pool = [worker for worker in pool if worker.process.pid is not None]  # started ones
    for worker in pool:
        if worker.alive():
            try:
                if worker.ready and worker.job is None and not interrupts.requested:
                    worker.connection.send(None)
                else:
                    worker.process.terminate()
            except OSError:
                worker.process.terminate()
    deadline = time.monotonic() + STOP_GRACE_S
    while any(worker.alive() for worker in pool) and time.monotonic() < deadline and not interrupts.forced:
        time.sleep(0.01)
    for worker in pool:
        if worker.alive():
            worker.process.kill()
    for worker in pool:
        worker.process.join(timeout=5.0)
        worker.connection.close()


def _local_outcomes(jobs, workers, threads_per_worker, interrupts, note=log.warning):
    """Outcomes as they finish, from spawned local processes holding one job each.

    A worker that dies is replaced; the compound it held is tried once more on the new worker and then
    given up as failed ("worker process died (signal 9) twice"). Stops handing out jobs when an
    interrupt is requested, after yielding the outcomes already sent back.
    """
    context = multiprocessing.get_context("spawn")
    queue = collections.deque(jobs)
    deaths = {}  # compound name -> how its workers died
    pool = []
    start_failures = 0

    def start_worker(job=None):
        worker = _Worker(context)
        worker.job = job  # handed over once the worker says it is ready
        pool.append(worker)  # before it starts: whatever happens next, the pool ends it
        worker.start(threads_per_worker)

    def next_job():
        return queue.popleft() if queue and not interrupts.requested else None

    def hand_out(worker, job):
        """Give a ready worker its next job, or tell it to end when there is none."""
        try:
            if job is not None:
                worker.give(job)
            else:
                worker.connection.send(None)
        except OSError:  # died meanwhile: found dead on the next round, holding the job
            pass

    try:
        for _ in range(min(workers, len(queue))):
            start_worker(next_job())
        while any(worker.job is not None or not worker.ready for worker in pool) and not interrupts.requested:
            waiting = [worker.connection for worker in pool] + [worker.process.sentinel for worker in pool]
            ready = set(multiprocessing.connection.wait(waiting, timeout=POLL_S))
            for worker in list(pool):
                if worker.connection not in ready and worker.process.sentinel not in ready:
                    continue
                message = worker.receive() if worker.connection.poll() or worker.connection in ready else None
                if message is not None:
                    kind, payload = message
                    if kind == "ready":
                        worker.ready, start_failures = True, 0
                        job, worker.job = worker.job or next_job(), None
                        hand_out(worker, job)
                    else:
                        worker.job = None
                        hand_out(worker, next_job())  # the next compound first, then the parent stores this one
                        payload["attempts"] = 1 + len(deaths.get(payload["name"], ()))
                        yield payload
                    continue
                if worker.alive():  # pipe readable but broken while the process is still going
                    worker.process.kill()
                worker.process.join(timeout=5.0)
                worker.connection.close()
                pool.remove(worker)
                job = worker.job
                if not worker.ready:
                    start_failures += 1
                    if start_failures >= START_FAILURES:
                        raise CalculationError(
                            f"local worker processes end while starting ({_death(worker.process.exitcode)}); "
                            "check that 'python -m torsionscan.cli --version' works in this environment"
                        )
                    if job is not None and not interrupts.requested:
                        start_worker(job)  # it never started the job: no attempt counted
                    continue
                if job is None:
                    job = next_job()
                    if job is not None:
                        start_worker(job)
                    continue
                if interrupts.requested:  # ended by the interrupt itself, or not worth a retry now: stays pending
                    continue
                how = deaths.setdefault(job["name"], [])
                how.append(_death(worker.process.exitcode))
                if len(how) == 1:
                    note(f"{job['name']}: worker process died ({how[0]}); trying it once more in a new worker")
                    start_worker(job)
                    continue
                cause = f"({how[0]}) twice" if how[0] == how[1] else f"twice ({how[0]}, then {how[1]})"
                job_left = next_job()
                if job_left is not None:
                    start_worker(job_left)
                yield {"name": job["name"], "status": "failed", "worker": f"{socket.gethostname()}:{worker.process.pid}",
                       "reason": f"worker process died {cause}: a crash inside a calculation library or out of memory",
                       "wall_time_s": time.perf_counter() - worker.sent_at, "attempts": len(how)}
        if interrupts.requested:  # outcomes already sent back are kept
            for worker in pool:
                while worker.job is not None and worker.ready and worker.connection.poll():
                    message = worker.receive()
                    if message is None:
                        break
                    if message[0] == "outcome":
                        worker.job = None
                        message[1]["attempts"] = 1 + len(deaths.get(message[1]["name"], ()))
                        yield message[1]
    finally:
        _stop_workers(pool, interrupts)


def _cluster_outcomes(jobs, address, interrupts, worker_wait_s):
    """Outcomes as they finish, computed on a Dask distributed cluster. Raises CalculationError when the
    scheduler has had no worker for worker_wait_s seconds."""
    try:
        from distributed import Client, as_completed as dask_completed
    except ImportError:
        raise InputError("--cluster needs Dask distributed: pip install 'torsionscan[cluster]'") from None
    try:
        client = Client(address, timeout="30s")
    except OSError as error:
        raise InputError(f"cannot reach a Dask scheduler at {address} ({error}); start one or check the address") from None
    with client:
        futures = {client.submit(scan_compound, job, pure=False): job["name"] for job in jobs}
        completed = dask_completed(futures)
        alone_since = time.monotonic()  # since when no worker has been connected
        checked = 0.0
        try:
            while not completed.is_empty() and not interrupts.requested:
                for future in completed.next_batch(block=False) if completed.has_ready() else ():
                    try:
                        yield future.result()
                    except Exception as error:  # e.g. the worker running it died repeatedly
                        yield {"name": futures[future], "status": "failed",
                               "reason": f"cluster error: {type(error).__name__}: {error}"}
                now = time.monotonic()
                if now - checked >= 1.0:
                    checked = now
                    try:
                        connected = bool(client.nthreads())
                    except Exception as error:  # the scheduler went away
                        raise CalculationError(
                            f"lost the Dask scheduler at {address} ({type(error).__name__}: {error}); finished "
                            "compounds are stored: restart it and rerun the same command to continue") from None
                    if connected:
                        alone_since = now
                    elif now - alone_since >= worker_wait_s:
                        left = completed.count()
                        raise CalculationError(
                            f"the Dask scheduler at {address} has had no worker for {worker_wait_s:g} s "
                            f"({left} compound(s) not computed); start workers ('dask worker {address}') and "
                            "rerun the same command to continue")
                time.sleep(0.05)
        finally:
            client.cancel(list(futures))


def store_outcome(store, outcome, session_id, out_dir):
    """Commit one outcome to the store, then write the compound's folder from the stored result."""
    from .output import write_results

    common = dict(session_id=session_id, wall_time_s=outcome.get("wall_time_s"),
                  peak_memory_mb=outcome.get("peak_memory_mb"), worker=outcome.get("worker"),
                  attempts=outcome.get("attempts", 1))
    if outcome["status"] != "done":
        store.record_failed(outcome["name"], outcome["reason"], **common)
        return
    try:
        result = ScanResult.from_dict(outcome["result"])
        store.record_done(outcome["name"], result, rescore_failure=outcome.get("rescore_failure", ""), **common)
    except (sqlite3.Error, ValueError, TypeError, InputError) as error:  # this compound only: the run carries on
        outcome.update(status="failed", reason=f"could not store the result: {type(error).__name__}: {error}")
        store.record_failed(outcome["name"], outcome["reason"], **common)
        return
    write_results(result, compound_folder(out_dir, outcome["name"]), outcome["figures"])


def run_batch(list_path, out_dir, settings, options=BatchOptions(), progress=None, command="batch"):
    """Scan every pending compound of a list into out_dir; returns a BatchSummary.

    settings: ScanSettings. progress: optional object with start(to_compute, already_done),
    update(outcome) after each compound is stored, close() and optionally note(text) (see output.progress).
    Raises InputError for an unreadable list, a run folder made with other settings or an --out that is a
    file; StorageError when the run folder cannot be written (checked before any calculation) or fills up
    (the batch stops; everything stored stays); CalculationError when the worker processes cannot start or
    a Dask scheduler has no worker; BatchInterrupted (a KeyboardInterrupt) after Ctrl-C.
    """
    from .output import check_output_folder

    started = time.perf_counter()
    settings.check()
    options.check()
    # every worker, local or remote, must use the same implementation: fix it here, record it in the run
    settings = replace(settings, engine=resolve_backend(settings.engine, settings.solvent, settings.solvation_model))
    if options.cluster and (options.workers or options.threads_per_worker != 1):
        log.warning("--workers and --threads-per-worker apply to local workers; the Dask workers keep their own")
    entries = read_compound_list(list_path, allow_outside_files=options.allow_outside_files,
                                 allow_large=options.allow_large)
    for entry in entries:
        if entry.note:
            log.warning("%s (%s): %s", list_path, entry.where, entry.note)
    out_dir = Path(out_dir)
    check_output_folder(out_dir)
    with RunStore(out_dir) as store:
        claimed = settings.as_dict()
        if options.rescore:
            from .rescore import check_rescoring

            claimed["rescore_level"] = check_rescoring(options.rescore, settings).label
        if options.refine:
            from .workflows import check_refinement

            claimed["refine_level"] = check_refinement(options.refine, settings, options.refine_points).label
            claimed["refine_points"] = options.refine_points
        store.claim_settings(claimed, list_path)
        store.add_compounds(entries)
        todo = store.names("pending") + (store.names("failed") if options.retry_failed else [])
        listed = {entry.name for entry in entries if not entry.problem}
        jobs = [make_job(store.compound(name), settings, options, out_dir) for name in todo if name in listed]
        atoms = {entry.name: entry.atoms for entry in entries}
        jobs.sort(key=lambda job: -atoms[job["name"]])  # largest first: no long compound left to finish alone
        workers = options.workers or usable_cores()
        session = store.start_session(command, None if options.cluster else workers, options.cluster)
        note = getattr(progress, "note", None) or log.warning
        computed = 0
        if progress:
            progress.start(len(jobs), store.counts()["done"])
        with _Interrupts() as interrupts:
            if options.cluster:
                outcomes = _cluster_outcomes(jobs, options.cluster, interrupts, options.cluster_worker_wait_s)
            else:
                outcomes = _local_outcomes(jobs, min(workers, max(len(jobs), 1)), options.threads_per_worker,
                                           interrupts, note)
            stopped = True  # by an exception; finish_session must not hide it
            try:
                for outcome in outcomes:
                    try:
                        store_outcome(store, outcome, session, out_dir)
                    except StorageError as error:
                        raise StorageError(f"{error}; the batch stopped, every compound finished before is stored "
                                           f"({_done_count(store)}): rerun the same command to continue") from None
                    computed += 1
                    if progress:
                        progress.update(outcome)
                stopped = False
            finally:
                outcomes.close()
                try:
                    store.finish_session(session)
                except StorageError:
                    if not stopped:
                        raise
                if progress:
                    progress.close()
            if interrupts.requested:
                counts = store.counts()
                raise BatchInterrupted(
                    f"{computed} compound(s) stored by this run, {counts['done']} done in {out_dir} and "
                    f"{counts['pending']} still to compute")
        failures = [(name, store.compound(name)["reason"]) for name in store.names("failed")]
        counts = store.counts()
    return BatchSummary(counts, computed, failures, time.perf_counter() - started, out_dir)


def _done_count(store):
    """'N done' of a run database, or 'count unavailable' when even that cannot be read."""
    try:
        return f"{store.counts()['done']} done"
    except StorageError:
        return "count unavailable"
