"""The SQLite database of a batch run: the system of record for its settings and results.

One file per run folder. A single process (the batch driver) writes it; each compound's result
is committed in one transaction when it arrives, so an interrupted run keeps every finished
compound. The journal is write-ahead with full syncing: a killed writer loses at most the
compound it was committing, never an earlier one, and readers (a report) can open it meanwhile.

Tables: run (key/value: settings, their hash, package version), sessions (each invocation),
compounds (one row each: input, status pending/done/failed, reason, and for a done compound its
whole result as ScanResult.to_dict() JSON text, the record everything else is rebuilt from) and
points (derived from the result, for queries only: one row per profile point, energies in
kcal/mol relative to the bond's profile zero, NULL where there is no value).

A database that cannot be read or written (a full disk, a read-only location, a corrupt or
non-SQLite file, a lock held elsewhere) raises StorageError from every method; errors about one
row's values (sqlite3.IntegrityError and the like) are left to the caller.
"""

import functools
import hashlib
import json
import math
import sqlite3
from datetime import datetime, timezone
from pathlib import Path

from .version import __version__
from .errors import InputError, StorageError
from .molecule import safe_name
from .records import ScanResult

DATABASE_NAME = "run.sqlite"
COMPOUND_FOLDER = "compounds"  # inside a run folder: one sub-folder of files per compound
STORE_SCHEMA = 4

_TABLES = """
CREATE TABLE IF NOT EXISTS run (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS sessions (
    id INTEGER PRIMARY KEY AUTOINCREMENT, started_utc TEXT NOT NULL, finished_utc TEXT,
    command TEXT NOT NULL, workers INTEGER, cluster TEXT);
CREATE TABLE IF NOT EXISTS compounds (
    name TEXT PRIMARY KEY, position INTEGER NOT NULL, smiles TEXT NOT NULL, input_json TEXT NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('pending', 'done', 'failed')), reason TEXT NOT NULL DEFAULT '',
    result_json TEXT, rescore_failure TEXT NOT NULL DEFAULT '', session_id INTEGER REFERENCES sessions(id),
    attempts INTEGER NOT NULL DEFAULT 0, wall_time_s REAL, peak_memory_mb REAL, worker TEXT, finished_utc TEXT);
CREATE TABLE IF NOT EXISTS points (
    compound TEXT NOT NULL REFERENCES compounds(name), bond TEXT NOT NULL, angle_deg REAL NOT NULL,
    measured_angle_deg REAL, energy_rel_kcal_mol REAL, converged INTEGER NOT NULL, mirrored INTEGER NOT NULL,
    gradient_evaluations INTEGER NOT NULL, central_bond_order REAL, homo_lumo_gap_ev REAL,
    failure TEXT NOT NULL DEFAULT '', energy_rescored_rel_kcal_mol REAL,
    PRIMARY KEY (compound, bond, angle_deg));
"""
POINT_COLUMNS = ("angle_deg", "measured_angle_deg", "energy_rel_kcal_mol", "converged", "mirrored",
                 "gradient_evaluations", "central_bond_order", "homo_lumo_gap_ev", "failure",
                 "energy_rescored_rel_kcal_mol")


def _finite(value):
    """A float for a database column: None for NaN or infinity."""
    value = float(value)
    return value if math.isfinite(value) else None


def point_rows(result):
    """(bond label, *POINT_COLUMNS) of every profile point of a ScanResult; kcal/mol relative to the
    bond's profile zero, the re-scored energy relative to the re-scored profile's zero."""
    rows = []
    for bond in result.bonds:
        rescored = {}
        if bond.rescored is not None:
            energies, analysis = bond.rescored.energies_hartree, bond.rescored.analysis
            rescored = {id(p): _finite(analysis.relative_kcal_mol(energies[n])) for p, n in bond.points_with_frames()}
        for p in bond.points:
            rows.append((bond.label, float(p.angle_deg), _finite(p.measured_angle_deg),
                         _finite(bond.profile.relative_kcal_mol(p.energy_hartree)), bool(p.converged),
                         bool(p.mirrored), int(p.gradient_evaluations), _finite(p.central_bond_order),
                         _finite(p.homo_lumo_gap_ev), p.failure, rescored.get(id(p))))
    return rows


def compound_folder(out_dir, name):
    """Folder of one compound's files inside a run folder."""
    return Path(out_dir) / COMPOUND_FOLDER / safe_name(name)


def utc_now():
    """Current UTC time as an ISO 8601 string (seconds)."""
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def settings_hash(settings):
    """SHA-256 (hex) of the settings' canonical JSON together with the package version."""
    text = json.dumps({"settings": settings, "version": __version__}, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def _differences(old, new, prefix=""):
    """'key: old -> new' texts for every differing leaf of two nested dicts."""
    changes = []
    for key in sorted(set(old) | set(new)):
        a, b = old.get(key), new.get(key)
        if isinstance(a, dict) and isinstance(b, dict):
            changes += _differences(a, b, f"{prefix}{key}.")
        elif a != b:
            changes.append(f"{prefix}{key}: {a} -> {b}")
    return changes


# SQLite's primary result codes that mean the database file, not one row, is the problem
_SQLITE_PERM, _SQLITE_BUSY, _SQLITE_LOCKED, _SQLITE_READONLY = 3, 5, 6, 8
_SQLITE_IOERR, _SQLITE_CORRUPT, _SQLITE_FULL, _SQLITE_CANTOPEN, _SQLITE_NOTADB = 10, 11, 13, 14, 26
_ROW_ERRORS = (sqlite3.IntegrityError, sqlite3.InterfaceError, sqlite3.ProgrammingError, sqlite3.DataError)


def storage_problem(folder, error):
    """The StorageError for an sqlite3 error about the database file of the run in `folder`; None for an
    error about one row's values."""
    if isinstance(error, _ROW_ERRORS) or not isinstance(error, sqlite3.DatabaseError):
        return None
    code = (getattr(error, "sqlite_errorcode", None) or 0) & 0xFF
    where = f"{DATABASE_NAME} in {folder}"
    if code in (_SQLITE_CORRUPT, _SQLITE_NOTADB) or type(error) is sqlite3.DatabaseError:
        return StorageError(f"{where} is not a readable run database ({error}); move it away or choose another --out")
    if code == _SQLITE_FULL:
        return StorageError(f"cannot write {where} ({error}): free space or choose another --out")
    if code in (_SQLITE_BUSY, _SQLITE_LOCKED):
        return StorageError(f"{where} is locked by another process ({error}); wait for it to finish or choose "
                            "another --out")
    if code in (_SQLITE_READONLY, _SQLITE_CANTOPEN, _SQLITE_PERM):
        return StorageError(f"cannot write {where} ({error}): choose a writable --out or fix its permissions")
    return StorageError(f"cannot use {where} ({error}): check the disk and the folder, then rerun the same command")


def _guarded(method):
    """A RunStore method whose database-file errors become StorageError."""

    @functools.wraps(method)
    def guarded(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except sqlite3.Error as error:
            problem = storage_problem(self.path.parent, error)
            if problem is None:
                raise
            raise problem from None

    return guarded


class RunStore:
    """A run folder's database. Open with RunStore(folder); use as a context manager to close it."""

    def __init__(self, folder, *, create=True):
        self.path = Path(folder) / DATABASE_NAME
        if not create and not self.path.is_file():
            raise InputError(f"{folder} holds no batch run ({DATABASE_NAME} missing); give the --out folder of a batch")
        self._db = None
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._db = sqlite3.connect(self.path, timeout=60.0)
            self._db.row_factory = sqlite3.Row
            self._open(folder)
        except sqlite3.Error as error:
            self.close()
            raise (storage_problem(folder, error) or StorageError(f"cannot open {self.path} ({error})")) from None
        except OSError as error:
            self.close()
            raise StorageError(f"cannot create {self.path.parent} ({error.strerror or error}): choose a writable "
                               "--out") from None
        except InputError:
            self.close()
            raise

    def _open(self, folder):
        """Check that the file is a run database of this format, then create missing tables."""
        tables = {row[0] for row in self._db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if tables and "run" not in tables:
            raise InputError(f"{self.path} is an SQLite file of another program, not a torsionscan run; "
                             "use a new --out folder")
        if "run" in tables:
            row = self._db.execute("SELECT value FROM run WHERE key = 'store_schema'").fetchone()
            if row is not None and row[0] != str(STORE_SCHEMA):
                raise InputError(f"{folder} holds a run in another database format ({row[0]}, this version reads "
                                 f"{STORE_SCHEMA}); use a new --out folder")
        self._db.execute("PRAGMA journal_mode=WAL")
        self._db.execute("PRAGMA synchronous=FULL")
        self._db.execute("PRAGMA foreign_keys=ON")
        with self._db:
            self._db.executescript(_TABLES)

    def close(self):
        if self._db is not None:
            self._db.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- run settings -------------------------------------------------------------------------
    @_guarded
    def run_info(self):
        """The run table as a dict (values are strings; 'settings' is JSON text)."""
        return {row["key"]: row["value"] for row in self._db.execute("SELECT key, value FROM run")}

    def settings(self):
        """The run's settings dict, or None for a new database."""
        text = self.run_info().get("settings")
        return None if text is None else json.loads(text)

    @_guarded
    def claim_settings(self, settings, list_file):
        """Record the settings of a new run, or check that a resumed run uses the same ones.

        Raises InputError naming the differences when they changed or the package version did.
        """
        info = self.run_info()
        if "settings" not in info:
            with self._db:
                self._db.executemany("INSERT INTO run (key, value) VALUES (?, ?)", [
                    ("settings", json.dumps(settings, sort_keys=True)), ("settings_hash", settings_hash(settings)),
                    ("package_version", __version__), ("store_schema", str(STORE_SCHEMA)),
                    ("created_utc", utc_now()), ("list_file", str(list_file)),
                ])
            return
        folder = self.path.parent
        if info.get("package_version") != __version__:
            raise InputError(
                f"{folder} was computed by torsionscan {info.get('package_version')}, this is {__version__}; "
                "results would mix versions: use a new --out folder"
            )
        if info["settings_hash"] != settings_hash(settings):
            changes = "; ".join(_differences(json.loads(info["settings"]), json.loads(json.dumps(settings))))
            raise InputError(
                f"{folder} was run with other settings ({changes}); "
                "repeat the original options to resume, or use a new --out folder"
            )

    # -- sessions -------------------------------------------------------------------------------
    @_guarded
    def start_session(self, command, workers=None, cluster=None):
        """Record one invocation; returns its id."""
        with self._db:
            cursor = self._db.execute(
                "INSERT INTO sessions (started_utc, command, workers, cluster) VALUES (?, ?, ?, ?)",
                (utc_now(), command, workers, cluster),
            )
        return cursor.lastrowid

    @_guarded
    def finish_session(self, session_id):
        with self._db:
            self._db.execute("UPDATE sessions SET finished_utc = ? WHERE id = ?", (utc_now(), session_id))

    # -- compounds ------------------------------------------------------------------------------
    @_guarded
    def add_compounds(self, entries):
        """Register list entries (compounds.CompoundEntry) as pending; returns the names to keep.

        A known compound keeps its status. Its input may only change while it is not done: a done
        compound whose SMILES, structure, bond, charge or spin changed raises InputError. Entries
        with a problem are stored as failed with that problem as the reason; a row whose problem
        was fixed in the list becomes pending again.
        """
        from .compounds import entry_input

        known = {row["name"]: row for row in
                 self._db.execute("SELECT name, status, reason, attempts, input_json FROM compounds")}
        position = 1 + max((r[0] for r in self._db.execute("SELECT position FROM compounds")), default=0)
        with self._db:
            for entry in entries:
                identity = entry_input(entry)
                stored = {"input": identity, "where": entry.where, "extra": entry.extra}
                row = known.get(entry.name)
                if row is not None:
                    if json.loads(row["input_json"])["input"] == identity:
                        if row["status"] == "failed" and row["attempts"] == 0 and row["reason"] != entry.problem:
                            # a problem of the list row itself (never computed): follow the list as it is now
                            self._db.execute("UPDATE compounds SET status = ?, reason = ? WHERE name = ?",
                                             ("failed" if entry.problem else "pending", entry.problem, entry.name))
                        continue
                    if row["status"] == "done":
                        raise InputError(
                            f"compound {entry.name!r} ({entry.where}) differs from the one already computed in "
                            f"{self.path.parent}; rename it or use a new --out folder"
                        )
                    self._db.execute("DELETE FROM compounds WHERE name = ?", (entry.name,))
                status, reason = ("failed", entry.problem) if entry.problem else ("pending", "")
                self._db.execute(
                    "INSERT INTO compounds (name, position, smiles, input_json, status, reason) VALUES (?, ?, ?, ?, ?, ?)",
                    (entry.name, position, entry.smiles, json.dumps(stored), status, reason),
                )
                position += 1

    @_guarded
    def names(self, status=None):
        """Compound names in list order, optionally only those with one status."""
        if status is None:
            rows = self._db.execute("SELECT name FROM compounds ORDER BY position")
        else:
            rows = self._db.execute("SELECT name FROM compounds WHERE status = ? ORDER BY position", (status,))
        return [row[0] for row in rows]

    @_guarded
    def compound(self, name):
        """One compound's row as a dict (input_json decoded into 'input', 'where', 'extra'; without the
        result: see result())."""
        row = self._db.execute("SELECT * FROM compounds WHERE name = ?", (name,)).fetchone()
        if row is None:
            raise KeyError(name)
        record = dict(row)
        del record["result_json"]
        record.update(json.loads(record.pop("input_json")))
        return record

    @_guarded
    def counts(self):
        """{'pending': n, 'done': n, 'failed': n}."""
        counts = {"pending": 0, "done": 0, "failed": 0}
        for status, count in self._db.execute("SELECT status, COUNT(*) FROM compounds GROUP BY status"):
            counts[status] = count
        return counts

    def _clear_points(self, name):
        self._db.execute("DELETE FROM points WHERE compound = ?", (name,))

    @_guarded
    def record_done(self, name, result, session_id, wall_time_s, peak_memory_mb=None, worker=None,
                    rescore_failure="", attempts=1):
        """Store a finished compound (a ScanResult) in one transaction: its result and its profile points.

        rescore_failure: why the requested re-scoring is missing ("" when it was not asked for or worked).
        attempts: how many tries this took (a worker process that died counts one). Times in seconds,
        memory in MB.
        """
        text = json.dumps(result.to_dict(), allow_nan=False)
        with self._db:
            self._clear_points(name)
            self._db.executemany(
                f"INSERT INTO points (compound, bond, {', '.join(POINT_COLUMNS)}) "
                f"VALUES (?, ?, {', '.join('?' * len(POINT_COLUMNS))})",
                [(name, *row) for row in point_rows(result)],
            )
            self._db.execute(
                "UPDATE compounds SET status = 'done', reason = '', result_json = ?, rescore_failure = ?, "
                "session_id = ?, attempts = attempts + ?, wall_time_s = ?, peak_memory_mb = ?, worker = ?, "
                "finished_utc = ? WHERE name = ?",
                (text, rescore_failure, session_id, attempts, wall_time_s, peak_memory_mb, worker, utc_now(), name),
            )

    @_guarded
    def record_failed(self, name, reason, session_id, wall_time_s=None, peak_memory_mb=None, worker=None, attempts=1):
        """Mark a compound failed with its reason (one transaction); attempts as in record_done."""
        with self._db:
            self._clear_points(name)
            self._db.execute(
                "UPDATE compounds SET status = 'failed', reason = ?, result_json = NULL, rescore_failure = '', "
                "session_id = ?, attempts = attempts + ?, wall_time_s = ?, peak_memory_mb = ?, worker = ?, "
                "finished_utc = ? WHERE name = ?",
                (reason, session_id, attempts, wall_time_s, peak_memory_mb, worker, utc_now(), name),
            )

    @_guarded
    def result(self, name):
        """A done compound's ScanResult, exactly as stored (KeyError if it is not done)."""
        row = self._db.execute("SELECT result_json FROM compounds WHERE name = ?", (name,)).fetchone()
        if row is None or row[0] is None:
            raise KeyError(name)
        return ScanResult.from_dict(json.loads(row[0]))
