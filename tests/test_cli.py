"""The command line end to end: files written, summary fields, and one-line errors with exit codes."""

import csv
import json
import subprocess
import sys

import pytest
from rdkit import Chem

import torsionscan.driver
from torsionscan.cli import main
from torsionscan.engines.model import ModelEngine
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.records import SCHEMA_VERSION, ScanResult

xtb = pytest.mark.xtb


def _summary(out):
    return ScanResult.from_dict(json.loads((out / "summary.json").read_text()))


@pytest.fixture(scope="module")
def acrolein_run(tmp_path_factory):
    """A real subprocess run of the installed command on acrolein with a coarse grid."""
    out = tmp_path_factory.mktemp("acrolein")
    completed = subprocess.run(
        [sys.executable, "-m", "torsionscan.cli", "scan", "C=CC=O", "--name", "acrolein", "--step", "30",
         "--temperature", "253", "298.15", "353", "--conformers", "2", "--fit-for", "mmff94", "--out", str(out)],
        capture_output=True, text=True, timeout=300,
    )
    assert completed.returncode == 0, completed.stderr
    return out, completed.stdout


@xtb
def test_terminal_summary_is_readable(acrolein_run):
    _, stdout = acrolein_run
    assert "acrolein" in stdout and "s-cis" in stdout and "barrier" in stdout
    assert "Semi-empirical estimate" in stdout


@xtb
def test_summary_json_has_the_documented_fields(acrolein_run):
    out, _ = acrolein_run
    assert json.loads((out / "summary.json").read_text())["schema_version"] == SCHEMA_VERSION
    result = _summary(out)
    assert result.method == "GFN2-xTB" and result.caution.startswith("Semi-empirical estimate")
    bond = result.bonds[0]
    assert bond.dihedral_atoms == (0, 1, 2, 3) and bond.label == "2-3"
    assert bond.points and bond.profile.minima and bond.profile.barriers and bond.gradient_evaluations_total > 0
    populations = bond.profile.populations
    assert [p.temperature_k for p in populations] == [253, 298.15, 353]
    # s-trans acrolein is the global minimum (experiment and high-level theory agree; common knowledge)
    lowest = bond.profile.lowest_minimum()
    assert abs(lowest.angle_deg) > 170
    # populations: s-cis grows with temperature when s-trans is lower
    s_cis = [p.s_cis for p in populations]
    assert s_cis == sorted(s_cis)
    for p in populations:
        assert p.s_cis + p.s_trans == pytest.approx(1.0, abs=1e-9)


@xtb
def test_structures_table_and_plots_are_written(acrolein_run):
    out, _ = acrolein_run
    frames = (out / "bond_2-3_scan.xyz").read_text().splitlines()
    n_atoms = int(frames[0])
    assert len(frames) % (n_atoms + 2) == 0
    assert len(frames) // (n_atoms + 2) == 7  # 0..180 deg in 30 deg steps
    assert "dihedral=" in frames[1] and "kcal/mol" in frames[1]
    minima = [m for m in Chem.SDMolSupplier(str(out / "bond_2-3_minima.sdf"), removeHs=False)]
    assert minima and all(m is not None and m.HasProp("energy_rel_kcal_mol") for m in minima)
    rows = list(csv.DictReader((out / "bond_2-3_profile.csv").open()))
    assert len(rows) == 12  # full circle after mirroring
    for suffix in ("png", "svg"):
        assert (out / f"bond_2-3_profile.{suffix}").stat().st_size > 1000


@xtb
def test_fit_for_mmff94_adds_the_torsion_fit_and_its_files(acrolein_run):
    out, stdout = acrolein_run
    fit = _summary(out).bonds[0].torsion_fit
    assert fit.mm_model == "MMFF94 (RDKit)" and len(fit.terms) == 4
    assert "torsion terms vs MMFF94" in stdout and "RMSE vs quantum profile" in stdout
    for name in ("torsion_fit.json", "torsion_terms.csv", "torsion_openmm.xml", "torsion_fit.png"):
        assert (out / f"bond_2-3_{name}").stat().st_size > 100


def test_scan_command_with_the_model_engine(monkeypatch, tmp_path, capsys):
    """The scan command's plumbing (scan, write, print, fit) on the analytic model engine."""
    real_scan = torsionscan.driver.scan

    def model_scan(source, **options):
        molecule = load_molecule(source)
        bond = find_conjugated_bonds(molecule)[0]
        engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
        return real_scan(source, engine=engine, **options)

    monkeypatch.setattr(torsionscan.driver, "scan", model_scan)
    out = tmp_path / "diene"
    assert main(["scan", "C=CC=C", "--step", "30", "--conformers", "2", "--no-frequencies",
                 "--fit-for", "mmff94", "--out", str(out)]) == 0
    stdout = capsys.readouterr().out
    result = _summary(out)
    assert result.method == "model potential"
    assert f"— {result.method} via {result.engine}, gas phase" in stdout
    # the header's SMILES carries the atom numbers the dihedral lines use
    assert stdout.splitlines()[0].startswith(f"{result.name}  [CH2:1]=[CH:2][CH:3]=[CH2:4]  — ")
    assert "dihedral 1-2-3-4 (bond 2-3, conjugated; 0° = s-cis: C1=C2 syn to C3=C4, 180° = s-trans)" in stdout
    profile = result.bonds[0].profile
    assert f"  populations ({profile.population_model}):" in stdout
    assert stdout.index("  populations (") < stdout.index("  minima (kcal/mol)")
    assert result.caution in stdout and "Semi-empirical" not in stdout
    assert "torsion terms vs MMFF94" in stdout and result.bonds[0].torsion_fit is not None
    for ending in ("profile.csv", "scan.xyz", "minima.sdf", "profile.png", "profile.svg", "populations.png",
                   "torsion_fit.json", "structure.svg", "structure.png"):
        assert (out / f"bond_2-3_{ending}").is_file()
    assert (out / "structure.svg").is_file() and (out / "structure.png").is_file()


def test_bonds_command_lists_one_based_bonds(capsys):
    assert main(["bonds", "C=CC(=O)c1ccccc1"]) == 0
    text = capsys.readouterr().out
    assert "2 conjugated single bond(s)" in text and "bond     2-3" in text
    assert text.startswith("[CH2:1]=[CH:2][C:3](=[O:4])[c:5]1[cH:6][cH:7][cH:8][cH:9][cH:10]1:")
    assert "dihedral C1-C2-C3-O4   0° = s-cis: C1=C2 syn to C3=O4" in text


@pytest.mark.parametrize(
    "argv, code, words",
    [
        (["scan", "C=C(C"], 2, "SMILES"),
        (["scan", "nowhere.sdf"], 2, "file not found"),
        (["scan", "CCO"], 2, "--bond"),
        (["scan", "C1=CC=CC1", "--bond", "3-4"], 2, "ring"),
        (["scan", "C=CC=C", "--bond", "1-2"], 2, "not a single bond"),
        (["scan", "[CH2]/C=C/C=C"], 2, "unpaired"),
        (["scan", "C=CC=C[Fr]"], 2, ""),
        (["scan", "C=CC=C", "--step", "7"], 2, "divide 180"),
        (["scan", "C=CC=C", "--temperature", "nan"], 2, "temperature"),
        (["scan", "C=CC=C", "--scis-window", "120"], 2, "scis-window"),
        # a reference atom chosen by hand that is not bonded to its bond atom (hydrogen 5 is bonded to 1, not 2)
        (["scan", "C=CC=C", "--bond", "5-2-3-4"], 2, "bonded chain"),
        (["scan", "C=CC=C", "--temperature", "0"], 2, "from 1 to 5000 K"),
        (["scan", "C=CC=C", "--temperature", "-5"], 2, "from 1 to 5000 K"),
    ],
)
def test_bad_input_gives_one_line_and_exit_code(capsys, argv, code, words):
    assert main(argv) == code
    err = capsys.readouterr().err.strip()
    assert err.startswith("torsionscan: error:") and words in err
    assert len(err.splitlines()) == 1


def test_element_outside_the_method_is_refused(capsys):
    # Og (Z = 118) is outside GFN2-xTB's H-Rn parametrisation
    assert main(["scan", "C=CC=C[Og]"]) == 2
    assert "not covered" in capsys.readouterr().err


def test_error_from_a_real_subprocess_has_no_traceback():
    completed = subprocess.run(
        [sys.executable, "-m", "torsionscan.cli", "scan", "not-a-molecule"], capture_output=True, text=True
    )
    assert completed.returncode == 2
    assert "Traceback" not in completed.stderr and completed.stderr.count("\n") == 1


@xtb
def test_written_files_get_ordinary_permissions(acrolein_run):
    out, _ = acrolein_run
    # atomic writes go through a private temporary file; the result must still be readable by others
    assert (out / "summary.json").stat().st_mode & 0o777 == 0o666 & ~_umask()


def _umask():
    import os

    current = os.umask(0)
    os.umask(current)
    return current


def test_a_molecule_argument_that_is_smiles_and_a_file_is_ambiguous(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "C=CC=C").write_text("a file named like butadiene's SMILES\n")
    assert main(["bonds", "C=CC=C"]) == 2
    err = capsys.readouterr().err
    assert "ambiguous" in err and "--smiles 'C=CC=C' or --file 'C=CC=C'" in err and len(err.splitlines()) == 1
    assert main(["bonds", "--smiles", "C=CC=C"]) == 0  # explicit: the file is never looked at
    assert "[CH2:1]=[CH:2][CH:3]=[CH2:4]: 1 conjugated single bond(s)" in capsys.readouterr().out
    assert main(["bonds", "--file", "C=CC=C"]) == 2  # explicit: read as a file, which has no known type
    assert "unknown file type" in capsys.readouterr().err
    # unambiguous positionals keep working: a SMILES with no such file, a file that is no SMILES
    assert main(["bonds", "C=CC=O"]) == 0
    Chem.MolToMolFile(Chem.AddHs(Chem.MolFromSmiles("C=CC=O")), str(tmp_path / "acrolein.mol"))
    assert main(["bonds", "acrolein.mol"]) == 0
    assert main(["bonds", "--file", "acrolein.mol"]) == 0
    assert capsys.readouterr().out.count("1 conjugated single bond(s)") == 3


def test_scheduler_addresses_are_checked_by_form():
    from torsionscan.cli import _check_cluster_address
    from torsionscan.errors import InputError

    for address in ("tcp://scheduler-host:8786", "localhost:8786", "tls://10.0.0.1:8786", "tcp://[::1]:8786",
                    "inproc://10.0.0.1/123/1", None):
        _check_cluster_address(address)
    for address in ("not a url", "scheduler-host", "tcp://host", "http://host:8786", "tcp://host:0", ""):
        with pytest.raises(InputError, match="not a Dask scheduler address"):
            _check_cluster_address(address)
