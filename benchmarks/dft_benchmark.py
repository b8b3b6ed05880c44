"""Cost of DFT as an engine: constrained relaxations of 1,3-butadiene at a DFT level.

Run from the repository root:
  python benchmarks/dft_benchmark.py [--level standard] [--threads 2]

Prints the seconds of one energy+gradient from a cold start, then, for relaxations with the
C=C-C=C dihedral held at 0, 30, 105 and 180 degrees, started from the GFN2-xTB scan's relaxed
geometries with Lindh's model Hessian (what Relaxer.relax does without a Hessian) under the
scan's point convergence: gradient evaluations, SCF cycles and seconds per gradient, with and
without reusing the previous SCF density as the next guess. Wall and CPU seconds are both shown:
on a shared machine the wall time is noisy, the SCF cycle count is not.
"""

import argparse
import statistics
import time

import numpy as np

import torsionscan
from torsionscan import geometry
from torsionscan.coordinate import DihedralConstraint
from torsionscan.engines.dft import DftEngine, parse_level
from torsionscan.relax import Relaxer

ANGLES_DEG = (0, 30, 105, 180)


class TimedEngine(DftEngine):
    """DftEngine recording wall seconds, CPU seconds and SCF cycles of every energy+gradient."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.records = []

    def energy_and_gradient(self, coords_bohr):
        cycles, wall, cpu = self.scf_cycles, time.perf_counter(), time.process_time()
        answer = super().energy_and_gradient(coords_bohr)
        self.records.append((self.scf_cycles - cycles, time.perf_counter() - wall, time.process_time() - cpu))
        return answer


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--level", default="standard", help="preset or functional[-d3bj]/basis")
    parser.add_argument("--threads", type=int, default=2)
    options = parser.parse_args()
    level = parse_level(options.level)

    scan = torsionscan.scan("C=CC=C", settings=torsionscan.ScanSettings(step_deg=15, frequencies=False))
    bond = scan.bonds[0]
    starts = {round(p.angle_deg): p.coords_bohr for p in bond.points if not p.mirrored}
    numbers = np.array([atom.GetAtomicNum() for atom in scan.mol.GetAtoms()])
    convergence = scan.settings.point_convergence
    print(f"1,3-butadiene at {level.label}, {options.threads} threads; starts: GFN2-xTB scan points, "
          f"Lindh model Hessian; convergence max {convergence.max_gradient:g} / rms {convergence.rms_gradient:g} "
          "Hartree/Bohr")

    cold = TimedEngine(scan.symbols, level, threads=options.threads, reuse_guess=False)
    for _ in range(3):  # the first call also loads libraries and builds tables: not counted
        cold.energy_and_gradient(starts[180])
    print(f"one energy+gradient from a cold start: {statistics.mean(r[1] for r in cold.records[1:]):.1f} s wall, "
          f"{statistics.mean(r[2] for r in cold.records[1:]):.1f} s CPU, {cold.records[-1][0]} SCF cycles")

    print(f"{'reuse':>5} {'angle':>5} {'grads':>5} {'conv':>4} {'cycles/grad':>11} {'s/grad':>7} {'cpu/grad':>8} "
          f"{'energy (Eh)':>16} {'dihedral err':>12}")
    totals = {False: [], True: []}
    for number, angle in enumerate(ANGLES_DEG):
        # the two variants alternate in order, so that a change in the machine's load hits both
        for reuse in ((False, True) if number % 2 == 0 else (True, False)):
            engine = TimedEngine(scan.symbols, level, threads=options.threads, reuse_guess=reuse)
            constraint = DihedralConstraint(bond.dihedral_atoms, np.radians(angle))
            result = Relaxer(engine, numbers).relax(starts[angle], convergence, constraints=[constraint])
            records = engine.records
            totals[reuse] += records
            error = abs(np.degrees(geometry.dihedral(result.x.reshape(-1, 3), *bond.dihedral_atoms)) - angle)
            error = min(error, 360.0 - error)
            print(f"{'yes' if reuse else 'no':>5} {angle:>5} {result.evaluations:>5} {str(result.converged)[0]:>4} "
                  f"{statistics.mean(r[0] for r in records):>11.1f} {statistics.mean(r[1] for r in records):>7.1f} "
                  f"{statistics.mean(r[2] for r in records):>8.1f} {result.energy:>16.8f} {error:>12.1e}",
                  flush=True)
    for reuse, records in totals.items():
        print(f"{'with' if reuse else 'without'} reuse: {len(records)} gradients, "
              f"{statistics.mean(r[0] for r in records):.2f} SCF cycles, "
              f"{statistics.mean(r[1] for r in records):.1f} s wall, "
              f"{statistics.mean(r[2] for r in records):.1f} s CPU per gradient")
    saved_cpu = 1.0 - sum(r[2] for r in totals[True]) / sum(r[2] for r in totals[False])
    print(f"reuse saves {saved_cpu:.0%} of the CPU time of the relaxations")


if __name__ == "__main__":
    main()
