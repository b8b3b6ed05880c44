"""A SQLite file of finished relaxations, keyed by everything that determines them, so an
interrupted refinement resumes without recomputing the points it had finished.

The key is a SHA-256 digest of a level label, the atomic numbers, the start coordinates (exact
float64 bytes), the constraints (atoms and targets), the convergence thresholds and a tag for
how the start Hessian was made; a later run with the same inputs reads the stored result back
bit for bit. Finished optimisations (converged or not) are stored: a failure is computed
again. Several processes may write the same file (SQLite locking). The file is disposable: an
unreadable one, or a row that does not fit, is reported once and the refinement goes on without it.
"""

import hashlib
import logging
import sqlite3
from pathlib import Path

import numpy as np

from .optimize import OptimizationResult

log = logging.getLogger(__name__)
FILE_NAME = "refinement_points.sqlite"
_SCHEMA = """CREATE TABLE IF NOT EXISTS relaxations (
    key TEXT PRIMARY KEY, level TEXT NOT NULL, atoms INTEGER NOT NULL, energy_hartree REAL NOT NULL,
    converged INTEGER NOT NULL, evaluations INTEGER NOT NULL, max_gradient REAL NOT NULL,
    rms_gradient REAL NOT NULL, x BLOB NOT NULL, gradient BLOB NOT NULL, hessian BLOB NOT NULL)"""


def relaxation_key(level, numbers, job, start_tag):
    """Digest of one relaxation's inputs (job: relax.RelaxJob); the start Hessian enters only by its tag."""
    digest = hashlib.sha256()
    for part in (level, start_tag, repr(tuple(int(z) for z in numbers)), repr(job.convergence)):
        digest.update(part.encode() + b"\0")
    digest.update(np.ascontiguousarray(job.coords_bohr, dtype=np.float64).tobytes())
    for constraint in job.constraints:
        digest.update(repr((tuple(int(a) for a in constraint.atoms), float(constraint.target_rad))).encode())
    return digest.hexdigest()


class RelaxationCache:
    """get/put of OptimizationResult by relaxation_key, in the SQLite file at path."""

    def __init__(self, path):
        self.path = Path(path)
        self._connection = None
        self._broken = False

    def _connect(self):
        if self._connection is None and not self._broken:
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
                self._connection = sqlite3.connect(self.path, timeout=60.0)
                self._connection.execute(_SCHEMA)
                self._connection.commit()
            except (sqlite3.Error, OSError) as error:
                self._give_up(f"cannot be used ({error})")
        return self._connection

    def get(self, key):
        """The stored OptimizationResult of key, or None."""
        connection = self._connect()
        if connection is None:
            return None
        try:
            row = connection.execute(
                "SELECT atoms, energy_hartree, converged, evaluations, max_gradient, rms_gradient, x, gradient, "
                "hessian FROM relaxations WHERE key = ?", (key,)).fetchone()
        except sqlite3.Error as error:
            self._give_up(f"unreadable ({error})")
            return None
        if row is None:
            return None
        atoms, energy, converged, evaluations, max_gradient, rms_gradient, x, gradient, hessian = row
        size = 3 * atoms
        if (len(x), len(gradient), len(hessian)) != (8 * size, 8 * size, 8 * size * size):
            self._give_up("holds a row of the wrong size")
            return None
        return OptimizationResult(
            x=np.frombuffer(x, dtype=np.float64).copy(), energy=energy,
            gradient=np.frombuffer(gradient, dtype=np.float64).copy(),
            hessian=np.frombuffer(hessian, dtype=np.float64).reshape(size, size).copy(),
            converged=bool(converged), evaluations=evaluations, max_gradient=max_gradient, rms_gradient=rms_gradient,
        )

    def put(self, key, level, result):
        """Store a finished OptimizationResult under key (committed at once)."""
        connection = self._connect()
        if connection is None:
            return
        x = np.ascontiguousarray(result.x, dtype=np.float64).ravel()
        try:
            with connection:
                connection.execute(
                    "INSERT OR REPLACE INTO relaxations VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (key, level, len(x) // 3, float(result.energy), int(result.converged), int(result.evaluations),
                     float(result.max_gradient), float(result.rms_gradient), x.tobytes(),
                     np.ascontiguousarray(result.gradient, dtype=np.float64).tobytes(),
                     np.ascontiguousarray(result.hessian, dtype=np.float64).tobytes()))
        except sqlite3.Error as error:
            self._give_up(f"cannot be written ({error})")

    def _give_up(self, why):
        log.warning("refinement checkpoint %s %s; going on without it", self.path, why)
        self.close()
        self._broken = True

    def close(self):
        if self._connection is not None:
            self._connection.close()
            self._connection = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
