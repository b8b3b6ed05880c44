"""Pieces of one scan side by side in threads: order of results, gradient counts, and a failing
piece stopping the others at their next gradient (the path a Ctrl-C takes too)."""

import threading
import time

import numpy as np
import pytest

from torsionscan.errors import CalculationError
from torsionscan.parallel import ParallelRelaxations


class CountingEngine:
    """A harmonic well per atom that sleeps while it computes (as a library releasing the lock would)."""

    capabilities = frozenset()

    def __init__(self, seconds=0.0):
        self.seconds, self.evaluations = seconds, 0

    def energy_and_gradient(self, coords_bohr):
        self.evaluations += 1
        time.sleep(self.seconds)
        return float(np.sum(coords_bohr ** 2)), 2.0 * np.asarray(coords_bohr)

    def gradients_from_reference(self, reference_bohr, structures_bohr, before_each=None):
        """As the GFN-xTB engines: one reference SCF, then a check before each structure's."""
        self.energy_and_gradient(reference_bohr)
        gradients = []
        for coords in structures_bohr:
            if before_each is not None:
                before_each()
            gradients.append(self.energy_and_gradient(coords)[1])
        return gradients


def _workers(threads, seconds=0.0):
    return ParallelRelaxations(lambda: CountingEngine(seconds), np.ones(3, dtype=int), threads)


@pytest.mark.parametrize("threads", [1, 2])
def test_results_come_back_in_order_and_every_gradient_is_counted(threads):
    with _workers(threads) as workers:
        results = workers.map(lambda relaxer, n: [relaxer.gradient(np.full((3, 3), n)) for _ in range(n)][-1][0, 0],
                              [3, 1, 2])
        assert results == [6.0, 2.0, 4.0]
        assert workers.evaluations == 6
        gradients = workers.gradients_from_reference(np.zeros((3, 3)), [np.full((3, 3), i) for i in range(20)])
        assert [g[0, 0] for g in gradients] == [2.0 * i for i in range(20)]
        assert workers.evaluations == 26 + threads  # 20 structures and one reference per share (of 10 or 20)


def test_two_threads_run_at_once():
    threads_seen = set()

    def piece(relaxer, _):
        threads_seen.add(threading.current_thread().name)
        return relaxer.gradient(np.zeros((3, 3)))

    with _workers(2, seconds=0.3) as workers:
        began = time.perf_counter()
        workers.map(piece, [0, 1])
        assert time.perf_counter() - began < 0.55  # two 0.3 s gradients at once, not one after the other
    assert len(threads_seen) == 2


def test_a_failing_piece_stops_the_others_at_their_next_gradient():
    def piece(relaxer, which):
        if which == "fails":
            time.sleep(0.2)
            raise CalculationError("SCF failed")
        for _ in range(1000):  # 100 s if nothing stopped it
            relaxer.gradient(np.zeros((3, 3)))

    with _workers(2, seconds=0.1) as workers:
        began = time.perf_counter()
        with pytest.raises(CalculationError, match="SCF failed"):
            workers.map(piece, ["long", "fails"])
        assert time.perf_counter() - began < 1.0
        # the stop was for that stage only: the next one runs
        assert workers.map(lambda relaxer, _: relaxer.gradient(np.zeros((3, 3)))[0, 0], [0, 1]) == [0.0, 0.0]


def test_gradients_of_stopped_and_failed_pieces_are_counted_and_the_first_failure_in_order_is_raised():
    def piece(relaxer, which):
        if which == "late":
            relaxer.gradient(np.zeros((3, 3)))
            time.sleep(0.3)
            raise CalculationError("late failure")
        if which == "early":
            relaxer.gradient(np.zeros((3, 3)))
            raise CalculationError("early failure")
        return relaxer.gradient(np.zeros((3, 3)))

    with _workers(2) as workers:
        with pytest.raises(CalculationError, match="late failure"):  # first in item order, not in time
            workers.map(piece, ["late", "early"])
        assert workers.evaluations == 2


def test_displaced_gradients_stop_between_structures_when_a_share_beside_them_fails():
    class FailsAfterThree(CountingEngine):
        def energy_and_gradient(self, coords_bohr):
            if coords_bohr[0, 0] >= 3:
                raise CalculationError("SCF failed at a displaced structure")
            return super().energy_and_gradient(coords_bohr)

    # structures handed out in turn: the third fails, the other thread is stopped at its next structure
    structures = [np.full((3, 3), 2.0 * i if i < 20 else 0.5) for i in range(40)]
    workers = ParallelRelaxations(lambda: FailsAfterThree(0.05), np.ones(3, dtype=int), 2)
    with workers:
        began = time.perf_counter()
        with pytest.raises(CalculationError, match="displaced structure"):
            workers.gradients_from_reference(np.zeros((3, 3)), structures)
        assert time.perf_counter() - began < 0.6  # the second share (20 x 0.05 s) was stopped early
        assert 0 < workers.evaluations < 15


def test_ctrl_c_while_pieces_run_stops_them_and_the_next_stage_still_runs():
    import os
    import signal

    def piece(relaxer, which):
        if which == "interrupts":
            time.sleep(0.2)
            os.kill(os.getpid(), signal.SIGINT)  # a Ctrl-C, here even sent from a worker thread
            return None
        for _ in range(1000):
            relaxer.gradient(np.zeros((3, 3)))

    # Python's own Ctrl-C handler, as in a terminal: a test run started in the background inherits SIGINT ignored
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        with _workers(2, seconds=0.05) as workers:
            began = time.perf_counter()
            with pytest.raises(KeyboardInterrupt):
                workers.map(piece, ["runs", "interrupts"])
            assert time.perf_counter() - began < 1.0
            assert workers.map(lambda relaxer, _: relaxer.gradient(np.zeros((3, 3)))[0, 0], [0, 1]) == [0.0, 0.0]
    finally:
        signal.signal(signal.SIGINT, previous)


def test_a_failed_relaxation_is_returned_in_its_place():
    class Failing(CountingEngine):
        def energy_and_gradient(self, coords_bohr):
            if coords_bohr[0, 0] > 0:
                raise CalculationError("no SCF here")
            return super().energy_and_gradient(coords_bohr)

    from torsionscan.optimize import Convergence
    from torsionscan.relax import RelaxJob

    workers = ParallelRelaxations(Failing, np.ones(3, dtype=int), 2)
    with workers:
        start = np.array([[0.0, 0.0, 0.0], [0.0, 2.0, 0.0], [0.0, 0.0, 2.0]])
        bad = start + [[1.0, 0.0, 0.0], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]]
        good, failed = workers.relax_jobs([RelaxJob(start, Convergence()), RelaxJob(bad, Convergence())])
    assert isinstance(failed, CalculationError) and "no SCF here" in str(failed)
    assert good.converged


@pytest.mark.xtb
def test_ctrl_c_during_a_two_core_scan_exits_130_within_a_gradient_or_so(tmp_path):
    import os
    import signal
    import subprocess
    import sys

    # 1,4-diphenylbutadiene: three bonds, about 15 s on two cores, so the run is surely still going
    process = subprocess.Popen(
        [sys.executable, "-m", "torsionscan.cli", "scan", "c1ccccc1/C=C/C=C/c1ccccc1", "--cores", "2",
         "--out", str(tmp_path / "r")],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True,
        # as from a terminal: a test run started in the background inherits Ctrl-C ignored
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    deadline = time.monotonic() + 60
    while len(os.listdir(f"/proc/{process.pid}/task")) < 3 and time.monotonic() < deadline:
        time.sleep(0.05)  # until the two worker threads exist: the parallel pieces have begun
    time.sleep(1.0)
    assert process.poll() is None, process.communicate()
    interrupted = time.monotonic()
    os.killpg(process.pid, signal.SIGINT)
    _, stderr = process.communicate(timeout=30)
    assert process.returncode == 130, stderr
    assert time.monotonic() - interrupted < 2.0
    assert "Traceback" not in stderr
