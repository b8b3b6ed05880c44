"""Command line: a thin shell over the library. Errors become one-line messages and exit codes
(2 = input problem, 3 = calculation failure, 4 = batch finished with failed compounds,
5 = storage problem); --debug shows the traceback instead."""

import argparse
import logging
import os
import re
import statistics
import sys
import tempfile
from pathlib import Path

from . import __version__
from .errors import InputError, StorageError, TorsionScanError

log = logging.getLogger("torsionscan")
DEMO_LIST = Path(__file__).resolve().parent / "data" / "demo_compounds.csv"  # ships with the package
DEMO_OUT = Path("results/demo")  # under the working directory; results/ is ignored by git
PARTIAL_FAILURE = 4  # exit status of a batch in which some compounds failed


class _Parser(argparse.ArgumentParser):
    """argparse with its errors as one line, like every other error of the command."""

    def error(self, message):
        self.exit(2, f"torsionscan: error: {message}; see '{self.prog} --help'\n")


def _add_molecule_options(parser):
    parser.add_argument("molecule", nargs="?",
                        help="SMILES string, or a MOL/SDF/XYZ file (a text that is both: use --smiles or --file)")
    parser.add_argument("--smiles", metavar="TEXT", help="the molecule as SMILES, never read as a file name")
    parser.add_argument("--file", metavar="PATH", help="the molecule from a MOL/SDF/XYZ file, never read as SMILES")
    parser.add_argument("--record", type=int, default=1, help="record number in a multi-record SDF (1-based)")
    parser.add_argument("--charge", type=int, default=None, help="total charge (default: from the input; 0 for XYZ)")
    parser.add_argument("--unpaired-electrons", type=int, default=0, help="number of unpaired electrons (default 0)")
    parser.add_argument("--allow-large", action="store_true",
                        help="scan a molecule above the 300-atom limit anyway (hours to days per bond)")


def _molecule_source(args):
    """The molecule the arguments name: a SMILES string or a file Path (molecule.molecule_source)."""
    from .molecule import molecule_source

    return molecule_source(args.molecule, smiles=args.smiles, file=args.file)


def _add_scan_options(parser):
    parser.add_argument("--step", type=float, default=15.0, help="grid step in degrees; must divide 180 (default 15)")
    parser.add_argument("--temperature", type=float, nargs="+", default=[298.15],
                        help="temperature(s) in kelvin for populations (default 298.15)")
    parser.add_argument("--scis-window", type=float, default=30.0,
                        help="near-planar s-cis window half-width in degrees (default 30)")
    parser.add_argument("--conformers", type=int, default=5, help="start structures to embed (default 5)")
    parser.add_argument("--seed", type=int, default=61453, help="random seed for embedding")
    parser.add_argument("--method", choices=["GFN2-xTB", "GFN1-xTB"], default="GFN2-xTB")
    parser.add_argument("--engine", choices=["auto", "xtb-python", "tblite"], default="auto",
                        help="GFN-xTB implementation (default: xtb-python if installed, else tblite; tblite for ALPB)")
    parser.add_argument("--no-frequencies", action="store_true",
                        help="skip frequencies and free energies at the stationary points (about 3x faster)")
    parser.add_argument("--temperature-range", type=float, nargs=2, metavar=("TMIN", "TMAX"), default=[200.0, 450.0],
                        help="kelvin range of the populations-vs-temperature plot (default 200 450)")
    parser.add_argument("--solvent", metavar="NAME",
                        help="implicit solvent, e.g. water, toluene, methanol (default: gas phase)")
    parser.add_argument("--solvation-model", choices=["alpb", "gbsa"],
                        help="implicit solvation model (default alpb; xtb-python offers only gbsa)")


def _add_batch_options(parser):
    parser.add_argument("--workers", type=int, default=None,
                        help="parallel worker processes on this machine (default: number of cores)")
    parser.add_argument("--threads-per-worker", type=int, default=1,
                        help="OpenMP/BLAS threads in each worker (default 1)")
    parser.add_argument("--cluster", metavar="ADDRESS",
                        help="run on a Dask distributed scheduler, e.g. tcp://host:8786, instead of local workers")
    parser.add_argument("--retry-failed", action="store_true", help="compute failed compounds again")
    parser.add_argument("--timeout-per-compound", type=float, metavar="SECONDS",
                        help="give up on a compound after this many seconds (checked between gradients)")
    parser.add_argument("--rescore", metavar="LEVEL",
                        help="re-score every scan with DFT single points (cheap, standard, careful or functional/basis)")
    parser.add_argument("--refine", metavar="LEVEL",
                        help="re-optimise every scan at a DFT level inside its worker (see 'scan --refine')")
    parser.add_argument("--refine-points", choices=["all", "stationary"], default="all",
                        help="with --refine: every grid point (default) or only the stationary points")
    parser.add_argument("--allow-outside-files", action="store_true",
                        help="read structure_file entries that lie outside the list's folder")
    parser.add_argument("--allow-large", action="store_true",
                        help="scan molecules above the 300-atom limit too (hours to days per bond)")
    parser.add_argument("--fit-for", choices=["mmff94"],
                        help="fit torsion terms for every scanned bond inside the workers (see 'scan --fit-for')")
    _add_fit_options(parser)


def _add_refine_options(parser, level_option, required=False):
    """The refinement options: a level, which points, the reference tier, parallel processes."""
    points_option = "--refine-points" if level_option == "--refine" else "--points"
    parser.add_argument(level_option, metavar="LEVEL", required=required, dest="refine" if level_option == "--refine"
                        else "level", help="re-optimise at this DFT level (dihedral held): cheap, standard, careful "
                                           "or functional[-d3bj|-d3zero|-d4]/basis (needs the [dft] extra)")
    parser.add_argument(points_option, dest="refine_points" if level_option == "--refine" else "points",
                        choices=["all", "stationary"], default="all",
                        help="re-optimise every grid point (default) or only minima, barrier tops and planar s-cis")
    parser.add_argument("--reference", choices=["coupled-cluster"],
                        help="add focal-point CCSD(T)-based energies at the refined stationary points (small molecules)")
    parser.add_argument("--processes", type=int, default=None,
                        help="parallel optimisations (default: all cores)")


def _add_fit_options(parser):
    parser.add_argument("--periodicities", type=int, default=4, metavar="N",
                        help="fit terms of periodicity 1..N (default 4, at most 6)")
    parser.add_argument("--free-phases", action="store_true",
                        help="fit any phase, not only 0/180 degrees (for molecules with stereocentres)")
    parser.add_argument("--weight-temperature", type=float, metavar="KELVIN",
                        help="weight scan points by exp(-E/RT) at this temperature (default: equal weights)")


def _fit_options(args):
    from .records import FitOptions

    return FitOptions(max_periodicity=args.periodicities, free_phases=args.free_phases,
                      weight_temperature_k=args.weight_temperature)


def format_torsion_fit(label, fit):
    """Terminal lines of one bond's torsion-term fit (a records.TorsionFit), kcal/mol."""
    terms = ", ".join(f"n={t.periodicity} {t.phase_deg:g}° k={t.k_kcal_mol:.3f}" for t in fit.terms)
    return (f"bond {label} torsion terms vs {fit.mm_model} (kcal/mol): {terms}\n"
            f"  RMSE vs quantum profile: {fit.rmse_before_kcal_mol:.3f} before "
            f"({fit.before_model}), {fit.rmse_after_kcal_mol:.3f} after "
            f"(max error {fit.max_error_after_kcal_mol:.3f})")


def _settings(args):
    from .settings import ScanSettings

    return ScanSettings(
        step_deg=args.step, conformers=args.conformers, seed=args.seed, method=args.method,
        engine=args.engine, temperatures_k=tuple(args.temperature), scis_window_deg=args.scis_window,
        solvent=args.solvent.strip().lower() if args.solvent is not None else None,
        solvation_model=args.solvation_model,
        frequencies=not args.no_frequencies, temperature_range_k=tuple(args.temperature_range),
    )


def _medium(settings):
    """"gas phase" or "in <solvent> (<MODEL>)"."""
    if not settings.solvent:
        return "gas phase"
    return f"in {settings.solvent} ({(settings.solvation_model or 'alpb').upper()})"


def _minima_text(analysis):
    """Angles (deg, 180 never as -180) and relative energies (kcal/mol) of a profile's minima on one line."""
    from .output.report import angle_text

    return "   ".join(f"{angle_text(m.angle_deg):>6s}° {analysis.relative_kcal_mol(m.energy_hartree):6.2f}"
                      for m in analysis.minima)


def _flag_lines(bond):
    """The quality flags of a bond (quality.FLAG_MEANINGS): 'flags: none', or one warning line per
    raised flag with what was found and what it means."""
    from .output.report import warning_texts
    from .quality import SYMMETRIC_ROTOR

    texts = [text for flag, text in zip(bond.flags, warning_texts(bond)) if flag != SYMMETRIC_ROTOR]
    if not texts:  # a symmetric rotor's reason is already the population line: named, not repeated
        return ["  flags: " + (SYMMETRIC_ROTOR if bond.symmetric_rotor else "none")]
    return [f"  warning: {text}" for text in texts]


def _barrier_lines(analysis, symmetric):
    """One line per barrier; a symmetric profile repeats every barrier as its mirror image: shown once."""
    from .output.report import angle_text
    from .units import KCAL_KJ

    lines, shown = [], set()
    for b in analysis.barriers:
        key = tuple(round(abs(x), 1) for x in (b.from_minimum_deg, b.over_maximum_deg, b.to_minimum_deg))
        if symmetric and key in shown:
            continue
        shown.add(key)
        flag = "" if b.converged else "  [refinement not converged]"
        lines.append(
            f"  barrier {angle_text(b.from_minimum_deg):>6s}° → {angle_text(b.to_minimum_deg):>6s}° over "
            f"{angle_text(b.over_maximum_deg):>6s}°: {b.height_kcal_mol:5.2f} kcal/mol "
            f"({b.height_kcal_mol * KCAL_KJ:.1f} kJ/mol){flag}"
        )
    return lines


def _population_lines(analysis, symmetric_rotor=False):
    """The one population answer first (its model named once, then one line per temperature), then
    one line of cross-checks; for a symmetric rotor the reason there is no split and its shape."""
    from .output.report import cross_check_text, population_texts, symmetric_rotor_texts

    if symmetric_rotor:
        return [f"  {text}" for text in symmetric_rotor_texts(analysis)]
    heading, texts = population_texts(analysis)
    if not texts:
        return []
    lines = [f"  {heading}"] + [f"    {text}" for text in texts]
    check = cross_check_text(analysis)
    return lines + ([f"  {check}"] if check else [])


def _rotor_lines(analysis, symmetric_rotor=False):
    """The wells' torsional fundamentals and, with two regions, the interconversion between them."""
    from .output.report import interconversion_texts, wells_text

    wells = wells_text(analysis)
    lines = [f"  {wells}"] if wells else []
    if not symmetric_rotor:
        lines += [f"  {text}" for text in interconversion_texts(analysis)]
    return lines


def _fit_lines(bond):
    """The fit, cost and hysteresis line of a bond (its warnings are the flag lines)."""
    fit = bond.profile.fit
    computed = [p for p in bond.points if not p.mirrored]
    unconverged = sum(1 for p in computed if not p.converged)
    median = statistics.median(p.gradient_evaluations for p in computed) if computed else 0
    hysteresis = ", ".join(f"{h.angle_deg:g}° ({h.energy_difference_kcal_mol:.2f})" for h in bond.hysteresis) or "none"
    lines = [
        f"  fit order {fit.series.order}, RMSE {fit.rmse_kcal_mol:.3f} kcal/mol; {len(computed)} points"
        f" ({unconverged} not converged), median {median:g}"
        f" gradients/point, {bond.gradient_evaluations_total} in all"
        + (f" (+{bond.frequency_gradient_evaluations} for frequencies)" if bond.frequency_gradient_evaluations else "")
        + f"; hysteresis: {hysteresis}"
    ]
    return lines


def format_summary(result, out_dir):
    """Readable terminal report of a ScanResult whose files are in out_dir: per bond the one
    population answer first, then minima, barriers, wells, interconversion, frequencies, fit."""
    from .molecule import numbered_smiles
    from .output.report import angle_meaning_text

    lines = [f"{result.name}  {numbered_smiles(result.mol)}  — {result.method} via {result.engine}, "
             f"{_medium(result.settings)}"]
    for bond in result.bonds:
        atoms = "-".join(str(a + 1) for a in bond.dihedral_atoms)
        kind = "conjugated" if bond.conjugated else "chosen"
        lines.append(f"dihedral {atoms} (bond {bond.label}, {kind}; {angle_meaning_text(bond)})")
        lines += _population_lines(bond.profile, bond.symmetric_rotor)
        lines += _flag_lines(bond)
        lines.append(f"  minima (kcal/mol):   {_minima_text(bond.profile)}")
        lines += _barrier_lines(bond.profile, bond.symmetric)
        lines += _rotor_lines(bond.profile, bond.symmetric_rotor)
        lines += _vibration_lines(bond.profile, bond.symmetric_rotor)
        lines += _fit_lines(bond)
    for bond in result.bonds:
        lines += _rescored_lines(result, bond)
        lines += refined_lines(result, bond)
    for label, reason in result.failed_bonds:
        lines.append(f"bond {label} FAILED: {reason}")
    lines.append(f"files: {out_dir}/")
    lines.append(result.caution)
    return "\n".join(lines)


def _rescored_lines(result, bond):
    """Terminal lines of a bond's re-scored profile and the disagreement between the methods."""
    rescored = bond.rescored
    if rescored is None:
        return []
    analysis, verdict = rescored.analysis, rescored.disagreement
    lines = [f"bond {bond.label} re-scored at {rescored.level} (same geometries; extrema interpolated on the fit)"]
    lines += _population_lines(analysis, bond.symmetric_rotor)
    lines.append(f"  minima (kcal/mol):   {_minima_text(analysis)}")
    lines.append(f"  difference to {result.method}: RMS {verdict.rms_kcal_mol:.2f}, max {verdict.max_kcal_mol:.2f} kcal/mol"
                 + (f"  WARNING: {verdict.warning}" if verdict.warning else ""))
    return lines


def refined_lines(result, bond):
    """Terminal lines of a bond's refined profile (re-optimised at a higher level)."""
    from .output.report import readiness_texts

    refined = bond.refined
    if refined is None:
        return []
    analysis = refined.analysis
    what = "every grid point" if refined.points_mode == "all" else "the stationary points"
    lines = [f"bond {bond.label} refined at {refined.level} ({what} re-optimised, dihedral held; "
             f"{refined.gradient_evaluations} gradients, {refined.wall_time_s:.0f} s)"]
    lines += _population_lines(analysis, bond.symmetric_rotor)
    lines.append(f"  minima (kcal/mol):   {_minima_text(analysis)}")
    lines += _barrier_lines(analysis, bond.symmetric)
    lines += _rotor_lines(analysis, bond.symmetric_rotor)
    if not bond.symmetric_rotor:
        lines += [f"  {text}" for text in readiness_texts(analysis)]
    if refined.disagreement is not None:
        verdict = refined.disagreement
        lines.append(f"  difference to {result.method} at the same angles: RMS {verdict.rms_kcal_mol:.2f}, "
                     f"max {verdict.max_kcal_mol:.2f} kcal/mol" + (f"  WARNING: {verdict.warning}" if verdict.warning else ""))
    lines.append(f"  free energies: {refined.thermal_note}")
    if refined.reference:
        shown = "   ".join(f"{p.kind} {p.angle_deg:.1f}° {refined.reference_relative_kcal_mol(p):.2f}"
                           for p in sorted(refined.reference, key=lambda p: p.angle_deg))
        lines.append(f"  coupled-cluster reference ({refined.reference_label}), kcal/mol: {shown}")
    return lines


def _vibration_lines(analysis, symmetric_rotor=False):
    """Terminal lines on the nature of the stationary points and the planar s-cis cost of a diene."""
    from .output.report import readiness_texts

    from .quality import STATIONARY_CHECK, wrong_stationary_points

    lines = []
    checked = [m for m in analysis.minima + analysis.maxima if m.imaginary_count is not None]
    if checked:
        wrong = wrong_stationary_points(analysis)
        soft = [m for m in checked if m.flat_region and m.imaginary_count and m.kind == "minimum"]
        exceptions = "".join(f" but the soft torsion mode of the flat region at {m.angle_deg:.1f}° "
                             f"({m.frequencies_cm1[0]:.0f} cm⁻¹, counted at its magnitude)" for m in soft)
        lines.append("  frequencies: " + (f"{STATIONARY_CHECK} (see the warning above)" if wrong else
                                          f"minima have no imaginary mode{exceptions}; each barrier top has one, "
                                          "along the torsion"))
    if not symmetric_rotor:
        lines += [f"  {text}" for text in readiness_texts(analysis)]
    return lines


_CLUSTER_ADDRESS = re.compile(r"(?:(?:tcp|tls|ws|wss|ucx)://)?(?:\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9](?:[A-Za-z0-9.-]*[A-Za-z0-9])?)"
                              r"(?::(?P<port>[0-9]{1,5}))?/?")


def _check_cluster_address(address):
    """InputError unless address has the form of a Dask scheduler address: [tcp|tls|ws|wss|ucx://]host:port
    (an IPv6 host in brackets) or inproc://..."""
    if address is None:
        return
    text = address.strip()
    match = _CLUSTER_ADDRESS.fullmatch(text)
    if re.fullmatch(r"inproc://\S+", text) or (match and match["port"] and 0 < int(match["port"]) < 65536):
        return
    raise InputError(f"--cluster {address!r} is not a Dask scheduler address (scheme://host:port); give one like "
                     "tcp://scheduler-host:8786")


def _check_output_folder(folder, option="--out"):
    """Before anything is computed: InputError when the folder (or where it would be made) is a file,
    StorageError when nothing can be written there."""
    folder = Path(folder)
    probe = folder
    while not os.path.lexists(probe) and probe != probe.parent:
        probe = probe.parent
    if not probe.is_dir():
        where = "" if probe == folder else f" ({probe} is a file, so the folder cannot be made there)"
        raise InputError(f"{option} {folder} is a file, not a folder{where}; give a folder (it is created if needed)")
    try:
        handle, name = tempfile.mkstemp(dir=probe, prefix=".torsionscan-write-check-")
        os.close(handle)
        os.unlink(name)
    except OSError as error:
        raise StorageError(f"cannot write {option} {folder}: {probe} is not writable ({error.strerror}); "
                           "choose another folder or make it writable") from None


def _check_threads(option, value):
    if value is not None and value < 1:
        raise InputError(f"{option} must be at least 1")


def run_scan(args):
    from .driver import scan
    from .molecule import check_size, load_molecule
    from .output import write_results

    options = _fit_options(args)
    options.check()
    settings = _settings(args)
    settings.check()
    _check_threads("--dft-threads", args.dft_threads)
    if args.bond is not None and not args.bond.strip():
        raise InputError("--bond is empty; give two or four 1-based atom numbers, e.g. 3-4 or 2-3-4-5")
    source = _molecule_source(args)
    molecule = load_molecule(source, name=args.name, charge=args.charge, unpaired_electrons=args.unpaired_electrons,
                             record=args.record)
    warning = check_size(molecule.mol.GetNumAtoms(), args.allow_large, settings.frequencies)
    if warning:
        log.warning("%s", warning)
    out_dir = args.out or Path("results") / molecule.name
    _check_output_folder(out_dir)
    level = refine_level = None
    if args.rescore:
        from .rescore import check_rescoring

        level = check_rescoring(args.rescore, settings)
    if args.refine:
        from .workflows import check_refinement

        refine_level = check_refinement(args.refine, settings, args.refine_points, args.reference)
        _check_processes(args.processes)
        if args.reference:
            from .reference import check_reference

            check_reference(molecule.symbols, molecule.charge, molecule.unpaired_electrons)
    elif args.reference:
        raise InputError("--reference needs --refine LEVEL: the reference energies are computed at the refined structures")
    _check_threads("--cores", args.cores)
    from .threads import usable_cores

    result = scan(
        source, bond=args.bond, name=args.name, charge=args.charge, unpaired_electrons=args.unpaired_electrons,
        record=args.record, settings=settings, cores=args.cores or usable_cores(),
    )
    if level is not None:
        from .rescore import rescore_result

        result = rescore_result(result, level, args.dft_threads or usable_cores())
    if refine_level is not None:
        from .workflows import checkpoint_for, refine_with_dft

        with checkpoint_for(out_dir) as cache:
            result = refine_with_dft(result, refine_level, args.refine_points, args.reference, args.processes,
                                     cache=cache)
    write_results(result, out_dir)
    print(format_summary(result, out_dir))
    if args.fit_for:
        from .workflows import fit_folder

        for label, fit in fit_folder(out_dir, options=options).items():
            print(format_torsion_fit(label, fit))
    return 3 if result.failed_bonds else 0


def run_rescore(args):
    from .workflows import rescore_folder

    _check_threads("--threads", args.threads)
    result = rescore_folder(args.folder, args.level, args.threads)
    for bond in result.bonds:
        print("\n".join(_rescored_lines(result, bond)))
    print(f"files: {args.folder}/ (summary.json, bond_<j-k>_profile.csv and figures updated)")
    return 0


def _check_processes(processes):
    if processes is not None and processes < 1:
        raise InputError("--processes must be at least 1")


def run_refine(args):
    from .workflows import refine_folder

    _check_processes(args.processes)
    result = refine_folder(args.folder, args.level, args.points, args.reference, args.processes)
    for bond in result.bonds:
        print("\n".join(refined_lines(result, bond)))
    print(f"files: {args.folder}/ (summary.json, bond_<j-k>_profile.csv and figures updated)")
    return 0


def run_fit(args):
    from .workflows import fit_folder

    options = _fit_options(args)
    options.check()
    fits = fit_folder(args.folder, args.bond, options, args.mm_energies, args.quantum)
    for label, fit in fits.items():
        print(format_torsion_fit(label, fit))
    print(f"files: {args.folder}/bond_<j-k>_torsion_fit.json, _torsion_terms.csv, _torsion_openmm.xml, _torsion_fit.png")
    return 0


def run_fit_set(args):
    from .output.parameters import summary_lines
    from .workflows import fit_set_run

    options = _fit_options(args)
    options.check()
    parameters, written = fit_set_run(args.run, args.types, args.formats, args.out, options, args.quantum)
    print("\n".join(summary_lines(parameters)))
    single = [fit.label for fit in parameters.types if fit.molecule_count == 1]
    if single:
        log.warning("%d type(s) with one molecule only, fitted without a transfer check (add molecules with these "
                    "types to check them): %s", len(single), ", ".join(single))
    files = [str(path) for kind, path in written.items() if not isinstance(path, list)]
    print(f"files: {', '.join(files)}; {len(written['figures'])} type figures"
          + (f", {len(written['member forces'])} per-bond OpenMM forces" if "member forces" in written else ""))
    return 0


def run_bonds(args):
    from .molecule import find_conjugated_bonds, load_molecule, numbered_smiles

    molecule = load_molecule(_molecule_source(args), charge=args.charge, unpaired_electrons=args.unpaired_electrons,
                             record=args.record)
    bonds = find_conjugated_bonds(molecule)
    print(f"{numbered_smiles(molecule.mol)}: {len(bonds)} conjugated single bond(s); atom numbers are 1-based, "
          "hydrogens last")
    symbols = molecule.symbols
    for bond in bonds:
        atoms = "-".join(f"{symbols[a]}{a + 1}" for a in bond.atoms)
        meaning = f"   0° = {bond.scis_meaning}" if bond.scis_meaning else ""
        print(f"  bond {bond.label:>7s}   dihedral {atoms}{meaning}")
    return 0


def _batch_options(args):
    from .batch import BatchOptions

    return BatchOptions(
        workers=args.workers, threads_per_worker=args.threads_per_worker, cluster=args.cluster,
        retry_failed=args.retry_failed, timeout_per_compound_s=args.timeout_per_compound, rescore=args.rescore,
        refine=args.refine, refine_points=args.refine_points, fit_for=args.fit_for, fit_options=_fit_options(args),
        allow_outside_files=args.allow_outside_files, allow_large=args.allow_large,
    )


def run_batch_command(args):
    """Scan a compound list into a run folder, then write its table and report."""
    from .batch import run_batch
    from .output.progress import BatchProgress
    from .runfolder import write_run_report

    out_dir = args.out or Path("results") / args.list.stem
    outcome = run_batch(args.list, out_dir, _settings(args), _batch_options(args), BatchProgress(),
                        command=" ".join(["torsionscan", *sys.argv[1:]]))
    written = write_run_report(out_dir)
    report = written[0]
    counts = outcome.counts
    print(f"{counts['done']} done, {counts['failed']} failed, {counts['pending']} pending "
          f"({outcome.computed} computed now in {outcome.wall_time_s:.0f} s)")
    for name, reason in outcome.failures:
        print(f"  failed: {name}: {reason}")
    if written.flagged:
        print(f"{len(written.flagged)} bond(s) flagged (see the README's quality flags, and the report's cards):")
        for name, bond, flags in written.flagged:
            print(f"  flagged: {name} bond {bond}: {flags}")
    print(f"table: {out_dir / 'scan_table.csv'}\nreport: {report}")
    print(f"{args.method} estimates: read the caution in the report and confirm decisions at a higher level.")
    return PARTIAL_FAILURE if outcome.failures else 0


def run_batch_checked(args):
    """The batch's checks that need no list (settings, scheduler address, run folder), then the batch."""
    _settings(args).check()
    _check_cluster_address(args.cluster)
    _check_output_folder(args.out or Path("results") / args.list.stem)
    return run_batch_command(args)


def run_report(args):
    from .runfolder import write_run_report

    report, rows = write_run_report(args.run, rebuild_folders=True)
    print(f"rebuilt {rows} table rows, compound folders and {report} from {args.run / 'run.sqlite'}")
    return 0


def build_parser():
    parser = _Parser(
        prog="torsionscan",
        description="Relaxed GFN-xTB torsion scans of conjugated single bonds (0° = s-cis, 180° = s-trans).",
    )
    parser.add_argument("--version", action="version", version=f"torsionscan {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks and debug logging")
    commands = parser.add_subparsers(dest="command", required=True)

    scan_parser = commands.add_parser("scan", help="relaxed torsion scan of one molecule")
    _add_molecule_options(scan_parser)
    scan_parser.add_argument("--bond", help="scan only this bond: two 1-based atom numbers j-k, or four i-j-k-l")
    scan_parser.add_argument("--name", help="name for the molecule and its result folder")
    scan_parser.add_argument("--out", type=Path, help="result folder (default results/<name>)")
    _add_scan_options(scan_parser)
    scan_parser.add_argument("--rescore", metavar="LEVEL",
                             help="re-score the scan geometries with DFT: cheap, standard, careful or functional/basis "
                                  "(needs the [dft] extra)")
    scan_parser.add_argument("--dft-threads", type=int, default=None, help="threads for DFT (default: all cores)")
    scan_parser.add_argument("--cores", type=int, default=None,
                             help="cores for the scan's independent pieces: start structures, the two sweep "
                                  "chains, refinements, displaced gradients (default: all cores; results are "
                                  "identical with any number)")
    _add_refine_options(scan_parser, "--refine")
    scan_parser.add_argument("--fit-for", choices=["mmff94"],
                             help="also fit dihedral terms that complete this MM model (see 'fit')")
    _add_fit_options(scan_parser)
    scan_parser.set_defaults(handler=run_scan)

    fit_parser = commands.add_parser(
        "fit", help="fit dihedral terms for an MM model to a finished scan (MMFF94, or your own MM energies)")
    fit_parser.add_argument("folder", type=Path, help="result folder of a scan")
    fit_parser.add_argument("--bond", help="bond j-k of the folder to fit (default: every bond)")
    fit_parser.add_argument("--mm-energies", type=Path, metavar="CSV",
                            help="MM energies without this bond's torsion terms, one row per frame of "
                                 "bond_<j-k>_scan.xyz (column energy_kcal_mol or energy_kj_mol)")
    _add_fit_options(fit_parser)
    fit_parser.add_argument("--quantum", choices=["gfn", "rescored", "refined"], default="gfn",
                            help="fit to the scan's own energies, its DFT re-scored ones or its refined profile "
                                 "(MM energies then at the refined structures)")
    fit_parser.set_defaults(handler=run_fit)

    fit_set_parser = commands.add_parser(
        "fit-set", help="fit one set of torsion terms per torsion type across a batch run, written for MD engines")
    fit_set_parser.add_argument("run", type=Path, help="run folder of a batch")
    fit_set_parser.add_argument("--types", default="mmff94", metavar="mmff94|CSV",
                                help="torsion types: mmff94 (the MMFF94 atom types of the four dihedral atoms, default) "
                                     "or a CSV table name,smarts[,classes] of SMARTS patterns with atoms :1-:4")
    fit_set_parser.add_argument("--formats", default="amber,gromacs,charmm,openmm", metavar="LIST",
                                help="parameter files to write: any of amber, gromacs, charmm, openmm (default all)")
    fit_set_parser.add_argument("--out", type=Path, help="output folder (default RUN/torsion_parameters)")
    fit_set_parser.add_argument("--quantum", choices=["gfn", "rescored", "refined"], default="gfn",
                                help="fit the scans' own energies, their DFT re-scored ones or the refined profiles")
    _add_fit_options(fit_set_parser)
    fit_set_parser.set_defaults(handler=run_fit_set)

    rescore_parser = commands.add_parser("rescore", help="re-score a finished scan's geometries with DFT single points")
    rescore_parser.add_argument("folder", type=Path, help="result folder of a scan")
    rescore_parser.add_argument("--level", required=True,
                                help="cheap, standard, careful, or functional[-d3bj|-d3zero|-d4]/basis")
    rescore_parser.add_argument("--threads", type=int, default=None, help="threads for DFT (default: all cores)")
    rescore_parser.set_defaults(handler=run_rescore)

    refine_parser = commands.add_parser(
        "refine", help="re-optimise a finished scan's structures at a DFT level (dihedral held) and analyse them")
    refine_parser.add_argument("folder", type=Path, help="result folder of a scan")
    _add_refine_options(refine_parser, "--level", required=True)
    refine_parser.set_defaults(handler=run_refine)

    bonds_parser = commands.add_parser("bonds", help="list the conjugated single bonds a scan would cover")
    _add_molecule_options(bonds_parser)
    bonds_parser.set_defaults(handler=run_bonds)

    batch_parser = commands.add_parser("batch", help="scan a compound list (CSV, .smi or SDF) into a run folder")
    batch_parser.add_argument("list", type=Path, help="compound list: CSV with name,smiles columns, .smi or .sdf")
    batch_parser.add_argument("--out", type=Path, help="run folder (default results/<list name>); reuse it to resume")
    _add_batch_options(batch_parser)
    _add_scan_options(batch_parser)
    batch_parser.set_defaults(handler=run_batch_checked)

    demo_parser = commands.add_parser("demo", help="batch-scan the demo compound list (shipped with the package) "
                                                   "into results/demo under the working directory")
    demo_parser.add_argument("list", nargs="?", type=Path, default=DEMO_LIST,
                             help="another compound list instead of the shipped demo list")
    demo_parser.add_argument("--out", type=Path, default=DEMO_OUT, help="run folder (default results/demo)")
    _add_batch_options(demo_parser)
    _add_scan_options(demo_parser)
    demo_parser.set_defaults(handler=run_batch_checked)

    report_parser = commands.add_parser("report", help="rebuild a run folder's table, plots and HTML report from its database")
    report_parser.add_argument("run", type=Path, help="run folder of a batch")
    report_parser.set_defaults(handler=run_report)
    return parser


def main(argv=None):
    """Entry point; returns the exit status."""
    try:
        args = build_parser().parse_args(argv)
    except SystemExit as request:  # --help and --version (0), or a usage error already printed on one line (2)
        return request.code if isinstance(request.code, int) else 2
    logging.basicConfig(level=logging.DEBUG if args.debug else logging.WARNING,
                        format="torsionscan: %(levelname)s: %(message)s")
    try:
        return args.handler(args)
    except KeyboardInterrupt as interrupt:
        import signal

        try:
            signal.signal(signal.SIGINT, signal.SIG_IGN)  # a further Ctrl-C while leaving must not end in a traceback
        except ValueError:  # not the main thread: signals do not reach it anyway
            pass
        detail = f" ({interrupt})" if str(interrupt) else ""
        print(f"\ntorsionscan: interrupted{detail}; finished compounds are stored: rerun the same command to continue",
              file=sys.stderr)
        return 130
    except TorsionScanError as error:
        if args.debug:
            raise
        print(f"torsionscan: error: {error}", file=sys.stderr)
        return error.exit_code
    except Exception as error:  # an unforeseen failure: still one line unless --debug
        if args.debug:
            raise
        print(f"torsionscan: internal error: {type(error).__name__}: {error} (rerun with --debug)", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
