"""Validation of the accuracy tiers against published values, with their cost.

    .venv/bin/python benchmarks/refinement_validation.py [--level standard] [--skip-biphenyl] [--skip-reference]

1,3-butadiene: GFN2-xTB scan, then DFT refinement of every grid point and, separately, of the
stationary points only, then the coupled-cluster focal-point reference at the refined
stationary points. Printed beside the published values:
  gauche C=C-C=C dihedral 34 deg (rotational spectroscopy: Baraban et al., Angew. Chem. Int. Ed. 2018, 57, 1821),
  E(gauche) - E(s-trans) 2.9 kcal/mol (Martin-Drumel et al., ISMS 2019, TJ01),
  s-trans -> gauche barrier ~6 kcal/mol (CCSD(T)/CBS, Feller and Craig, J. Phys. Chem. A 2009, 113, 1601; from memory).
Biphenyl: DFT single points at the GFN2-xTB minimum and barrier tops, then stationary-point
refinement (the reference tier refuses its size):
  twist 44.4 +- 1.2 deg (electron diffraction, Almenningen et al. 1985),
  barriers 1.90 (0 deg) and 2.10 (90 deg) kcal/mol (CCSD(T)/CBS, Johansson and Olsen, J. Chem. Theory Comput. 2008).
Takes about half an hour on 2 cores; not part of the test suite.
"""

import argparse
import statistics
import time

import torsionscan
from torsionscan.rescore import parse_level, single_point
from torsionscan.thermo import is_s_cis
from torsionscan.units import BOHR_ANGSTROM, HARTREE_KCAL_MOL
from torsionscan.workflows import refine_with_dft


def _profile_numbers(analysis):
    """(gauche angle, E(gauche) - E(s-trans), s-trans -> s-cis barrier) in degrees and kcal/mol."""
    trans = analysis.lowest_minimum("s-trans")
    gauche = analysis.lowest_minimum("s-cis")
    barrier = min((b.height_kcal_mol for b in analysis.barriers
                   if abs(b.from_minimum_deg - trans.angle_deg) < 1e-3 and is_s_cis(b.to_minimum_deg)), default=None)
    return abs(gauche.angle_deg), analysis.relative_kcal_mol(gauche.energy_hartree), barrier


def _reference_numbers(refined):
    """(E(gauche) - E(s-trans), barrier, planar s-cis) from the coupled-cluster reference, kcal/mol."""
    points = {(p.kind, round(abs(p.angle_deg))): refined.reference_relative_kcal_mol(p) for p in refined.reference}
    gauche = min(e for (kind, angle), e in points.items() if kind == "minimum" and angle < 90)
    tops = [e for (kind, angle), e in points.items() if kind == "maximum" and 60 < angle < 150]
    planar = points.get(("planar s-cis", 0))
    return gauche, min(tops, default=None), planar


def butadiene(level, with_reference):
    started = time.perf_counter()
    scan = torsionscan.scan("C=CC=C", name="butadiene")
    scan_s = time.perf_counter() - started
    gauche, delta, barrier = _profile_numbers(scan.bonds[0].profile)
    print(f"GFN2-xTB scan ({scan_s:.0f} s): gauche {gauche:.1f} deg, E(g)-E(t) {delta:.2f}, barrier {barrier:.2f} kcal/mol")
    for mode in ("stationary", "all"):
        started = time.perf_counter()
        refined_result = refine_with_dft(scan, level, mode, "coupled-cluster" if with_reference and mode == "all" else None,
                                         processes=2)
        wall = time.perf_counter() - started
        refined = refined_result.bonds[0].refined
        gauche, delta, barrier = _profile_numbers(refined.analysis)
        per_point = [p.gradient_evaluations for p in refined.points] or [None]
        median = statistics.median(per_point) if per_point[0] is not None else float("nan")
        print(f"refined at {level.label}, {mode} points: {wall:.0f} s ({wall / scan_s:.0f} x the scan), "
              f"{refined.gradient_evaluations} gradients, median {median:g} per grid point; "
              f"gauche {gauche:.1f} deg (34), E(g)-E(t) {delta:.2f} (2.9), barrier "
              + (f"{barrier:.2f} (~6, from memory)" if barrier is not None else "n/a"))
        if refined.reference:
            ref_gauche, ref_barrier, ref_planar = _reference_numbers(refined)
            times = [p.energy.wall_time_s for p in refined.reference]
            print(f"  coupled-cluster reference ({refined.reference_label}): E(g)-E(t) {ref_gauche:.2f} (2.9), "
                  f"barrier {ref_barrier:.2f} (~6), planar s-cis {ref_planar:.2f}; "
                  f"{statistics.median(times):.0f} s per point (median of {len(times)})")


def _biphenyl_points(analysis):
    """(twist minimum, planar top, perpendicular top) records of a biphenyl profile."""
    planar = max((m for m in analysis.maxima if abs(m.angle_deg) < 10 or abs(m.angle_deg) > 170),
                 key=lambda m: m.energy_hartree)
    perpendicular = max((m for m in analysis.maxima if 80 < abs(m.angle_deg) < 100), key=lambda m: m.energy_hartree)
    return analysis.lowest_minimum(), planar, perpendicular


def _biphenyl_line(what, twist_deg, energies):
    base, planar, perpendicular = energies
    return (f"biphenyl {what}: twist {min(abs(twist_deg), 180 - abs(twist_deg)):.1f} deg (44.4 +- 1.2), barriers "
            f"{(planar - base) * HARTREE_KCAL_MOL:.2f} at 0 deg (1.90), "
            f"{(perpendicular - base) * HARTREE_KCAL_MOL:.2f} at 90 deg (2.10) kcal/mol")


def biphenyl(level):
    started = time.perf_counter()
    scan = torsionscan.scan("c1ccccc1-c1ccccc1", name="biphenyl", settings=torsionscan.ScanSettings(conformers=2))
    points = _biphenyl_points(scan.bonds[0].profile)
    print(_biphenyl_line("GFN2-xTB", points[0].angle_deg, [p.energy_hartree for p in points]))
    began = time.perf_counter()
    rescored = [single_point(list(scan.symbols), p.coords_bohr * BOHR_ANGSTROM, level, threads=2) for p in points]
    print(_biphenyl_line(f"{level.label} single points at the GFN2-xTB structures "
                         f"({time.perf_counter() - began:.0f} s)", points[0].angle_deg, rescored))
    began = time.perf_counter()
    refined = refine_with_dft(scan, level, "stationary", processes=2).bonds[0].refined
    points = _biphenyl_points(refined.analysis)
    print(_biphenyl_line(f"refined at {level.label}, stationary points ({time.perf_counter() - began:.0f} s; "
                         f"{time.perf_counter() - started:.0f} s with the scan)", points[0].angle_deg,
                         [p.energy_hartree for p in points]))


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--level", default="standard")
    parser.add_argument("--skip-biphenyl", action="store_true")
    parser.add_argument("--skip-reference", action="store_true")
    args = parser.parse_args()
    level = parse_level(args.level)
    butadiene(level, not args.skip_reference)
    if not args.skip_biphenyl:
        biphenyl(level)


if __name__ == "__main__":
    main()
