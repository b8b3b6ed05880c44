"""Speed of the relaxed scan and of batch runs.

Run from the repository root:
  python benchmarks/scan_benchmark.py [compound-list.csv]          one molecule at a time
  python benchmarks/scan_benchmark.py --batch [compound-list.csv]  batch throughput
  python benchmarks/scan_benchmark.py --rescore                    DFT re-scoring cost
  python benchmarks/scan_benchmark.py --stages [compound-list.csv] gradients per stage, 1 and 2 cores

The first prints one row per scanned dihedral and totals, and the time of the MMFF94 residual
and torsion-term fit relative to the scan. "x gradient" is the whole run (start
structures, sweeps, refinement) divided by the time of one GFN2-xTB gradient of that molecule,
so it measures the optimiser and driver, independent of the machine's speed.

The second runs the list (repeated three times under new names, for a steadier figure) as a
batch with 1 and 2 local worker processes and on a 2-worker Dask LocalCluster, and prints
compounds per hour, the speed-up, peak memory per worker and the Dask overhead.
"""

import argparse
import csv
import statistics
import tempfile
import time
from pathlib import Path

import torsionscan
from torsionscan.batch import BatchOptions, run_batch
from torsionscan.forcefield import fit_torsion
from torsionscan.store import RunStore
from torsionscan.engines import make_engine
from torsionscan.units import ANGSTROM_BOHR, BOHR_ANGSTROM
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


def torsion_fit_seconds(result):
    """Wall time of the MMFF94 residual and term fit for every bond of a scan result."""
    began = time.perf_counter()
    for bond in result.bonds:
        fit_torsion(result, bond)
    return time.perf_counter() - began


def read_list(list_path):
    with list_path.open(newline="") as handle:
        return [(row["name"], row["smiles"]) for row in csv.DictReader(handle)]


def batch_benchmark(list_path, repeats=3):
    """Batch throughput with 1 and 2 local workers and on a Dask LocalCluster."""
    from distributed import LocalCluster

    compounds = read_list(list_path)
    settings = torsionscan.ScanSettings()
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        listing = folder / "list.csv"
        listing.write_text("name,smiles\n" + "".join(
            f"{name}-{copy},{smiles}\n" for copy in range(repeats) for name, smiles in compounds))
        count = repeats * len(compounds)
        walls = {}
        runs = (("1 local worker", BatchOptions(workers=1), settings),
                ("2 local workers", BatchOptions(workers=2), settings),
                ("2, no frequencies", BatchOptions(workers=2), torsionscan.ScanSettings(frequencies=False)))
        for label, options, run_settings in runs:
            summary = run_batch(listing, folder / label.replace(" ", "_").replace(",", ""), run_settings, options)
            walls[label] = summary.wall_time_s
            with RunStore(summary.out_dir) as store:
                memory = max(store.compound(name)["peak_memory_mb"] for name in store.names("done"))
                compute = sum(store.compound(name)["wall_time_s"] for name in store.names("done"))
            print(f"{label:17s}: {count} compounds in {summary.wall_time_s:6.1f} s = "
                  f"{3600 * count / summary.wall_time_s:6.0f} compounds/hour; "
                  f"sum of per-compound times {compute:.1f} s; peak memory per worker {memory:.0f} MB")
        began = time.perf_counter()
        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
            startup = time.perf_counter() - began
            summary = run_batch(listing, folder / "dask", settings, BatchOptions(cluster=cluster.scheduler_address))
        walls["dask"] = summary.wall_time_s
        print(f"{'Dask, 2 workers':16s}: {count} compounds in {summary.wall_time_s:6.1f} s = "
              f"{3600 * count / summary.wall_time_s:6.0f} compounds/hour (cluster start-up {startup:.1f} s not included)")
    print(f"speed-up 2 vs 1 local workers: {walls['1 local worker'] / walls['2 local workers']:.2f}x")
    print(f"Dask overhead vs 2 local workers: {100 * (walls['dask'] / walls['2 local workers'] - 1):+.0f}%")


def stage_benchmark(list_path):
    """Per compound: gradients of the start structures, of the two sweeps, of the refinement of the
    stationary points and of the frequency stage (with its ratio to the three before it), and the
    wall time of a whole default scan with 1 and 2 cores (the scan's independent pieces in two
    threads; the results are identical, the counts are the one-core run's)."""
    print(f"{'compound':24s} {'atoms':>5s} {'start':>5s} {'sweeps':>6s} {'refine':>6s} {'freq':>5s} {'freq/scan':>9s} "
          f"{'wall 1 core':>11s} {'wall 2 cores':>12s}")
    totals = {"scan": 0, "freq": 0, 1: 0.0, 2: 0.0}
    ratios = []
    for name, smiles in read_list(list_path):
        walls, results = {}, {}
        for cores in (1, 2):
            began = time.perf_counter()
            results[cores] = torsionscan.scan(smiles, name=name, cores=cores)
            walls[cores] = time.perf_counter() - began
            totals[cores] += walls[cores]
        result = results[1]  # two cores add one reference gradient per share of displacements
        scanned = result.start_gradient_evaluations + sum(b.gradient_evaluations_total for b in result.bonds)
        frequencies = sum(b.frequency_gradient_evaluations for b in result.bonds)
        totals["scan"] += scanned
        totals["freq"] += frequencies
        ratios.append(frequencies / scanned)
        sweeps = sum(b.sweep_gradient_evaluations for b in result.bonds)
        refinement = scanned - result.start_gradient_evaluations - sweeps
        print(f"{name:24s} {len(result.symbols):5d} {result.start_gradient_evaluations:5d} {sweeps:6d} "
              f"{refinement:6d} {frequencies:5d} {frequencies / scanned:9.2f} {walls[1]:10.1f}s {walls[2]:11.1f}s")
    print(f"all: frequency gradients / (start + scan) {totals['freq'] / totals['scan']:.2f} (max per compound "
          f"{max(ratios):.2f}); wall 1 core {totals[1]:.0f} s, 2 cores {totals[2]:.0f} s "
          f"({totals[2] / totals[1]:.2f}x)")


def rescore_benchmark(threads=2):
    """Seconds per DFT single point for each preset on butadiene and a 20-atom diene, and the whole
    re-scoring as a multiple of the GFN2-xTB scan (single points x computed frames / scan time)."""
    from torsionscan.threads import usable_cores
    from torsionscan.rescore import PRESETS, single_point

    threads = min(threads, usable_cores())
    print(f"{'molecule':18s} {'atoms':>5s} {'frames':>6s} {'scan s':>7s} {'preset':9s} {'level':28s} "
          f"{'s/point':>8s} {'x scan':>7s}")
    for name, smiles in (("butadiene", "C=CC=C"), ("phenyl-diene", "C=C/C=C/c1ccccc1")):
        began = time.perf_counter()
        result = torsionscan.scan(smiles, name=name, settings=torsionscan.ScanSettings(frequencies=False))
        scan_s = time.perf_counter() - began
        bond = result.bonds[0]
        frames = [p.coords_bohr * BOHR_ANGSTROM for p in bond.points if not p.mirrored]
        single_point(list(result.symbols), frames[0], PRESETS["cheap"], threads=threads)  # loads PySCF's pieces
        for preset, level in PRESETS.items():
            began = time.perf_counter()
            single_point(list(result.symbols), frames[0], level, threads=threads)
            per_point = time.perf_counter() - began
            print(f"{name:18s} {len(result.symbols):5d} {len(frames):6d} {scan_s:7.2f} {preset:9s} {level.label:28s} "
                  f"{per_point:8.1f} {per_point * len(frames) / scan_s:7.0f}")
    print(f"(one single point per preset, {threads} threads; 'x scan' = all frames of the bond / GFN2-xTB scan time)")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n", 1)[0],
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("compounds", nargs="?", type=Path, default=Path("inputs/demo_compounds.csv"),
                        help="compound list (CSV with name,smiles; default: the demo list)")
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--batch", action="store_true",
                      help="batch throughput: the list three times over, 1 and 2 workers, Dask, with and without frequencies")
    mode.add_argument("--stages", action="store_true", help="gradients per stage and wall time with 1 and 2 cores")
    mode.add_argument("--rescore", action="store_true", help="DFT re-scoring cost against the GFN2-xTB scan")
    options = parser.parse_args(argv)
    if options.rescore:
        rescore_benchmark()
        return
    list_path = options.compounds
    if options.stages:
        stage_benchmark(list_path)
        return
    if options.batch:
        batch_benchmark(list_path)
        return
    compounds = REFERENCE_SET + read_list(list_path)
    header = (f"{'compound':22s} {'bond':>6s} {'atoms':>5s} {'points':>6s} {'med/pt':>6s} {'max/pt':>6s} "
              f"{'total':>6s} {'wall s':>7s} {'ms/grad':>7s} {'x gradient':>10s}")
    print(header)
    print("-" * len(header))
    all_medians, run_walls, fit_ratios = [], [], []
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
        fit_s = torsion_fit_seconds(result)
        fit_ratios.append(fit_s / wall)
        print(f"{'  torsion fit':22s} MMFF94 residual + fit of every bond: {1000 * fit_s:.1f} ms = "
              f"{100 * fit_s / wall:.2f}% of the scan")
    print("-" * len(header))
    print(f"gradient evaluations per scan point over all compounds: median {statistics.median(all_medians):.1f}, "
          f"max {max(all_medians)}")
    print(f"compounds per hour on one core (this set): {3600 * len(run_walls) / sum(run_walls):.0f}")
    print(f"torsion-term fit against MMFF94 / scan time: median {100 * statistics.median(fit_ratios):.2f}%, "
          f"max {100 * max(fit_ratios):.2f}%")


if __name__ == "__main__":
    main()
