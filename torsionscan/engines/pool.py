"""Gradients at displaced structures of one molecule, spread over worker processes.

Each worker builds its own engine once (engine_factory, picklable) and answers
gradients_from_reference for its share of the structures (at least MIN_SHARE of them). Every SCF
starts from the reference structure's converged wavefunction, so the gradients are bit for bit
those of one process doing them all.
"""

import multiprocessing
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool

import numpy as np

from ..errors import CalculationError

_ENGINE = None  # this worker process's engine
_START_ERROR = ""  # why it could not be built
MIN_SHARE = 8  # fewest structures worth a process (each share pays one reference SCF)


def _start(engine_factory):
    global _ENGINE, _START_ERROR
    try:
        _ENGINE = engine_factory()
    except Exception as error:  # reported by the parent in one line, not as a worker traceback
        _START_ERROR = f"{type(error).__name__}: {error}"


def _ready():
    return _START_ERROR


def _share(reference_bohr, structures_bohr):
    if _ENGINE is None:
        raise CalculationError(f"a gradient worker could not build its engine ({_START_ERROR})")
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
        count = max(1, min(self.processes, len(structures_bohr) // MIN_SHARE))
        shares = [s for s in np.array_split(np.arange(len(structures_bohr)), count) if len(s)]
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
