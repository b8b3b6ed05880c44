"""Batch scans of a compound list: parallel, resumable, recorded in the run's SQLite store.

Work is spread over local worker processes (started with "spawn", so no process inherits a
running calculation library's threads) or over a Dask distributed cluster. Workers only
compute: each returns a plain-data outcome, and this process alone writes the database and the
files, committing every compound as soon as its outcome arrives. Rerunning on the same folder
skips finished compounds; failed ones are retried on request.
"""

import json
import logging
import multiprocessing
import os
import resource
import socket
import sqlite3
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, replace
from pathlib import Path

from .threads import THREAD_VARIABLES, usable_cores
from .compounds import read_compound_list
from .engines import resolve_backend
from .errors import CalculationError, InputError, TimeLimitExceeded, TorsionScanError
from .records import ScanResult
from .store import RunStore, compound_folder

log = logging.getLogger(__name__)


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

    def check(self):
        if self.workers is not None and self.workers < 1:
            raise InputError("--workers must be at least 1")
        if self.threads_per_worker < 1:
            raise InputError("--threads-per-worker must be at least 1")
        if self.timeout_per_compound_s is not None and not self.timeout_per_compound_s > 0:
            raise InputError("--timeout-per-compound must be a positive number of seconds")


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

    try:
        return refine_with_dft(result, parse_level(job["refine"]), job["refine_points"], processes=1,
                               threads=job["threads"]), ""
    except (TorsionScanError, ValueError) as error:  # keep the finished scan; say why the refinement is missing
        return result, f"refinement at {job['refine']} failed: {error}"


def make_job(record, settings, options):
    """The picklable work item of one compound (record: RunStore.compound)."""
    return {"name": record["name"], "input": record["input"], "settings": settings,
            "time_limit_s": options.timeout_per_compound_s, "rescore": options.rescore,
            "refine": options.refine, "refine_points": options.refine_points, "threads": options.threads_per_worker}


def _local_outcomes(jobs, workers, threads_per_worker):
    """Outcomes as they finish, from a pool of spawned local processes."""
    saved = {variable: os.environ.get(variable) for variable in THREAD_VARIABLES}
    os.environ.update({variable: str(threads_per_worker) for variable in THREAD_VARIABLES})  # for the workers
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"))
    try:
        try:
            futures = [pool.submit(scan_compound, job) for job in jobs]  # workers start during these calls
        finally:
            for variable, value in saved.items():
                if value is None:
                    os.environ.pop(variable, None)
                else:
                    os.environ[variable] = value
        for future in as_completed(futures):
            try:
                yield future.result()
            except BrokenProcessPool:
                raise CalculationError(
                    "a worker process died (a crash inside a calculation library, or out of memory); "
                    "finished compounds are stored: rerun the same command to continue"
                ) from None
    finally:
        pool.shutdown(wait=False, cancel_futures=True)


def _cluster_outcomes(jobs, address):
    """Outcomes as they finish, computed on a Dask distributed cluster."""
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
        for future in dask_completed(futures):
            try:
                yield future.result()
            except Exception as error:  # e.g. the worker running it died repeatedly
                yield {"name": futures[future], "status": "failed",
                       "reason": f"cluster error: {type(error).__name__}: {error}"}


def store_outcome(store, outcome, session_id, out_dir):
    """Commit one outcome to the store, then write the compound's folder from the stored result."""
    from .output import write_results

    common = dict(session_id=session_id, wall_time_s=outcome.get("wall_time_s"),
                  peak_memory_mb=outcome.get("peak_memory_mb"), worker=outcome.get("worker"))
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
    update(outcome) after each compound is stored, and close() (see output.progress).
    Raises InputError for an unreadable list or a run folder made with other settings.
    """
    started = time.perf_counter()
    settings.check()
    options.check()
    # every worker, local or remote, must use the same implementation: fix it here, record it in the run
    settings = replace(settings, engine=resolve_backend(settings.engine, settings.solvent, settings.solvation_model))
    if options.cluster and (options.workers or options.threads_per_worker != 1):
        log.warning("--workers and --threads-per-worker apply to local workers; the Dask workers keep their own")
    entries = read_compound_list(list_path)
    for entry in entries:
        if entry.note:
            log.warning("%s (%s): %s", list_path, entry.where, entry.note)
    out_dir = Path(out_dir)
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
        jobs = [make_job(store.compound(name), settings, options) for name in todo if name in listed]
        workers = options.workers or usable_cores()
        session = store.start_session(command, None if options.cluster else workers, options.cluster)
        if options.cluster:
            outcomes = _cluster_outcomes(jobs, options.cluster)
        else:
            outcomes = _local_outcomes(jobs, min(workers, max(len(jobs), 1)), options.threads_per_worker)
        computed = 0
        if progress:
            progress.start(len(jobs), store.counts()["done"])
        try:
            for outcome in outcomes:
                store_outcome(store, outcome, session, out_dir)
                computed += 1
                if progress:
                    progress.update(outcome)
        finally:
            outcomes.close()
            store.finish_session(session)
            if progress:
                progress.close()
        failures = [(name, store.compound(name)["reason"]) for name in store.names("failed")]
        counts = store.counts()
    return BatchSummary(counts, computed, failures, time.perf_counter() - started, out_dir)
