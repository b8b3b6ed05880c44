"""DFT re-scoring with PySCF: the setup, butadiene against high-level values, and the
method-disagreement indicator. Real single points; the slowest tests of the suite (minutes).
The disagreement rules and the plumbing also run on fast model-potential scans. Biphenyl's
re-scored barriers against CCSD(T)/CBS are checked by benchmarks/refinement_validation.py."""

import json
import subprocess
import sys
from dataclasses import replace

import numpy as np
import pytest

pytest.importorskip("pyscf")

import torsionscan  # noqa: E402
from torsionscan.engines.model import ModelEngine  # noqa: E402
from torsionscan.errors import InputError  # noqa: E402
from torsionscan.molecule import find_conjugated_bonds, load_molecule  # noqa: E402
from torsionscan.profile import FourierSeries  # noqa: E402
from torsionscan.records import to_plain  # noqa: E402
from torsionscan.records import ScanResult  # noqa: E402
from torsionscan.rescore import (  # noqa: E402
    PRESETS, check_level, check_rescoring, disagreement, parse_level, rescore_result, single_point,
)
from torsionscan.analysis import analyse_profile  # noqa: E402
from torsionscan.output import write_results  # noqa: E402
from torsionscan.settings import ScanSettings  # noqa: E402
from torsionscan.units import BOHR_ANGSTROM, HARTREE_KCAL_MOL  # noqa: E402
from torsionscan.workflows import read_result, rescore_folder  # noqa: E402

STANDARD = PRESETS["standard"]
SMALLEST = "hf/sto-3g"  # the cheapest level PySCF offers: for plumbing only, never for a number
WATER = (["O", "H", "H"], np.array([[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]]))


def _rescored(smiles, step, threads=2):
    result = torsionscan.scan(smiles, settings=ScanSettings(step_deg=step, conformers=2, frequencies=False))
    return rescore_result(result, STANDARD, threads).bonds[0]


def _model_scan(step=30.0):
    molecule = load_molecule("C=CC=C")
    bond = find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC=C", engine=engine, settings=ScanSettings(step_deg=step, conformers=2,
                                                                           frequencies=False))


def _energy(analysis, minima_or_maxima, near):
    """Relative energy (kcal/mol) of the lowest record within 25 degrees of |angle| = near."""
    chosen = min((m for m in minima_or_maxima if abs(abs(m.angle_deg) - near) < 25), key=lambda m: m.energy_hartree)
    return analysis.relative_kcal_mol(chosen.energy_hartree)


@pytest.mark.dft
def test_the_dft_setup_agrees_with_independent_libraries():
    """Guards the preset's ingredients against independent implementations: the functional
    (LibXC, which PySCF uses, vs the XCFun library) and the def2-SVP basis (PySCF's copy vs the
    Basis Set Exchange library's)."""
    from pyscf import dft, gto
    import basis_set_exchange

    symbols, coords = WATER
    atoms = list(zip(symbols, map(tuple, coords)))

    def energy(basis, xcfun=False):
        mol = gto.M(atom=atoms, basis=basis, verbose=0)
        solver = dft.RKS(mol)
        solver.xc, solver.grids.level, solver.conv_tol = STANDARD.functional, 4, 1e-10
        if xcfun:
            solver._numint.libxc = dft.xcfun
        return solver.kernel()

    reference = energy("def2-svp")
    assert energy("def2-svp", xcfun=True) == pytest.approx(reference, abs=1e-8)
    exchange = basis_set_exchange.get_basis("def2-SVP", elements=[1, 8], fmt="nwchem")
    assert energy({"O": gto.basis.parse(exchange, "O"), "H": gto.basis.parse(exchange, "H")}) == pytest.approx(
        reference, abs=1e-8)
    # the package's single point (density fitting, dispersion added) stays within 1 mEh of it
    assert single_point(symbols, coords, parse_level("camb3lyp/def2-svp")) == pytest.approx(reference, abs=1e-3)


def test_levels_are_parsed_and_missing_pieces_are_refused():
    assert parse_level("Standard") is STANDARD
    level = parse_level("b3lyp-d3bj/def2-svp")
    assert (level.functional, level.basis, level.dispersion, level.label) == ("b3lyp", "def2-svp", "d3bj",
                                                                             "B3LYP-D3(BJ)/def2-svp")
    with pytest.raises(InputError, match="give a preset"):
        parse_level("b3lyp")


@pytest.mark.parametrize("preset", sorted(PRESETS))
def test_every_preset_passes_the_check_made_before_a_scan(preset):
    # the check once used a 7-electron test molecule, which PySCF refuses as closed shell
    assert check_rescoring(preset, ScanSettings()) is PRESETS[preset]
    check_level(PRESETS[preset], ["C", "C", "C", "H", "H", "H", "H", "H"], unpaired_electrons=1)  # allyl radical
    with pytest.raises(InputError, match="PySCF cannot use it"):
        check_level(PRESETS[preset], ["C", "H"])  # 7 electrons, closed shell: impossible


def test_the_disagreement_rules_on_model_profiles():
    result = _model_scan()
    bond = result.bonds[0]
    settings = result.settings
    pairs = bond.points_with_frames()
    angles = [p.angle_deg for p, _ in pairs]

    def verdict(energy_of_frame):
        energies = [energy_of_frame(p) for p in bond.relaxed_points]
        analysis = analyse_profile(angles, [energies[n] for _, n in pairs], bond.symmetric, settings.temperatures_k,
                                   settings.scis_window_deg)
        return disagreement(bond, analysis, energies, result.method)

    same = verdict(lambda p: p.energy_hartree + 0.37)  # a constant shift is no disagreement
    assert same.warning is None and same.max_kcal_mol < 1e-9 and same.threshold_kcal_mol == 1.0
    # one minimum at 0 degrees, 4 kcal/mol deep: every rule fires
    cis = verdict(lambda p: 2.0 * (1 - np.cos(np.radians(p.angle_deg))) / HARTREE_KCAL_MOL)
    assert cis.max_kcal_mol > 1.0 and cis.rms_kcal_mol < cis.max_kcal_mol
    assert cis.warning == (f"the profiles differ by up to {cis.max_kcal_mol:.2f} kcal/mol; "
                           "the lowest conformer is s-trans with model potential but s-cis re-scored; "
                           "2 minima with model potential but 1 re-scored: "
                           "treat the semi-empirical numbers with caution")


@pytest.mark.dft
def test_rescoring_plumbing_at_the_smallest_level(tmp_path):
    result = _model_scan(step=60.0)
    write_results(result, tmp_path)
    rescored = rescore_folder(tmp_path, SMALLEST, threads=1)
    bond, profile = result.bonds[0], rescored.bonds[0].rescored
    assert profile.level == "HF/sto-3g" and len(profile.energies_hartree) == len(bond.relaxed_points)
    assert all(np.isfinite(profile.energies_hartree)) and profile.wall_time_s > 0
    assert profile.analysis.minima and all(m.coords_bohr is None for m in profile.analysis.minima)
    assert min(profile.analysis.relative_kcal_mol(np.array(profile.energies_hartree))) == pytest.approx(0.0, abs=1e-9)
    # the first frame's energy is a plain single point at that geometry (Bohr -> Angstrom)
    first = bond.relaxed_points[0]
    assert profile.energies_hartree[0] == pytest.approx(
        single_point(result.symbols, first.coords_bohr * BOHR_ANGSTROM, parse_level(SMALLEST)), abs=1e-7)
    # attached and written (compared in plain form: a NaN, e.g. an undefined tunnelling splitting, never equals itself)
    assert to_plain(read_result(tmp_path).bonds[0].rescored) == to_plain(profile)
    solvated = replace(result, settings=replace(result.settings, solvent="water"))
    with pytest.raises(InputError, match="gas phase only"):
        rescore_result(solvated, SMALLEST)


@pytest.mark.dft
@pytest.mark.xtb
def test_the_scan_command_rescores_through_a_real_process(tmp_path):
    out = tmp_path / "butadiene"
    done = subprocess.run(
        [sys.executable, "-m", "torsionscan.cli", "scan", "C=CC=C", "--rescore", SMALLEST, "--step", "60",
         "--no-frequencies", "--conformers", "1", "--out", str(out)],
        capture_output=True, text=True, timeout=600, cwd=tmp_path,
    )
    assert done.returncode == 0, done.stderr
    result = ScanResult.from_dict(json.loads((out / "summary.json").read_text()))
    rescored = result.bonds[0].rescored
    assert rescored is not None and rescored.level == "HF/sto-3g"
    assert len(rescored.energies_hartree) == len(result.bonds[0].relaxed_points)


@pytest.mark.dft
@pytest.mark.xtb
def test_butadiene_rescored_moves_towards_the_high_level_values():
    bond = _rescored("C=CC=C", step=30.0)
    gfn, dft = bond.profile, bond.rescored.analysis
    # E(gauche) - E(s-trans) = 2.9 kcal/mol (Martin-Drumel et al. 2019, see shared/reference)
    gauche_gfn, gauche_dft = _energy(gfn, gfn.minima, 30), _energy(dft, dft.minima, 30)
    assert abs(gauche_dft - 2.9) < abs(gauche_gfn - 2.9)
    assert gauche_dft == pytest.approx(2.9, abs=0.5)  # CAM-B3LYP-D3(BJ)/def2-SVP: ~0.5 kcal/mol (measured, issue 6)
    # s-trans -> gauche barrier ~6 kcal/mol (Feller and Craig 2009, CCSD(T)/CBS; from memory): the
    # preset overestimates it as range-separated hybrids do, within 1 kcal/mol; it does not beat
    # GFN2-xTB's 5.4 here (both ~0.6-0.8 off, opposite signs)
    barrier_dft = _energy(dft, dft.maxima, 95)
    assert barrier_dft == pytest.approx(6.0, abs=1.0)
    assert bond.rescored.disagreement.warning is None or "up to" in bond.rescored.disagreement.warning
    assert len(bond.rescored.energies_hartree) == len(bond.relaxed_points)
    assert all(np.isfinite(bond.rescored.energies_hartree))


@pytest.mark.dft
@pytest.mark.xtb
def test_disagreement_fires_on_glyoxal_and_stays_quiet_on_styrene():
    # glyoxal: experiment and DFT have a cis minimum ~4-5 kcal/mol above trans (from memory);
    # GFN2-xTB has none there
    glyoxal = _rescored("O=CC=O", step=30.0)
    warning = glyoxal.rescored.disagreement.warning
    assert warning and "1 minima with GFN2-xTB but 2 re-scored" in warning
    styrene = _rescored("C=Cc1ccccc1", step=30.0)
    assert styrene.rescored.disagreement.warning is None
    assert styrene.rescored.disagreement.max_kcal_mol < 1.0


@pytest.mark.parametrize("extra, words", [
    (["--rescore", "nofunctional/def2-svp"], "PySCF cannot use it"),
    (["--rescore", "standard", "--solvent", "water"], "gas phase only"),
])
def test_rescoring_problems_are_refused_before_the_scan(extra, words, capsys, tmp_path):
    from torsionscan.cli import main

    assert main(["scan", "C=CC=O", "--out", str(tmp_path / "x"), *extra]) == 2
    assert words in capsys.readouterr().err
    assert not (tmp_path / "x").exists()  # nothing was computed
