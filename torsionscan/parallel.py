"""Independent relaxations and gradients of one molecule, run side by side in threads.

The GFN-xTB libraries (xtb-python and tblite) release Python's lock while they compute, so a
few threads with one OpenMP thread each keep the cores busy without the start cost of worker
processes (about 2 s each here, for importing the libraries). Every piece of work gets its own
engine from the factory, made for it alone: its SCFs never start from another piece's
wavefunction, so the results are the same bits whatever the number of threads and whichever
piece finishes first. One thread runs the pieces in the caller's thread, in order.
"""

import threading
from concurrent.futures import FIRST_EXCEPTION, ThreadPoolExecutor, wait

import numpy as np

from .errors import CalculationError
from .relax import Relaxer, Stopped

MIN_SHARE = 2  # fewest displaced structures worth a thread (each thread pays one reference SCF, about
#               1.4 displaced gradients measured on 20-atom molecules)
POLL_S = 0.1  # longest wait for the pieces before the main thread looks at a pending Ctrl-C again


class ParallelRelaxations:
    """Relaxers of one molecule for pieces of work run in `threads` threads.

    engine_factory() makes a fresh engine (or returns the one shared engine, with threads=1);
    numbers, deadline, bonds as for relax.Relaxer. map() runs pieces and counts their gradients;
    relax_jobs() and gradients_from_reference() are the two kinds of piece the scan needs;
    `evaluations` counts the gradients of every piece run so far.
    Use as a context manager: leaving it stops the pieces still running at their next gradient.
    """

    def __init__(self, engine_factory, numbers, threads=1, deadline=None, bonds=None):
        self.engine_factory = engine_factory
        self.numbers = numbers
        self.threads = max(1, int(threads))
        self.deadline = deadline
        self.bonds = bonds
        self.evaluations = 0
        self._stop = threading.Event()
        self._executor = ThreadPoolExecutor(self.threads, thread_name_prefix="torsionscan") if self.threads > 1 else None

    def relaxer(self):
        """A Relaxer with an engine of its own, stopped when a piece beside it fails."""
        return Relaxer(self.engine_factory(), self.numbers, self.deadline, self.bonds, self._stop)

    def check_deadline(self):
        """TimeLimitExceeded once the deadline has passed."""
        Relaxer(None, self.numbers, self.deadline).check_deadline()

    def map(self, piece, items):
        """[piece(relaxer, item) for each item], in order, each with a relaxer of its own. When
        pieces fail, the others are stopped at their next gradient and the first failure in item
        order is raised once all have ended; the gradients of every piece are counted either way."""
        counts = []

        def run(item):
            relaxer = self.relaxer()
            before = relaxer.engine.evaluations
            try:
                return piece(relaxer, item)
            finally:
                counts.append(relaxer.engine.evaluations - before)  # right away: the engine may be shared

        items = list(items)
        try:
            if self._executor is None or len(items) < 2:
                return [run(item) for item in items]
            futures = [self._executor.submit(run, item) for item in items]

            def failures():
                return [f.exception() for f in futures if f.done() and not f.cancelled() and f.exception() is not None]

            try:
                # in short waits: a Ctrl-C that the kernel hands to a worker thread is still acted on here
                while wait(futures, timeout=POLL_S, return_when=FIRST_EXCEPTION).not_done and not failures():
                    pass
            except BaseException:  # Ctrl-C while waiting: stop the pieces, wait for them, pass it on
                self._halt(futures)
                raise
            if failures():
                self._halt(futures)
                raise next((e for e in failures() if not isinstance(e, Stopped)), failures()[0])
            return [future.result() for future in futures]
        finally:
            self._stop.clear()
            self.evaluations += sum(counts)

    def _halt(self, futures):
        """Stop the running pieces at their next gradient, drop those not begun, wait for the rest."""
        self._stop.set()
        for future in futures:
            future.cancel()
        wait(futures)

    def relax_jobs(self, jobs):
        """Each relax.RelaxJob relaxed on its own engine, in order: the OptimizationResult or the
        CalculationError it raised."""
        def relax(relaxer, job):
            try:
                return relaxer.relax(job.coords_bohr, job.convergence, job.hessian, job.constraints)
            except CalculationError as error:
                return error

        return self.map(relax, jobs)

    def gradients_from_reference(self, reference_bohr, structures_bohr):
        """Gradients (N, 3) in Hartree/Bohr at each structure (N, 3) Bohr, in order, each SCF started
        from the reference structure's wavefunction (engines' gradients_from_reference); the deadline
        checked first. Each thread (one per MIN_SHARE structures, at most `threads`) computes the
        reference once and then takes the next structure not yet taken, so none waits while another
        still has a long share; the values do not depend on which thread computes them."""
        self.check_deadline()
        count = max(1, min(self.threads, len(structures_bohr) // MIN_SHARE))
        pending, lock = iter(range(len(structures_bohr))), threading.Lock()

        def gradients(relaxer, _):
            taken = []

            def structures():
                while True:
                    with lock:
                        index = next(pending, None)
                    if index is None:
                        return
                    taken.append(index)
                    yield structures_bohr[index]

            engine = relaxer.engine
            if hasattr(engine, "gradients_from_reference"):
                values = engine.gradients_from_reference(reference_bohr, structures(), before_each=relaxer.check_deadline)
            else:
                values = [relaxer.gradient(coords) for coords in structures()]
            return list(zip(taken, values))

        gradients_in_order = [None] * len(structures_bohr)
        for share in self.map(gradients, range(count)):
            for index, gradient in share:
                gradients_in_order[index] = gradient
        return gradients_in_order

    def close(self):
        """Stop what is still running and end the threads."""
        self._stop.set()
        if self._executor is not None:
            self._executor.shutdown(wait=True, cancel_futures=True)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

