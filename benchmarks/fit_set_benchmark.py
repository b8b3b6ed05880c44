"""Torsion types across a real set of GFN2-xTB scans, and the cost of fit-set on a 100-compound run.

    .venv/bin/python benchmarks/fit_set_benchmark.py [--run results/fit_set_benchmark] [--workers 1]

1. Scans (once; a second call resumes and reuses them) the dienes, enones and styrenes of the demo
   list plus ten more dienes with `torsionscan batch --no-frequencies` (about 3 minutes on one
   worker), then fits the MMFF94 torsion types and prints, per type, the RMSE against the
   GFN2-xTB profiles of MMFF94 as it is, of the joint fit (training) and leave-one-molecule-out,
   beside the mean of the per-bond fits.
2. Copies those results five times into a 100-compound run database and times the whole fit-set
   command on it (reading the database, MMFF94 energies, fits, leave-one-out, every file).
"""

import argparse
import csv
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from torsionscan.compounds import CompoundEntry  # noqa: E402
from torsionscan.forcefield import fit_torsion  # noqa: E402
from torsionscan.store import RunStore  # noqa: E402
from torsionscan.workflows import fit_set_run, run_results  # noqa: E402

MORE_DIENES = {
    "butadiene": "C=CC=C", "isoprene": "C=CC(C)=C", "E-piperylene": "C=C/C=C/C", "Z-piperylene": "C=C\\C=C/C",
    "dimethylbutadiene": "C=C(C)C(C)=C", "EE-hexadiene": "C/C=C/C=C/C", "E-1-3-hexadiene": "C=C/C=C/CC",
    "E-hexatriene": "C=C/C=C/C=C", "chloroprene": "C=CC(Cl)=C", "ethylbutadiene": "C=CC(CC)=C",
}


def compound_list(folder):
    """The demo list's compounds (all of them are dienes, enones or styrenes) plus MORE_DIENES."""
    with (ROOT / "inputs" / "demo_compounds.csv").open() as handle:
        demo = {row["name"]: row["smiles"] for row in csv.DictReader(handle)}
    path = folder / "fit_set_compounds.csv"
    with path.open("w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["name", "smiles"])
        writer.writerows({**demo, **MORE_DIENES}.items())
    return path


def scan_set(run, workers):
    run.mkdir(parents=True, exist_ok=True)
    listing = compound_list(run.parent)
    started = time.perf_counter()
    subprocess.run([str(ROOT / ".venv" / "bin" / "torsionscan"), "batch", str(listing), "--out", str(run),
                    "--workers", str(workers), "--no-frequencies"], check=True, cwd=ROOT)
    return time.perf_counter() - started


def real_set(run):
    started = time.perf_counter()
    parameters, _ = fit_set_run(run, out_dir=run / "torsion_parameters")
    elapsed = time.perf_counter() - started
    results = dict(run_results(run))
    print(f"\nreal set: {len(results)} compounds, fit-set {elapsed:.1f} s; RMSE vs GFN2-xTB (kcal/mol)")
    print(f"{'type':<12s} {'classes':<12s} {'mol':>4s} {'bonds':>5s} {'MMFF94':>7s} {'per-bond':>8s} {'joint':>6s} "
          f"{'LOO':>6s}  verdict")
    for fit in parameters.types:
        per_bond = [fit_torsion(results[m.compound], results[m.compound].bond(m.bond)).rmse_after_kcal_mol
                    for m in fit.members]
        loo = "-" if fit.rmse_leave_out_kcal_mol is None else f"{fit.rmse_leave_out_kcal_mol:.3f}"
        print(f"{fit.label:<12s} {' '.join(fit.classes):<12s} {fit.molecule_count:4d} {len(fit.members):5d} "
              f"{fit.rmse_mm_kcal_mol:7.3f} {float(np.sqrt(np.mean(np.square(per_bond)))):8.3f} "
              f"{fit.rmse_fit_kcal_mol:6.3f} {loo:>6s}  {fit.verdict}")
        worst = max(fit.members, key=lambda m: m.rmse_leave_out_kcal_mol or 0.0)
        if worst.rmse_leave_out_kcal_mol is not None:
            print(f"{'':12s} worst left out: {worst.compound} bond {worst.bond} {worst.rmse_leave_out_kcal_mol:.3f} "
                  f"(MMFF94 {worst.rmse_mm_kcal_mol:.3f})")
    for compound, bond, reason in parameters.left_out:
        print(f"left out: {compound} {bond}: {reason}")
    return results


def hundred(results):
    names = list(results)
    copies = -(-100 // len(names))
    with tempfile.TemporaryDirectory() as folder:
        run = Path(folder) / "run"
        with RunStore(run) as store:
            store.claim_settings(results[names[0]].settings.as_dict(), "copies")
            entries = [CompoundEntry(name=f"{n}-{c}", where=f"copy {c}", smiles=results[n].smiles)
                       for c in range(copies) for n in names][:100]
            store.add_compounds(entries)
            session = store.start_session("benchmark")
            for entry in entries:
                store.record_done(entry.name, results[entry.name.rsplit("-", 1)[0]], session, 1.0)
        started = time.perf_counter()
        subprocess.run([str(ROOT / ".venv" / "bin" / "torsionscan"), "fit-set", str(run), "--out",
                        str(Path(folder) / "params")], check=True, cwd=ROOT, stdout=subprocess.DEVNULL)
        command = time.perf_counter() - started
        started = time.perf_counter()
        parameters, _ = fit_set_run(run, out_dir=Path(folder) / "params2")
        library = time.perf_counter() - started
    bonds = sum(len(t.members) for t in parameters.types)
    print(f"\n100-compound run ({bonds} bonds, {len(parameters.types)} types): 'torsionscan fit-set' {command:.1f} s "
          f"(process start and imports included), fit_set_run {library:.1f} s")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--run", type=Path, default=ROOT / "results" / "fit_set_benchmark")
    parser.add_argument("--workers", type=int, default=1)
    args = parser.parse_args()
    print(f"batch scans: {scan_set(args.run, args.workers):.0f} s")
    hundred(real_set(args.run))


if __name__ == "__main__":
    main()
