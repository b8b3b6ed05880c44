"""Work on a finished result folder: read its summary.json, compute more (DFT re-scoring, DFT
refinement with the coupled-cluster reference, torsion-term fits), attach the records to the
result and rewrite the folder.

The folder's summary.json holds the whole result (coordinates included), so nothing else of
the folder is read; every file is written again by output.write_results.
"""

import functools
from dataclasses import replace
from pathlib import Path

from .output import summary, write_results
from .threads import usable_cores
from .errors import InputError
from .forcefield import fit_torsion
from .mm import read_mm_energies
from .records import FitOptions
from .refine import POINT_MODES, add_reference, refine_result
from .reference import check_reference
from .relaxcache import FILE_NAME as CHECKPOINT_FILE
from .relaxcache import RelaxationCache
from .rescore import check_level, parse_level, rescore_result

REFERENCE_TIERS = ("coupled-cluster",)


def read_result(folder):
    """The ScanResult of a scan's result folder (its summary.json); one-line InputError otherwise."""
    folder = Path(folder)
    path = folder / "summary.json"
    if not path.is_file():
        raise InputError(f"{folder} has no summary.json; give the result folder of a scan")
    try:
        return summary.read_summary_file(path)
    except OSError as error:  # e.g. no read permission
        raise InputError(f"{path} cannot be read ({error.strerror}); check its permissions") from None


def rescore_folder(folder, level_text, threads=None):
    """Re-score every bond of a result folder at a DFT level (threads: default all usable cores);
    rewrites the folder and returns the updated ScanResult."""
    level = parse_level(level_text)
    result = rescore_result(read_result(folder), level, threads or usable_cores())
    write_results(result, folder)
    return result


def fit_folder(folder, bond=None, options=None, mm_energies_path=None, quantum="gfn"):
    """Fit torsion terms for the bond(s) of a result folder, attach each as the bond's torsion_fit
    and rewrite the folder (the fit files included); returns {bond label: TorsionFit}.

    Without mm_energies_path every scanned bond (or only `bond`, "j-k") is fitted against MMFF94;
    a table of MM energies (mm.read_mm_energies) belongs to one bond, named by `bond` when the
    folder holds several.
    """
    result = read_result(folder)
    if bond:
        labels = [result.bond(bond).label]
    else:
        labels = [b.label for b in result.bonds]
        if not labels:
            raise InputError(f"{folder} holds no scanned bond; nothing to fit")
        if mm_energies_path and len(labels) > 1:
            raise InputError(f"{folder} holds bonds {', '.join(labels)}; "
                             "say which one the MM energies belong to with --bond")
    source = None if mm_energies_path is None else f"user-supplied ({Path(mm_energies_path).name})"
    fits = {}
    for label in labels:
        scanned = result.bond(label)
        energies = None
        if mm_energies_path is not None:
            energies = read_mm_energies(mm_energies_path, len(scanned.relaxed_points))
        fits[label] = fit_torsion(result, scanned, options or FitOptions(), energies, source, quantum)
    bonds = tuple(replace(b, torsion_fit=fits[b.label]) if b.label in fits else b for b in result.bonds)
    result = replace(result, bonds=bonds)
    write_results(result, folder)
    return fits


FIT_SET_FOLDER = "torsion_parameters"  # default output folder of fit_set_run, inside the run folder


def check_fit_set(types, formats_text):
    """(typing, its label, formats) of a fit-set request, checked before any work: types is "mmff94"
    or a CSV table of SMARTS patterns (torsiontypes.read_type_patterns)."""
    from .output.parameters import check_classes, parse_formats
    from .torsiontypes import MMFF94_TYPING, read_type_patterns

    formats = parse_formats(formats_text)
    if str(types).strip().lower() == MMFF94_TYPING:
        return MMFF94_TYPING, "MMFF94 atom types", formats
    path = Path(types)
    if not path.is_file():
        raise InputError(f"--types {types}: neither mmff94 nor a file; give mmff94 or a CSV table with columns "
                         "name,smarts")
    patterns = read_type_patterns(path)
    check_classes(formats, [c for p in patterns for c in p.classes])
    return patterns, f"SMARTS patterns of {path.name}", formats


def run_results(run_folder):
    """(name, ScanResult) of every done compound of a batch run folder, in list order."""
    from .store import RunStore

    with RunStore(run_folder, create=False) as store:
        names = store.names("done")
        if not names:
            raise InputError(f"{run_folder} holds no finished compound; run 'torsionscan batch LIST --out {run_folder}' "
                             "first")
        return [(name, store.result(name)) for name in names]


def fit_set_run(run_folder, types="mmff94", formats_text="amber,gromacs,charmm,openmm", out_dir=None,
                options=None, quantum="gfn"):
    """Fit one set of torsion terms per torsion type across every done compound of a batch run and
    write the parameter files (output.parameters); returns (TorsionParameterSet, written paths)."""
    from .output import check_output_folder
    from .output.parameters import write_parameter_set
    from .torsiontypes import fit_parameter_set, parameter_quartets

    typing, label, formats = check_fit_set(types, formats_text)
    options = options or FitOptions()
    options.check()
    out_dir = Path(out_dir) if out_dir is not None else Path(run_folder) / FIT_SET_FOLDER
    results = run_results(run_folder)
    check_output_folder(out_dir)
    parameters = fit_parameter_set(results, typing, options, quantum, label)
    return parameters, write_parameter_set(parameters, out_dir, formats, parameter_quartets(results, parameters, typing))


def check_refinement(level_text, settings, points_mode="all", reference=None):
    """The DFT Level of a refinement request, checked before any scan (one-line InputError otherwise)."""
    level = parse_level(level_text)
    if points_mode not in POINT_MODES:
        raise InputError(f"--refine-points {points_mode!r}: choose {' or '.join(POINT_MODES)}")
    if reference is not None and reference not in REFERENCE_TIERS:
        raise InputError(f"--reference {reference!r}: choose {', '.join(REFERENCE_TIERS)}")
    if settings.solvent:
        raise InputError("refinement is gas phase only (the DFT path carries no implicit solvent): drop --solvent")
    check_level(level)
    return level


def checkpoint_for(folder):
    """The refinement checkpoint kept beside a result folder (in its parent folder)."""
    return RelaxationCache(Path(folder).resolve().parent / CHECKPOINT_FILE)


def refine_with_dft(result, level, points_mode="all", reference=None, processes=None, threads=None, cache=None):
    """The ScanResult refined at a DFT level (and with the coupled-cluster reference if asked);
    processes: parallel optimisations (default all usable cores), each with `threads` threads
    (default cores / processes); cache: relaxcache.RelaxationCache of finished optimisations."""
    from .engines.dft import DftEngine

    if result.settings.solvent:
        raise InputError("refinement is gas phase only: the scan used an implicit solvent; refine a gas-phase scan")
    processes = processes or usable_cores()
    threads = threads or max(1, usable_cores() // processes)
    if reference is not None:
        check_reference(result.symbols, result.charge, result.unpaired_electrons)
    factory = functools.partial(DftEngine, result.symbols, level, result.charge, result.unpaired_electrons, threads)
    factory()  # the level, checked on this molecule's elements and spin before any optimisation
    refined = refine_result(result, factory, level.label, level.reference, points_mode, processes, cache=cache)
    return add_reference(refined, processes, threads) if reference else refined


def refine_folder(folder, level_text, points_mode="all", reference=None, processes=None):
    """Refine every bond of a result folder at a DFT level; rewrites the folder, returns the ScanResult."""
    result = read_result(folder)
    level = check_refinement(level_text, result.settings, points_mode, reference)
    with checkpoint_for(folder) as cache:
        result = refine_with_dft(result, level, points_mode, reference, processes, cache=cache)
    write_results(result, folder)
    return result
