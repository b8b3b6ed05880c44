"""Torsion terms for force fields: MMFF94 residual, fit, proof and export, on real GFN2-xTB scans
(and, for the plumbing and the error paths, on fast model-potential scans)."""

import csv
import json
import math
from dataclasses import replace

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdForceFieldHelpers

import torsionscan
from torsionscan.analysis import analyse_profile
from torsionscan.cli import main
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import InputError
from torsionscan.forcefield import fit_torsion
from torsionscan.mm import Mmff94, read_mm_energies
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.output import write_results
from torsionscan.output.forcefield import TERM_COLUMNS
from torsionscan.profile import FourierSeries
from torsionscan.records import FitOptions, ScanResult, TorsionFit, from_plain, to_plain
from torsionscan.settings import ScanSettings
from torsionscan.torsionfit import TorsionTerm, fit_terms, term_energy
from torsionscan.units import BOHR_ANGSTROM, HARTREE_KCAL_MOL
from torsionscan.workflows import fit_folder, read_result

TRUTH = (TorsionTerm(1, 0.0, 0.4), TorsionTerm(2, 180.0, 2.5), TorsionTerm(3, 0.0, 0.3))


def _frames(bond):
    return [p.coords_bohr * BOHR_ANGSTROM for p in bond.relaxed_points]


def _model_scan(smiles="C=CC=C", step=15.0):
    """A scan on the analytic model potential (milliseconds): every conjugated bond modelled."""
    molecule = load_molecule(smiles)
    series = FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0))
    engine = ModelEngine(molecule.mol, [(b.atoms, series) for b in find_conjugated_bonds(molecule)])
    return torsionscan.scan(smiles, engine=engine, settings=ScanSettings(step_deg=step, conformers=2,
                                                                         frequencies=False))


@pytest.fixture(scope="module")
def acrolein_folder(tmp_path_factory):
    """A real 15-degree scan of acrolein written to a result folder."""
    out = tmp_path_factory.mktemp("acrolein")
    write_results(torsionscan.scan("C=CC=O", name="acrolein", settings=ScanSettings(conformers=2)), out)
    return out


@pytest.fixture(scope="module")
def model_folder(tmp_path_factory):
    """A model-potential scan of butadiene written to a result folder."""
    out = tmp_path_factory.mktemp("model")
    write_results(_model_scan(), out)
    return out


def _with_synthetic_profile(result):
    """The result with bond 0's energies replaced by MMFF94 without the bond's torsions + TRUTH,
    at its own relaxed frames (a pseudo-quantum profile whose torsion terms are known)."""
    bond = result.bonds[0]
    _, without = Mmff94(result.mol, bond.dihedral_atoms[1:3]).energies(_frames(bond))
    measured = [p.measured_angle_deg for p in bond.relaxed_points]
    pseudo = without + term_energy(TRUTH, measured)
    pseudo = (pseudo - pseudo.min()) / HARTREE_KCAL_MOL
    frame_energy = dict(enumerate(pseudo))
    points = {id(p): replace(p, energy_hartree=float(frame_energy[n])) for p, n in bond.points_with_frames()}
    new_points = tuple(points.get(id(p), p) for p in bond.points)
    settings = result.settings
    profile = analyse_profile([p.angle_deg for p in new_points], [p.energy_hartree for p in new_points],
                              bond.symmetric, settings.temperatures_k, settings.scis_window_deg)
    return replace(result, bonds=(replace(bond, points=new_points, profile=profile), *result.bonds[1:]))


def _check_recovers_truth(fit):
    found = {t.periodicity: (t.phase_deg, t.k_kcal_mol) for t in fit.terms}
    for term in TRUTH:
        assert found[term.periodicity][0] == term.phase_deg
        assert found[term.periodicity][1] == pytest.approx(term.k_kcal_mol, abs=1e-3)
    assert found[4][1] == pytest.approx(0.0, abs=1e-3)
    assert fit.rmse_after_kcal_mol < 1e-3


@pytest.mark.parametrize("smiles", ["C=CC(C)=O", "C=CC=C", "c1ccccc1-c1ccccc1"])
def test_removed_terms_are_exactly_mmff94s_torsion_energy(smiles):
    # reference: RDKit's own switch that drops every torsion term; summed over all bonds our
    # per-bond removal must give the same energy
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=5)
    coords = mol.GetConformer().GetPositions()
    properties = rdForceFieldHelpers.MMFFGetMoleculeProperties(mol)
    properties.SetMMFFTorsionTerm(False)
    no_torsion = rdForceFieldHelpers.MMFFGetMoleculeForceField(mol, properties).CalcEnergy(coords.ravel().tolist())
    removed = 0.0
    for bond in mol.GetBonds():
        full, without = Mmff94(mol, (bond.GetBeginAtomIdx(), bond.GetEndAtomIdx())).energies([coords])
        removed += full[0] - without[0]
    assert full[0] - removed == pytest.approx(no_torsion, abs=1e-9)


def test_fit_recovers_known_terms_with_free_phases():
    truth = (TorsionTerm(1, 45.0, 0.7), TorsionTerm(2, 180.0, 2.0), TorsionTerm(3, 300.0, 0.25))
    angles = np.arange(-180.0, 180.0, 15.0)
    fit = fit_terms(angles, 1.3 + term_energy(truth, angles), max_periodicity=4, free_phases=True)
    for got, want in zip(fit.terms, truth):
        assert (got.periodicity, got.phase_deg, got.k_kcal_mol) == pytest.approx(
            (want.periodicity, want.phase_deg, want.k_kcal_mol), abs=1e-3)
    assert fit.terms[3].k_kcal_mol < 1e-4


@pytest.mark.xtb
def test_synthetic_truth_through_the_full_residual_and_fit_path(butadiene_scan):
    """Pseudo-quantum profile = MMFF94 without the bond's torsions + known terms, on real relaxed frames."""
    result = _with_synthetic_profile(butadiene_scan)
    _check_recovers_truth(fit_torsion(result, result.bonds[0], FitOptions()))


def test_synthetic_truth_through_the_folder_workflow_and_exports(tmp_path):
    """The same known terms on model-potential frames, through write -> read -> fit -> attach -> rewrite."""
    result = _with_synthetic_profile(_model_scan())
    write_results(result, tmp_path)
    fits = fit_folder(tmp_path)
    fit = fits["2-3"]
    _check_recovers_truth(fit)
    assert fit.quantum_profile == result.method == "model potential"
    assert fit.dihedral_atoms == (0, 1, 2, 3) and fit.mmff_types == (2, 2, 2, 2)
    assert fit.removed_torsions and all(q.atoms[1:3] == (1, 2) for q in fit.removed_torsions)
    assert len(fit.profile_angles_deg) == len(result.bonds[0].points_with_frames())
    assert list(fit.profile_angles_deg) == sorted(fit.profile_angles_deg)
    # attached to the bond in the rewritten summary, and the JSON export is the same record
    assert read_result(tmp_path).bond("2-3").torsion_fit == fit
    exported = json.loads((tmp_path / "bond_2-3_torsion_fit.json").read_text())
    assert exported == to_plain(fit)
    assert from_plain(TorsionFit, exported) == fit
    with (tmp_path / "bond_2-3_torsion_terms.csv").open() as handle:
        rows = list(csv.DictReader(handle))
    assert [int(r["periodicity"]) for r in rows] == [1, 2, 3, 4]
    assert [float(r["k_kcal_mol"]) for r in rows] == [round(t.k_kcal_mol, 6) for t in fit.terms]
    xml = (tmp_path / "bond_2-3_torsion_openmm.xml").read_text()
    assert xml.count('p1="0" p2="1" p3="2" p4="3"') == 4
    assert (tmp_path / "bond_2-3_torsion_fit.png").stat().st_size > 1000


@pytest.mark.xtb
@pytest.mark.parametrize("molecule", ["butadiene", "acrolein"])
def test_real_fit_against_mmff94_reproduces_the_quantum_profile(molecule, butadiene_scan, acrolein_folder, tmp_path):
    if molecule == "butadiene":
        folder = tmp_path / "butadiene"
        write_results(butadiene_scan, folder)
    else:
        folder = acrolein_folder
    fit = fit_folder(folder)["2-3"]
    # target of the task: 0.3 kcal/mol after fitting; stock MMFF94 is measurably worse
    assert fit.rmse_after_kcal_mol <= 0.3
    assert fit.rmse_before_kcal_mol > 2 * fit.rmse_after_kcal_mol
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["bonds"][0]["torsion_fit"] == to_plain(fit)
    assert ScanResult.from_dict(summary).bonds[0].torsion_fit == fit
    assert fit.mm_model == "MMFF94 (RDKit)" and fit.terms
    assert fit.max_error_after_kcal_mol >= fit.rmse_after_kcal_mol
    # a conjugated bond's main term: twofold, phase 180 (planar minima), a few kcal/mol (common practice)
    twofold = next(t for t in fit.terms if t.periodicity == 2)
    assert twofold.phase_deg == 180.0 and 1.0 < twofold.k_kcal_mol < 6.0

    # the exports read back to the same terms
    assert json.loads((folder / "bond_2-3_torsion_fit.json").read_text()) == to_plain(fit)
    with (folder / "bond_2-3_torsion_terms.csv").open() as handle:
        rows = list(csv.DictReader(handle))
    assert list(rows[0]) == TERM_COLUMNS
    for row, term in zip(rows, fit.terms):
        assert int(row["periodicity"]) == term.periodicity and float(row["phase_deg"]) == term.phase_deg
        assert float(row["k_kcal_mol"]) == round(term.k_kcal_mol, 6)
        assert [int(row[f"atom{n}"]) for n in range(1, 5)] == [a + 1 for a in fit.dihedral_atoms] == [1, 2, 3, 4]
        assert row["mmff_type1"] == "2"  # MMFF94 type 2: vinylic carbon


@pytest.mark.xtb
def test_the_openmm_export_loads_and_gives_the_fitted_energy(acrolein_folder):
    openmm = pytest.importorskip("openmm")
    fit = fit_folder(acrolein_folder)["2-3"]
    force = openmm.XmlSerializer.deserialize((acrolein_folder / "bond_2-3_torsion_openmm.xml").read_text())
    assert force.getNumTorsions() == len(fit.terms)
    frames = _frames(read_result(acrolein_folder).bond("2-3"))
    system = openmm.System()
    for _ in range(len(frames[0])):
        system.addParticle(12.0)
    system.addForce(force)
    context = openmm.Context(system, openmm.VerletIntegrator(0.001), openmm.Platform.getPlatformByName("Reference"))
    for coords in frames[::4]:
        context.setPositions(coords * 0.1)  # Angstrom -> nm
        energy_kj = context.getState(getEnergy=True).getPotentialEnergy().value_in_unit(openmm.unit.kilojoule_per_mole)
        phi = math.degrees(torsionscan.geometry.dihedral(coords, 0, 1, 2, 3))
        assert energy_kj / 4.184 == pytest.approx(float(term_energy(fit.terms, phi)), abs=1e-6)


@pytest.mark.xtb
def test_user_mm_energies_give_the_same_terms_as_the_built_in_model(acrolein_folder, tmp_path):
    built_in = fit_folder(acrolein_folder)["2-3"]
    result = read_result(acrolein_folder)
    _, without = Mmff94(result.mol, (1, 2)).energies(_frames(result.bond("2-3")))
    table = tmp_path / "mm.csv"
    table.write_text("frame,energy_kj_mol\n" + "".join(f"{n},{float(e) * 4.184!r}\n" for n, e in enumerate(without, 1)))
    user = fit_folder(acrolein_folder, mm_energies_path=table)["2-3"]
    assert user.mm_model == "user-supplied (mm.csv)"
    assert user.removed_torsions == () and user.mm_full_kcal_mol is None
    for mine, theirs in zip(user.terms, built_in.terms):
        assert mine.k_kcal_mol == pytest.approx(theirs.k_kcal_mol, abs=1e-6)
        assert mine.phase_deg == theirs.phase_deg


def test_bad_mm_tables_and_folders_are_one_line_errors(model_folder, tmp_path, capsys):
    frames = len(read_result(model_folder).bond("2-3").relaxed_points)
    short = tmp_path / "short.csv"
    short.write_text("energy_kcal_mol\n1.0\n2.0\n")
    with pytest.raises(InputError, match=f"has 2 energies but the scan has {frames} frames"):
        read_mm_energies(short, frames)
    words = tmp_path / "words.csv"
    words.write_text("energy_kcal_mol\n" + "1.0\n" * (frames - 1) + "high\n")
    with pytest.raises(InputError, match=f"row {frames} has energy 'high', not a number"):
        read_mm_energies(words, frames)
    unnamed = tmp_path / "unnamed.csv"
    unnamed.write_text("e\n1.0\n")
    with pytest.raises(InputError, match="needs a column energy_kcal_mol or energy_kj_mol"):
        read_mm_energies(unnamed, frames)
    with pytest.raises(InputError, match="has no scan of bond 1-2; it holds 2-3"):
        fit_folder(model_folder, bond="1-2")
    with pytest.raises(InputError, match="no re-scored energies"):
        fit_folder(model_folder, quantum="rescored")
    assert main(["fit", str(model_folder), "--mm-energies", str(short)]) == 2
    assert main(["fit", str(tmp_path)]) == 2  # not a scan folder
    assert main(["fit", str(model_folder), "--bond", "1-2"]) == 2  # a bond that was not scanned
    errors = capsys.readouterr().err.strip().splitlines()
    assert len(errors) == 3 and all(line.startswith("torsionscan: error:") for line in errors)
    assert "no summary.json" in errors[1] and "has no scan of bond 1-2" in errors[2]


def test_mm_energies_belong_to_one_named_bond(tmp_path):
    result = _model_scan("C=CC=CC=C", step=30.0)  # hexatriene: two scanned bonds of equal frame counts
    assert [b.label for b in result.bonds] == ["2-3", "4-5"]
    write_results(result, tmp_path)
    bond = result.bond("2-3")
    _, without = Mmff94(result.mol, bond.dihedral_atoms[1:3]).energies(_frames(bond))
    table = tmp_path / "mm.csv"
    table.write_text("energy_kcal_mol\n" + "".join(f"{float(e)!r}\n" for e in without))
    with pytest.raises(InputError, match="say which one the MM energies belong to with --bond"):
        fit_folder(tmp_path, mm_energies_path=table)
    fits = fit_folder(tmp_path, bond="2-3", mm_energies_path=table)
    assert list(fits) == ["2-3"] and fits["2-3"].mmff_types == (2, 2, 2, 2)
    stored = read_result(tmp_path)
    assert stored.bond("2-3").torsion_fit == fits["2-3"] and stored.bond("4-5").torsion_fit is None
    with pytest.raises(InputError, match="2 MM energies for the"):
        fit_torsion(stored, stored.bond("4-5"), mm_energies=[1.0, 2.0])


def test_fit_options_are_checked():
    with pytest.raises(InputError, match="--periodicities must be 1 to 6"):
        FitOptions(max_periodicity=7).check()
    with pytest.raises(InputError, match="--weight-temperature must be above 0 K"):
        FitOptions(weight_temperature_k=0.0).check()


def test_a_molecule_mmff94_cannot_type_is_refused():
    mol = Chem.AddHs(Chem.MolFromSmiles("C=CB(O)O"))  # MMFF94 has no boron parameters
    with pytest.raises(InputError, match="MMFF94 cannot type"):
        Mmff94(mol, (1, 2))
