"""Higher-level re-scoring of a scan: DFT single points (PySCF, on the CPU) at the relaxed
geometries of the scan, analysed by the same analysis.analyse_profile as the scan's own profile,
and the disagreement between the two methods.

The re-scored profile keeps the scan's geometries; its minima and maxima are located on its
Fourier fit (interpolation between grid points, no re-optimisation) and labelled so. Energies
absolute in Hartree in the records; coordinates Bohr in the records, Angstrom for PySCF.
"""

import math
import time
from dataclasses import dataclass, replace

from .analysis import analyse_profile
from .errors import CalculationError, InputError
from .records import MethodDisagreement, RescoredProfile
from .thermo import is_s_cis
from .torsionfit import profile_errors
from .units import BOHR_ANGSTROM

DISAGREEMENT_KCAL_MOL = 1.0  # largest point difference (after the best constant shift) that is not flagged
# a closed-shell molecule that exercises the basis and dispersion for H and C, checked before a scan
# (when only the settings are known): methane, Angstrom
TEST_MOLECULE = (("C", "H", "H", "H", "H"),
                 ((0.0, 0.0, 0.0), (0.629, 0.629, 0.629), (-0.629, -0.629, 0.629),
                  (-0.629, 0.629, -0.629), (0.629, -0.629, -0.629)))


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


def check_level(level, symbols=None, charge=0, unpaired_electrons=0, *, coords_angstrom=None):
    """Raise InputError now (not after hours of single points) if PySCF, the functional, the basis
    (for these elements), the charge and spin or the dispersion cannot be used. symbols None: the
    closed-shell TEST_MOLECULE; without coordinates the atoms are put on a line 1.5 Angstrom
    apart (the check builds the basis and the dispersion, it runs no SCF)."""
    dft, gto, _ = _pyscf()
    if symbols is None:
        symbols, coords_angstrom, charge, unpaired_electrons = *TEST_MOLECULE, 0, 0
    if coords_angstrom is None:
        coords_angstrom = [(0.0, 0.0, 1.5 * n) for n in range(len(symbols))]
    try:
        mol = gto.M(atom=[(s, tuple(map(float, c))) for s, c in zip(symbols, coords_angstrom)], basis=level.basis,
                    charge=charge, spin=unpaired_electrons, verbose=0)
        dft.libxc.parse_xc(level.functional)
    except (RuntimeError, KeyError, ValueError, NotImplementedError) as error:
        reason = " ".join(str(error).split())
        raise InputError(f"level {level.label}: PySCF cannot use it ({reason}); check the functional and basis names")
    if level.dispersion:
        _dispersion_energy(mol, level)


def check_rescoring(level_text, settings):
    """The Level of a re-scoring request, checked on a closed-shell test molecule before any scan
    runs (InputError otherwise); rescore_result checks it again on the scanned molecule."""
    level = parse_level(level_text)
    if settings.solvent:
        raise InputError("DFT re-scoring is gas phase only: drop --solvent or --rescore")
    check_level(level)
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
    """DFT energy (Hartree) of one geometry (Angstrom), with the dispersion correction when the level has one."""
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


def _region(minimum):
    return None if minimum is None else ("s-cis" if is_s_cis(minimum.angle_deg) else "s-trans")


def disagreement(bond, analysis, energies_hartree, method):
    """MethodDisagreement of a re-scored profile (analysis; energies_hartree per relaxed point)
    against the bond's own profile computed with `method`, at the same geometries."""
    pairs = bond.points_with_frames()
    semi = [bond.profile.relative_kcal_mol(p.energy_hartree) for p, _ in pairs]
    rescored = [analysis.relative_kcal_mol(energies_hartree[n]) for _, n in pairs]
    rms, largest = profile_errors(semi, rescored)
    reasons = []
    if largest > DISAGREEMENT_KCAL_MOL:
        reasons.append(f"the profiles differ by up to {largest:.2f} kcal/mol")
    semi_region, rescored_region = _region(bond.profile.lowest_minimum()), _region(analysis.lowest_minimum())
    if semi_region != rescored_region:
        reasons.append(f"the lowest conformer is {semi_region} with {method} but {rescored_region} re-scored")
    if len(bond.profile.minima) != len(analysis.minima):
        reasons.append(f"{len(bond.profile.minima)} minima with {method} but {len(analysis.minima)} re-scored")
    warning = ("; ".join(reasons) + ": treat the semi-empirical numbers with caution") if reasons else None
    return MethodDisagreement(rms, largest, DISAGREEMENT_KCAL_MOL, warning)


def rescore_bond(result, bond, level, threads=None):
    """The RescoredProfile of one bond: single points at its relaxed points, analysed like the scan."""
    started = time.perf_counter()
    energies = tuple(
        single_point(result.symbols, p.coords_bohr * BOHR_ANGSTROM, level, result.charge,
                     result.unpaired_electrons, threads)
        for p in bond.relaxed_points
    )
    pairs = bond.points_with_frames()
    analysis = analyse_profile([p.angle_deg for p, _ in pairs], [energies[n] for _, n in pairs], bond.symmetric,
                               result.settings.temperatures_k, result.settings.scis_window_deg)
    return RescoredProfile(level.label, level.reference, energies, analysis,
                           disagreement(bond, analysis, energies, result.method), time.perf_counter() - started)


def rescore_result(result, level, threads=None):
    """The ScanResult with every bond's `rescored` set; level: a Level or its text (parse_level).

    Gas phase only (InputError for a scan in implicit solvent); the level is checked on the
    scanned molecule's elements, charge and spin before the first single point.
    """
    if isinstance(level, str):
        level = parse_level(level)
    if result.settings.solvent:
        raise InputError("DFT re-scoring is gas phase only: the scan used an implicit solvent; "
                         "rescore a gas-phase scan")
    check_level(level, result.symbols, result.charge, result.unpaired_electrons,
                coords_angstrom=result.start_coords_bohr * BOHR_ANGSTROM)
    bonds = tuple(replace(bond, rescored=rescore_bond(result, bond, level, threads)) for bond in result.bonds)
    return replace(result, bonds=bonds)
