"""Higher-level re-scoring of a scan: DFT single points (PySCF, on the CPU) at the relaxed
GFN-xTB geometries, analysed exactly like the scan's own profile, and the disagreement between
the two methods.

The re-scored profile keeps the semi-empirical geometries; its minima and maxima are located on
its Fourier fit (interpolation between grid points, no re-optimisation) and labelled so.
Energies in Hartree from PySCF, kcal/mol relative in the records; coordinates in Angstrom.
"""

import math
import time
from dataclasses import dataclass

import numpy as np

from .entries import computed_points, points_with_frames
from .errors import CalculationError, InputError
from .profile import fit_profile, stationary_points
from .records import StationaryRecord
from .thermo import region_populations
from .torsionfit import profile_errors
from .units import HARTREE_KCAL_MOL

DISAGREEMENT_KCAL_MOL = 1.0  # largest point difference (after the best constant shift) that is not flagged
FLAT_KCAL_MOL = 0.01  # extrema of the re-scored fit shallower than this are not reported
INTERPOLATED = "interpolated on the re-scored Fourier fit (semi-empirical geometries, not re-optimised)"


@dataclass(frozen=True)
class Level:
    """A density-functional level: PySCF functional and basis, optional empirical dispersion."""

    label: str
    functional: str  # PySCF's name
    basis: str
    dispersion: str | None = None  # "d3bj", "d3zero" or "d4"
    dispersion_functional: str | None = None  # the dispersion library's name for the functional
    reference: str = ""


PRESETS = {
    "cheap": Level(
        "CAM-B3LYP-D3(BJ)/def2-SV(P)", "camb3lyp", "def2-sv(p)", "d3bj", "camb3lyp",
        "CAM-B3LYP: Yanai, Tew, Handy, Chem. Phys. Lett. 2004, 393, 51; D3(BJ): Grimme, Ehrlich, Goerigk, "
        "J. Comput. Chem. 2011, 32, 1456; def2-SV(P): Weigend, Ahlrichs, Phys. Chem. Chem. Phys. 2005, 7, 3297",
    ),
    "standard": Level(
        "CAM-B3LYP-D3(BJ)/def2-SVP", "camb3lyp", "def2-svp", "d3bj", "camb3lyp",
        "CAM-B3LYP: Yanai, Tew, Handy, Chem. Phys. Lett. 2004, 393, 51; D3(BJ): Grimme, Ehrlich, Goerigk, "
        "J. Comput. Chem. 2011, 32, 1456; def2-SVP: Weigend, Ahlrichs, Phys. Chem. Chem. Phys. 2005, 7, 3297",
    ),
    "careful": Level(
        "CAM-B3LYP-D3(BJ)/def2-TZVP", "camb3lyp", "def2-tzvp", "d3bj", "camb3lyp",
        "CAM-B3LYP: Yanai, Tew, Handy, Chem. Phys. Lett. 2004, 393, 51; D3(BJ): Grimme, Ehrlich, Goerigk, "
        "J. Comput. Chem. 2011, 32, 1456; def2-TZVP: Weigend, Ahlrichs, Phys. Chem. Chem. Phys. 2005, 7, 3297",
    ),
}
_DISPERSION_SUFFIXES = {"d3bj": "D3(BJ)", "d3zero": "D3(0)", "d4": "D4"}


def parse_level(text):
    """A Level from a preset name or "functional[-d3bj|-d3zero|-d4]/basis" (e.g. "b3lyp-d3bj/def2-svp")."""
    text = text.strip()
    if text.lower() in PRESETS:
        return PRESETS[text.lower()]
    functional, slash, basis = text.partition("/")
    if not slash or not functional or not basis:
        raise InputError(f"re-scoring level {text!r}: give a preset ({', '.join(PRESETS)}) or functional/basis, "
                         "e.g. b3lyp-d3bj/def2-svp")
    name, dispersion = functional.lower(), None
    for suffix in _DISPERSION_SUFFIXES:
        if name.endswith("-" + suffix):
            name, dispersion = name[: -len(suffix) - 1], suffix
    label = f"{name.upper()}{'-' + _DISPERSION_SUFFIXES[dispersion] if dispersion else ''}/{basis}"
    return Level(label, name.replace("-", ""), basis.lower(), dispersion, name)


def _pyscf():
    try:
        from pyscf import dft, gto, lib
    except ImportError:
        raise InputError("DFT re-scoring needs PySCF: pip install 'torsionscan[dft]'") from None
    return dft, gto, lib


def check_level(level, symbols, charge=0, unpaired_electrons=0):
    """Raise InputError now (not after the scan) if PySCF, the functional, basis or dispersion cannot be used."""
    dft, gto, _ = _pyscf()
    try:
        mol = gto.M(atom=[(s, (0.0, 0.0, 1.5 * n)) for n, s in enumerate(symbols)], basis=level.basis,
                    charge=charge, spin=unpaired_electrons, verbose=0)
        dft.libxc.parse_xc(level.functional)
    except (RuntimeError, KeyError, ValueError, NotImplementedError) as error:
        raise InputError(f"level {level.label}: PySCF cannot use it ({error}); check the functional and basis names")
    if level.dispersion:
        _dispersion_energy(mol, level)


def check_rescoring(level_text, settings):
    """The Level of a re-scoring request, checked before any scan runs (InputError otherwise)."""
    level = parse_level(level_text)
    if settings.solvent:
        raise InputError("DFT re-scoring is gas phase only: drop --solvent or --rescore")
    check_level(level, ["C", "H"])
    return level


def _dispersion_energy(mol, level):
    """Dispersion correction in Hartree from the DFT-D3/DFT-D4 packages."""
    try:
        if level.dispersion == "d4":
            from dftd4.pyscf import DFTD4Dispersion

            return float(DFTD4Dispersion(mol, xc=level.dispersion_functional).kernel()[0])
        from dftd3.pyscf import DFTD3Dispersion

        return float(DFTD3Dispersion(mol, xc=level.dispersion_functional, version=level.dispersion).kernel()[0])
    except ImportError:
        package = "dftd4" if level.dispersion == "d4" else "dftd3"
        raise InputError(f"{level.label} needs the {package} package: pip install 'torsionscan[dft]'") from None
    except Exception as error:  # the libraries raise plain errors for unknown functionals
        raise InputError(f"{level.label}: no {level.dispersion} parameters ({error}); choose another level") from None


def single_point(symbols, coords_angstrom, level, charge=0, unpaired_electrons=0, threads=None):
    """DFT energy (Hartree) of one geometry, with the dispersion correction when the level has one."""
    dft, gto, lib = _pyscf()
    if threads:
        lib.num_threads(threads)
    mol = gto.M(atom=[(s, tuple(map(float, c))) for s, c in zip(symbols, coords_angstrom)], basis=level.basis,
                charge=charge, spin=unpaired_electrons, verbose=0)
    solver = (dft.UKS if unpaired_electrons else dft.RKS)(mol).density_fit()
    solver.xc = level.functional
    solver.conv_tol = 1e-9
    energy = solver.kernel()
    if not solver.converged:
        solver = solver.newton()  # second-order SCF from where the first stopped
        energy = solver.kernel(solver.make_rdm1())
    if not solver.converged or not math.isfinite(energy):
        raise CalculationError(f"{level.label} SCF did not converge")
    return float(energy) + (_dispersion_energy(mol, level) if level.dispersion else 0.0)


@dataclass(frozen=True)
class ProfileAnalysis:
    """Fit, stationary points, barriers and populations of a profile (the shape output.summary expects)."""

    fit: object
    minima: tuple
    maxima: tuple
    barriers: tuple
    populations: tuple
    rrho_populations: tuple = ()


def analyse_profile(angles_deg, energies_kcal_mol, symmetric, temperatures_k, window_deg):
    """Fit and analyse a profile known only at grid points; energies relative, kcal/mol (Hartree in records)."""
    from .scan import barriers_between

    fit = fit_profile(np.asarray(angles_deg), np.asarray(energies_kcal_mol), symmetric=symmetric)
    extrema = stationary_points(fit.series, min_depth_kcal_mol=FLAT_KCAL_MOL)
    records = [
        StationaryRecord(s.kind, s.angle_deg, s.angle_deg, s.energy_kcal_mol / HARTREE_KCAL_MOL, INTERPOLATED,
                         True, None)
        for s in extrema
    ]
    minima = tuple(r for r in records if r.kind == "minimum")
    maxima = tuple(r for r in records if r.kind == "maximum")
    populations = tuple(region_populations(fit.series.value, t, window_deg) for t in temperatures_k)
    return ProfileAnalysis(fit, minima, maxima, tuple(barriers_between(list(minima), list(maxima))), populations)


def disagreement(entry, rescored_analysis, rescored_energies):
    """The method_disagreement record: RMS/max difference of the two profiles and a warning or None."""
    pairs = points_with_frames(entry)
    semi = [p["energy_rel_kcal_mol"] for p, _ in pairs]
    rms, largest = profile_errors(semi, rescored_energies)
    reasons = []
    if largest > DISAGREEMENT_KCAL_MOL:
        reasons.append(f"the profiles differ by up to {largest:.2f} kcal/mol")

    def region(angle_deg):
        return None if angle_deg is None else ("s-cis" if abs(angle_deg) < 90 else "s-trans")

    semi_lowest = min(entry["minima"], key=lambda m: m["energy_rel_kcal_mol"], default=None)
    rescored_lowest = min(rescored_analysis.minima, key=lambda m: m.energy_hartree, default=None)
    semi_region = region(semi_lowest and semi_lowest["angle_deg"])
    rescored_region = region(rescored_lowest and rescored_lowest.angle_deg)
    if semi_region != rescored_region:
        reasons.append(f"the lowest conformer is {semi_region} with {entry['method']} but {rescored_region} re-scored")
    if len(entry["minima"]) != len(rescored_analysis.minima):
        reasons.append(f"{len(entry['minima'])} minima with {entry['method']} but "
                       f"{len(rescored_analysis.minima)} re-scored")
    warning = ("; ".join(reasons) + ": treat the semi-empirical numbers with caution") if reasons else None
    return {"rms_kcal_mol": round(rms, 4), "max_kcal_mol": round(largest, 4), "warning": warning,
            "threshold_kcal_mol": DISAGREEMENT_KCAL_MOL,
            "note": "differences of the relative profiles at the same geometries after the best constant shift"}


def rescore_entry(entry, frames_angstrom, symbols, level, *, charge=0, unpaired_electrons=0, temperatures_k=(298.15,),
                  window_deg=30.0, threads=None):
    """A bond's summary entry with re-scored energies, rescored analysis and method_disagreement added."""
    from .output.summary import profile_analysis_dict

    started = time.perf_counter()
    if len(frames_angstrom) != len(computed_points(entry)):
        raise InputError(f"bond {entry['bond']}: {len(frames_angstrom)} frames for {len(computed_points(entry))} "
                         "scan points; rerun the scan")
    energies = np.array([single_point(symbols, f, level, charge, unpaired_electrons, threads)
                         for f in frames_angstrom])
    relative = (energies - energies.min()) * HARTREE_KCAL_MOL
    pairs = points_with_frames(entry)
    angles = [p["angle_deg"] for p, _ in pairs]
    rows = [n for _, n in pairs]
    analysis = analyse_profile(angles, relative[rows], entry["symmetric_profile"], temperatures_k, window_deg)
    # the fit's lowest minimum may lie a little below the lowest grid point: it becomes the zero
    lowest = min([0.0, *[m.energy_hartree * HARTREE_KCAL_MOL for m in analysis.minima]])
    if lowest < 0:
        relative -= lowest
        analysis = analyse_profile(angles, relative[rows], entry["symmetric_profile"], temperatures_k, window_deg)
    values = {(p["angle_deg"], p["mirrored"]): round(float(relative[n]), 5) for p, n in pairs}
    entry = {**entry, "points": [
        {**p, "energy_rescored_rel_kcal_mol": values.get((p["angle_deg"], p["mirrored"]))} for p in entry["points"]
    ]}
    rescored = profile_analysis_dict(analysis, 0.0)
    rescored["note"] = f"{level.label} single points at the {entry['method']} geometries; minima and maxima {INTERPOLATED}"
    entry.update(
        rescore_level=level.label,
        rescore_reference=level.reference,
        method_disagreement=disagreement(entry, analysis, relative[rows]),
        rescored=rescored,
        rescore_wall_time_s=round(time.perf_counter() - started, 2),
    )
    return entry


def rescore_summary(summary, frames_by_bond, symbols, level, threads=None):
    """A compound summary with every bond re-scored; frames_by_bond: {bond label: frames in Angstrom}."""
    settings = summary["settings"]
    if settings.get("solvent"):
        raise InputError("DFT re-scoring is gas phase only: the scan used an implicit solvent; rescore a gas-phase scan")
    temperatures = settings["temperatures_k"]
    window = settings["scis_window_deg"]
    bonds = [
        rescore_entry(entry, frames_by_bond[entry["bond"]], symbols, level, charge=summary["charge"],
                      unpaired_electrons=summary["unpaired_electrons"], temperatures_k=temperatures,
                      window_deg=window, threads=threads)
        for entry in summary["bonds"]
    ]
    return {**summary, "bonds": bonds}
