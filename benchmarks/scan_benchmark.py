"""Speed of the relaxed scan: gradient evaluations per point, wall time, cost in gradients.

Run from the repository root:  python benchmarks/scan_benchmark.py [compound-list.csv]
Prints one row per scanned dihedral and totals. "x gradient" is the whole run (start
structures, sweeps, refinement) divided by the time of one GFN2-xTB gradient of that molecule,
so it measures the optimiser and driver, independent of the machine's speed.
"""

import csv
import statistics
import sys
import time
from pathlib import Path

import torsionscan
from torsionscan.engines import make_engine
from torsionscan.units import ANGSTROM_BOHR
from torsionscan.molecule import load_molecule, starting_structures

REFERENCE_SET = [("butadiene", "C=CC=C"), ("biphenyl", "c1ccccc1-c1ccccc1")]


def time_per_gradient(smiles, repeats=30):
    """Seconds per warm-started GFN2-xTB energy+gradient of the molecule (median of repeats)."""
    molecule = load_molecule(smiles)
    coords = starting_structures(molecule, count=1)[0] * ANGSTROM_BOHR
    engine = make_engine(molecule.numbers)
    engine.energy_and_gradient(coords)
    times = []
    for _ in range(repeats):
        began = time.perf_counter()
        engine.energy_and_gradient(coords)
        times.append(time.perf_counter() - began)
    return statistics.median(times)


def main(argv):
    list_path = Path(argv[1]) if len(argv) > 1 else Path("inputs/demo_dienes.csv")
    with list_path.open(newline="") as handle:
        compounds = [(row["name"], row["smiles"]) for row in csv.DictReader(handle)]
    compounds = REFERENCE_SET + compounds
    header = (f"{'compound':22s} {'bond':>6s} {'atoms':>5s} {'points':>6s} {'med/pt':>6s} {'max/pt':>6s} "
              f"{'total':>6s} {'wall s':>7s} {'ms/grad':>7s} {'x gradient':>10s}")
    print(header)
    print("-" * len(header))
    all_medians, run_walls = [], []
    for name, smiles in compounds:
        gradient_s = time_per_gradient(smiles)
        began = time.perf_counter()
        result = torsionscan.scan(smiles, name=name)
        wall = time.perf_counter() - began
        run_walls.append(wall)
        total = result.start_gradient_evaluations + sum(b.gradient_evaluations_total for b in result.bonds)
        for bond in result.bonds:
            per_point = [p.gradient_evaluations for p in bond.points if not p.mirrored]
            all_medians.extend(per_point)
            print(f"{name:22s} {bond.dihedral_atoms[1] + 1:>3d}-{bond.dihedral_atoms[2] + 1:<2d} "
                  f"{len(result.symbols):5d} {len(per_point):6d} {statistics.median(per_point):6.1f} "
                  f"{max(per_point):6d} {bond.gradient_evaluations_total:6d} {bond.wall_time_s:7.2f} "
                  f"{1000 * gradient_s:7.2f} {bond.wall_time_s / gradient_s:10.0f}")
        print(f"{'  whole run':22s} {'':>6s} {'':>5s} {'':>6s} {'':>6s} {'':>6s} {total:6d} {wall:7.2f} "
              f"{1000 * gradient_s:7.2f} {wall / gradient_s:10.0f}   (incl. {result.start_gradient_evaluations} "
              f"for start structures)")
    print("-" * len(header))
    print(f"gradient evaluations per scan point over all compounds: median {statistics.median(all_medians):.1f}, "
          f"max {max(all_medians)}")
    print(f"compounds per hour on one core (this set): {3600 * len(run_walls) / sum(run_walls):.0f}")


if __name__ == "__main__":
    main(sys.argv)
