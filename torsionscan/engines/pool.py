"""Gradients at displaced structures of one molecule, spread over worker processes.

Each worker builds its own engine once (engine_factory, picklable) and answers
gradients_from_reference for its share of the structures. Every SCF starts from the reference
structure's converged wavefunction, so the gradients are bit for bit those of one process doing
them all. Workers are spawned when the pool is made, so their start-up overlaps the caller's work.
"""

import multiprocessing
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool

import numpy as np

from ..errors import CalculationError

_ENGINE = None  # this worker process's engine


def _start(engine_factory):
    global _ENGINE
    _ENGINE = engine_factory()


def _ready():
    return _ENGINE is not None


def _share(reference_bohr, structures_bohr):
    return _ENGINE.gradients_from_reference(reference_bohr, structures_bohr)


class GradientPool:
    """gradients_from_reference over `processes` spawned workers; `evaluations` counts their gradients."""

    def __init__(self, engine_factory, processes):
        self.processes = processes
        self.evaluations = 0
        self._pool = ProcessPoolExecutor(max_workers=processes, mp_context=multiprocessing.get_context("spawn"),
                                         initializer=_start, initargs=(engine_factory,))
        self._warming = [self._pool.submit(_ready) for _ in range(processes)]  # start the workers now

    def gradients_from_reference(self, reference_bohr, structures_bohr):
        """Gradients (N, 3) at each structure, in order (see WarmStartEngine.gradients_from_reference)."""
        shares = [s for s in np.array_split(np.arange(len(structures_bohr)), self.processes) if len(s)]
        futures = [self._pool.submit(_share, reference_bohr, [structures_bohr[i] for i in share]) for share in shares]
        self.evaluations += len(shares) + len(structures_bohr)
        try:
            return [gradient for future in futures for gradient in future.result()]
        except BrokenProcessPool:
            raise CalculationError("a gradient worker process died (out of memory, or a crash in the GFN-xTB "
                                   "library); rerun with one core (--cores 1)") from None

    def close(self):
        self._pool.shutdown(wait=True, cancel_futures=True)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
