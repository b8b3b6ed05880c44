"""Bad inputs of every command, table-driven: each must end in exactly one line on stderr naming the
problem, with the documented exit status (2 input, 3 calculation, 5 storage), before any GFN2-xTB work.

Rows run through torsionscan.cli.main in this process with the scan's start relaxation and the
batch workers replaced by a failure, so a row that would start computing fails the test; a few rows
run through a real subprocess. "{d}" in an argument is the folder of prepared bad files, which is also
the working directory (it holds a file named like the SMILES C=CC(C)=O, for the ambiguity rule).
"""

import json
import os
import subprocess
import sys
import time

import pytest

import torsionscan.batch
import torsionscan.driver
from torsionscan.cli import main
from torsionscan.engines.model import ModelEngine
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.output import write_results
from torsionscan.profile import FourierSeries
from torsionscan.settings import ScanSettings

LARGE = "C=CC=C" + "C" * 100  # 310 atoms with hydrogens
BINARY = bytes(range(256)) * 4
GOOD_SDF = """acrolein
     RDKit          3D

  4  3  0  0  0  0  0  0  0  0999 V2000
   -1.7000    0.3000    0.0000 C   0  0
   -0.5000   -0.3000    0.0000 C   0  0
    0.7000    0.4000    0.0000 C   0  0
    1.8000   -0.1000    0.0000 O   0  0
  1  2  2  0
  2  3  1  0
  3  4  2  0
M  END
$$$$
"""
NO_ATOMS_SDF = "empty record\n     RDKit          3D\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\nM  END\n$$$$\n"
OVERLAP_XYZ = "3\nwater with two atoms in one place\nO 0.0 0.0 0.0\nH 0.0 0.0 0.0\nH 0.0 0.757 0.587\n"

ROWS = [
    # -- scan: the molecule --------------------------------------------------------------------
    ("smiles-unparsable", ["scan", "C=C(C"], 2, "as SMILES"),
    ("smiles-garbage", ["scan", "not-a-molecule"], 2, "as SMILES"),
    ("smiles-empty", ["scan", ""], 2, "no molecule given"),
    ("no-molecule", ["scan"], 2, "molecule"),
    ("smiles-two-fragments", ["scan", "C=CC=C.O"], 2, "separate molecules"),
    ("smiles-no-conjugated-bond", ["scan", "CCO"], 2, "no conjugated single bond"),
    ("file-missing", ["scan", "{d}/nowhere.sdf"], 2, "not found"),
    ("file-option-missing", ["scan", "--file", "{d}/nowhere.xyz"], 2, "not found"),
    ("file-is-directory", ["scan", "{d}/folder.sdf"], 2, "is a directory"),
    ("file-unknown-type", ["scan", "{d}/mol.pdb"], 2, "unknown file type"),
    ("sdf-empty", ["scan", "{d}/empty.sdf"], 2, "is empty"),
    ("sdf-binary", ["scan", "{d}/binary.sdf"], 2, "{d}/binary.sdf"),
    ("sdf-no-atoms", ["scan", "{d}/noatoms.sdf"], 2, "holds no atoms"),
    ("sdf-record-zero", ["scan", "{d}/good.sdf", "--record", "0"], 2, "counts from 1"),
    ("sdf-record-beyond", ["scan", "{d}/good.sdf", "--record", "3"], 2, "has 1 record"),
    ("xyz-junk", ["scan", "{d}/junk.xyz"], 2, "not a readable XYZ file"),
    ("xyz-empty", ["scan", "{d}/empty.xyz"], 2, "is empty"),
    ("xyz-superposed-atoms", ["scan", "{d}/overlap.xyz"], 2, "atoms 1 (O) and 2 (H) coincide"),
    ("ambiguous-smiles-and-file", ["scan", "C=CC(C)=O"], 2, "ambiguous"),
    ("smiles-option-unparsable", ["scan", "--smiles", "C=C(C"], 2, "as SMILES"),
    ("smiles-option-and-positional", ["scan", "C=CC=O", "--smiles", "C=CC=O"], 2, "only one of"),
    ("smiles-and-file-options", ["scan", "--smiles", "C=CC=O", "--file", "{d}/good.sdf"], 2, "only one of"),
    ("too-many-atoms", ["scan", LARGE], 2, "300"),
    ("element-not-covered", ["scan", "C=CC=C[Og]"], 2, "not covered"),
    ("odd-electrons", ["scan", "C=CC=C", "--charge", "1"], 2, "unpaired"),
    ("negative-unpaired", ["scan", "C=CC=C", "--unpaired-electrons", "-1"], 2, "unpaired"),
    ("charge-not-integer", ["scan", "C=CC=C", "--charge", "1.5"], 2, "--charge"),
    # -- scan: the bond --------------------------------------------------------------------------
    ("bond-repeated-atom", ["scan", "C=CC=O", "--bond", "3-2-3-4"], 2, "more than once"),
    ("bond-same-atom-twice", ["scan", "C=CC=O", "--bond", "2-2"], 2, "more than once"),
    ("bond-out-of-range", ["scan", "C=CC=O", "--bond", "2-9"], 2, "between 1 and 8"),
    ("bond-not-numbers", ["scan", "C=CC=O", "--bond", "a-b"], 2, "two or four"),
    ("bond-three-numbers", ["scan", "C=CC=O", "--bond", "1-2-3"], 2, "two or four"),
    ("bond-empty", ["scan", "C=CC=O", "--bond", ""], 2, "--bond"),
    ("bond-not-bonded", ["scan", "C=CC=O", "--bond", "1-3"], 2, "not bonded"),
    ("bond-in-ring", ["scan", "C1=CC=CC1", "--bond", "3-4"], 2, "ring"),
    ("bond-double", ["scan", "C=CC=C", "--bond", "1-2"], 2, "not a single bond"),
    ("bond-chain-broken", ["scan", "C=CC=C", "--bond", "5-2-3-4"], 2, "bonded chain"),
    ("bond-through-sp-atom", ["scan", "C#CC=C", "--bond", "2-3"], 2, "linear"),
    ("bond-to-nitrile-carbon", ["scan", "C=CC#N", "--bond", "2-3"], 2, "linear"),
    ("bond-to-hydrogen", ["scan", "C=CC=C", "--bond", "1-5"], 2, "terminal"),
    # -- scan: settings --------------------------------------------------------------------------
    ("step-not-dividing", ["scan", "C=CC=O", "--step", "7"], 2, "divide 180"),
    ("step-zero", ["scan", "C=CC=O", "--step", "0"], 2, "--step"),
    ("step-negative", ["scan", "C=CC=O", "--step", "-15"], 2, "--step"),
    ("step-not-a-number", ["scan", "C=CC=O", "--step", "abc"], 2, "--step"),
    ("temperature-huge", ["scan", "C=CC=O", "--temperature", "1e9"], 2, "5000"),
    ("temperature-zero", ["scan", "C=CC=O", "--temperature", "0"], 2, "--temperature"),
    ("temperature-below-1K", ["scan", "C=CC=O", "--temperature", "0.5"], 2, "--temperature"),
    ("temperature-nan", ["scan", "C=CC=O", "--temperature", "nan"], 2, "--temperature"),
    ("temperature-inf", ["scan", "C=CC=O", "--temperature", "inf"], 2, "--temperature"),
    ("temperature-range-reversed", ["scan", "C=CC=O", "--temperature-range", "400", "200"], 2, "TMIN < TMAX"),
    ("temperature-range-huge", ["scan", "C=CC=O", "--temperature-range", "100", "1e9"], 2, "5000"),
    ("scis-window-wide", ["scan", "C=CC=O", "--scis-window", "120"], 2, "--scis-window"),
    ("scis-window-zero", ["scan", "C=CC=O", "--scis-window", "0"], 2, "--scis-window"),
    ("conformers-zero", ["scan", "C=CC=O", "--conformers", "0"], 2, "--conformers"),
    ("conformers-million", ["scan", "C=CC=O", "--conformers", "1000000"], 2, "200"),
    ("seed-huge", ["scan", "C=CC=O", "--seed", "99999999999"], 2, "--seed"),
    ("seed-negative", ["scan", "C=CC=O", "--seed", "-1"], 2, "--seed"),
    ("solvent-empty", ["scan", "C=CC=O", "--solvent", ""], 2, "--solvent"),
    ("solvent-unknown", ["scan", "C=CC=O", "--solvent", "lava"], 2, "lava"),
    ("solvent-without-gbsa", ["scan", "C=CC=O", "--solvent", "furan", "--solvation-model", "gbsa"], 2, "furan"),
    ("method-unknown", ["scan", "C=CC=O", "--method", "HF"], 2, "--method"),
    ("engine-unknown", ["scan", "C=CC=O", "--engine", "gaussian"], 2, "--engine"),
    ("option-unknown", ["scan", "C=CC=O", "--frobnicate"], 2, "--frobnicate"),
    ("out-is-a-file", ["scan", "C=CC=O", "--out", "{d}/a-file"], 2, "is a file"),
    ("out-read-only", ["scan", "C=CC=O", "--out", "/sys/torsionscan-out"], 5, "/sys/torsionscan-out"),
    ("reference-without-refine", ["scan", "C=CC=O", "--reference", "coupled-cluster"], 2, "needs --refine"),
    ("rescore-level-unknown", ["scan", "C=CC=O", "--rescore", "wizardry"], 2, "wizardry"),
    ("refine-in-solvent", ["scan", "C=CC=O", "--refine", "cheap", "--solvent", "water"], 2, "gas phase only"),
    ("refine-processes-zero", ["scan", "C=CC=O", "--refine", "cheap", "--processes", "0"], 2, "--processes"),
    ("dft-threads-zero", ["scan", "C=CC=O", "--rescore", "cheap", "--dft-threads", "0"], 2, "--dft-threads"),
    ("fit-periodicities", ["scan", "C=CC=O", "--fit-for", "mmff94", "--periodicities", "9"], 2, "periodicit"),
    # -- bonds -----------------------------------------------------------------------------------
    ("bonds-unparsable", ["bonds", "C=C(C"], 2, "as SMILES"),
    ("bonds-ambiguous", ["bonds", "C=CC(C)=O"], 2, "ambiguous"),
    ("bonds-empty-sdf", ["bonds", "{d}/empty.sdf"], 2, "is empty"),
    # -- result folders: fit, rescore, refine ------------------------------------------------------
    ("fit-folder-missing", ["fit", "{d}/no-folder"], 2, "no summary.json"),
    ("fit-summary-empty-object", ["fit", "{d}/empty-object"], 2, "schema_version"),
    ("fit-summary-not-json", ["fit", "{d}/not-json"], 2, "not JSON"),
    ("fit-summary-binary", ["fit", "{d}/binary-json"], 2, "summary.json"),
    ("fit-summary-list", ["fit", "{d}/list-json"], 2, "schema_version"),
    ("fit-summary-old-schema", ["fit", "{d}/old-schema"], 2, "schema version 1"),
    ("fit-summary-damaged", ["fit", "{d}/damaged"], 2, "damaged"),
    ("fit-summary-wrong-types", ["fit", "{d}/wrong-types"], 2, "damaged"),
    ("fit-summary-wrong-number", ["rescore", "{d}/wrong-number", "--level", "cheap"], 2, "damaged"),
    ("fit-bond-not-scanned", ["fit", "{d}/result", "--bond", "1-2"], 2, "1-2"),
    ("fit-mm-binary", ["fit", "{d}/result", "--mm-energies", "{d}/binary.csv"], 2, "UTF-8"),
    ("fit-mm-missing", ["fit", "{d}/result", "--mm-energies", "{d}/missing.csv"], 2, "missing.csv"),
    ("fit-mm-no-energy-column", ["fit", "{d}/result", "--mm-energies", "{d}/no-column.csv"], 2, "energy_kcal_mol"),
    ("fit-mm-too-few-rows", ["fit", "{d}/result", "--mm-energies", "{d}/short.csv"], 2, "frames"),
    ("fit-mm-not-a-number", ["fit", "{d}/result", "--mm-energies", "{d}/text.csv"], 2, "not a number"),
    ("fit-mm-is-directory", ["fit", "{d}/result", "--mm-energies", "{d}/folder.sdf"], 2, "directory"),
    ("fit-weight-temperature", ["fit", "{d}/result", "--weight-temperature", "-5"], 2, "weight"),
    ("rescore-folder-missing", ["rescore", "{d}/no-folder", "--level", "cheap"], 2, "no summary.json"),
    ("rescore-level-bad", ["rescore", "{d}/result", "--level", "b3lyp/nobasis"], 2, "nobasis"),
    ("refine-folder-missing", ["refine", "{d}/no-folder", "--level", "cheap"], 2, "no summary.json"),
    ("refine-processes-bad", ["refine", "{d}/result", "--level", "cheap", "--processes", "0"], 2, "--processes"),
    # -- batch, demo, report -----------------------------------------------------------------------
    ("list-missing", ["batch", "{d}/missing.csv"], 2, "not found"),
    ("list-is-directory", ["batch", "{d}/folder.csv"], 2, "not a file"),
    ("list-suffix", ["batch", "{d}/list.xlsx"], 2, "unsupported suffix"),
    ("list-empty", ["batch", "{d}/empty.csv"], 2, "no compounds"),
    ("list-no-smiles-column", ["batch", "{d}/no-smiles.csv"], 2, "no 'smiles' column"),
    ("list-binary-csv", ["batch", "{d}/binary.csv"], 2, "UTF-8"),
    ("list-binary-sdf", ["batch", "{d}/binary.sdf"], 2, "binary.sdf"),
    ("batch-cluster-not-url", ["batch", "{d}/ok.csv", "--cluster", "not a url"], 2, "--cluster"),
    ("batch-cluster-bad-port", ["batch", "{d}/ok.csv", "--cluster", "tcp://host:port"], 2, "--cluster"),
    ("batch-cluster-no-port", ["batch", "{d}/ok.csv", "--cluster", "scheduler-host"], 2, "scheme://host:port"),
    ("batch-cluster-port-too-big", ["batch", "{d}/ok.csv", "--cluster", "tcp://[::1]:70000"], 2, "--cluster"),
    ("batch-out-is-a-file", ["batch", "{d}/ok.csv", "--out", "{d}/a-file"], 2, "is a file"),
    ("batch-out-read-only", ["batch", "{d}/ok.csv", "--out", "/sys/torsionscan-run"], 5, "/sys/torsionscan-run"),
    ("batch-workers-zero", ["batch", "{d}/ok.csv", "--workers", "0"], 2, "--workers"),
    ("batch-threads-zero", ["batch", "{d}/ok.csv", "--threads-per-worker", "0"], 2, "--threads-per-worker"),
    ("batch-timeout-negative", ["batch", "{d}/ok.csv", "--timeout-per-compound", "-1"], 2, "--timeout"),
    ("batch-seed-huge", ["batch", "{d}/ok.csv", "--seed", "4294967296"], 2, "--seed"),
    ("batch-rescore-unknown", ["batch", "{d}/ok.csv", "--rescore", "wizardry"], 2, "wizardry"),
    ("demo-list-missing", ["demo", "{d}/missing.csv"], 2, "not found"),
    ("report-folder-missing", ["report", "{d}/no-folder"], 2, "no-folder"),
    ("command-unknown", ["frobnicate"], 2, "frobnicate"),
    ("command-missing", [], 2, "command"),
]


def _mm_table(values):
    return "frame,energy_kcal_mol\n" + "".join(f"{n},{v}\n" for n, v in enumerate(values, start=1))


@pytest.fixture(scope="module")
def bad_files(tmp_path_factory):
    """The folder of bad (and a few good) files the rows name; a model-engine result folder in it."""
    d = tmp_path_factory.mktemp("bad")
    (d / "folder.sdf").mkdir()
    (d / "folder.csv").mkdir()
    (d / "mol.pdb").write_text("ATOM      1  C   UNK     1       0.000   0.000   0.000\n")
    (d / "empty.sdf").write_text("")
    (d / "binary.sdf").write_bytes(BINARY)
    (d / "noatoms.sdf").write_text(NO_ATOMS_SDF)
    (d / "good.sdf").write_text(GOOD_SDF)
    (d / "junk.xyz").write_text("this is not\nan xyz file\n")
    (d / "empty.xyz").write_text("")
    (d / "overlap.xyz").write_text(OVERLAP_XYZ)
    (d / "C=CC(C)=O").write_text("a file named like a SMILES\n")
    (d / "a-file").write_text("not a folder\n")
    for name, content in (("empty-object", "{}"), ("not-json", "no json here"), ("list-json", "[1, 2]"),
                          ("old-schema", '{"schema_version": 1}'),
                          ("damaged", '{"schema_version": 2, "name": "x"}')):
        (d / name).mkdir()
        (d / name / "summary.json").write_text(content)
    (d / "binary-json").mkdir()
    (d / "binary-json" / "summary.json").write_bytes(BINARY)
    (d / "list.xlsx").write_text("smiles\nC=C\n")
    (d / "empty.csv").write_text("name,smiles\n")
    (d / "no-smiles.csv").write_text("name,structure\nacrolein,C=CC=O\n")
    (d / "binary.csv").write_bytes(BINARY)
    (d / "ok.csv").write_text("name,smiles\nacrolein,C=CC=O\n")
    (d / "no-column.csv").write_text("frame,energy\n1,0.0\n")

    molecule = load_molecule("C=CC=O")
    bond = find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    result = torsionscan.driver.scan("C=CC=O", name="model-acrolein", engine=engine,
                                     settings=ScanSettings(step_deg=60.0, conformers=1, frequencies=False))
    write_results(result, d / "result")
    frames = len(result.bonds[0].relaxed_points)
    (d / "short.csv").write_text(_mm_table([0.0] * (frames - 1)))
    (d / "text.csv").write_text(_mm_table(["abc"] + [0.0] * (frames - 1)))
    # a summary of the right schema whose fields have the wrong types
    plain = json.loads((d / "result" / "summary.json").read_text())
    plain["bonds"] = "none"
    (d / "wrong-types").mkdir()
    (d / "wrong-types" / "summary.json").write_text(json.dumps(plain))
    plain = json.loads((d / "result" / "summary.json").read_text())
    plain["settings"]["step_deg"] = [60]  # a list where a number belongs
    (d / "wrong-number").mkdir()
    (d / "wrong-number" / "summary.json").write_text(json.dumps(plain))
    return d


@pytest.fixture
def no_computation(monkeypatch, bad_files):
    """Work in the bad-files folder; starting a scan's relaxation or a batch's workers fails the row."""

    def refuse(*args, **kwargs):
        raise AssertionError("computation started: the bad input was not refused first")

    monkeypatch.setattr(torsionscan.driver, "relax_start", refuse)
    monkeypatch.setattr(torsionscan.batch, "_local_outcomes", refuse)
    monkeypatch.setattr(torsionscan.batch, "_cluster_outcomes", refuse)
    monkeypatch.chdir(bad_files)
    return bad_files


def _error_lines(err):
    """The lines of stderr that are not the logger's warnings."""
    return [line for line in err.splitlines() if line.strip() and not line.startswith("torsionscan: WARNING:")]


def test_the_table_is_large_and_its_rows_distinct():
    assert len(ROWS) >= 60
    assert len({row[0] for row in ROWS}) == len(ROWS)
    assert len({tuple(row[1]) for row in ROWS}) == len(ROWS)


@pytest.mark.parametrize("argv, code, phrase", [row[1:] for row in ROWS], ids=[row[0] for row in ROWS])
def test_bad_input_is_refused_in_one_line(no_computation, capsys, argv, code, phrase):
    d = str(no_computation)
    if "/sys/" in " ".join(argv) and os.access("/sys", os.W_OK) and not os.path.ismount("/sys"):
        pytest.skip("/sys is writable here")
    started = time.perf_counter()
    status = main([a.replace("{d}", d) for a in argv])
    elapsed = time.perf_counter() - started
    err = capsys.readouterr().err
    lines = _error_lines(err)
    assert status == code, err
    assert len(lines) == 1, err
    assert lines[0].startswith("torsionscan: error: "), err
    assert phrase.replace("{d}", d) in lines[0], err
    assert "Traceback" not in err and "internal error" not in err
    assert elapsed < 10.0


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads files whatever their permissions")
@pytest.mark.parametrize("argv", [["batch", "{d}/locked.csv"], ["scan", "{d}/locked.sdf"]])
def test_unreadable_files_are_refused_in_one_line(no_computation, capsys, argv):
    d = no_computation
    for name in ("locked.csv", "locked.sdf"):
        (d / name).write_text(GOOD_SDF if name.endswith(".sdf") else "name,smiles\nx,C=CC=O\n")
        (d / name).chmod(0)
    assert main([a.replace("{d}", str(d)) for a in argv]) == 2
    lines = _error_lines(capsys.readouterr().err)
    assert len(lines) == 1 and "permission" in lines[0].lower()


SUBPROCESS_ROWS = ["bond-repeated-atom", "seed-huge", "fit-summary-not-json", "list-binary-csv",
                   "step-not-a-number"]


@pytest.mark.parametrize("name", SUBPROCESS_ROWS)
def test_bad_input_in_a_real_process_has_no_traceback(bad_files, name):
    _, argv, code, phrase = next(row for row in ROWS if row[0] == name)
    d = str(bad_files)
    completed = subprocess.run([sys.executable, "-m", "torsionscan.cli", *[a.replace("{d}", d) for a in argv]],
                               capture_output=True, text=True, timeout=60, cwd=d)
    assert completed.returncode == code, completed.stderr
    lines = _error_lines(completed.stderr)
    assert len(lines) == 1 and lines[0].startswith("torsionscan: error: ") and phrase in lines[0], completed.stderr
    assert "Traceback" not in completed.stderr


# -- what the checks let through, and user text that reaches the outputs -------------------------------

def test_allow_large_passes_the_size_limit_with_a_time_warning(no_computation, capsys, caplog, monkeypatch):
    from torsionscan.errors import CalculationError

    def stop(*args, **kwargs):
        raise CalculationError("stopped before the start structures (test)")

    monkeypatch.setattr(torsionscan.driver, "relax_start", stop)
    assert main(["scan", LARGE, "--allow-large", "--no-frequencies", "--out", str(no_computation / "large")]) == 3
    assert "stopped before the start structures" in capsys.readouterr().err
    assert any(r.getMessage().startswith("310 atoms: expect about") for r in caplog.records)


def test_csv_text_cells_that_look_like_formulas_are_written_as_text(bad_files, tmp_path):
    import csv
    import dataclasses

    from torsionscan.output.report import compound_rows, table_columns, write_table_csv
    from torsionscan.output.summary import read_summary_file, spreadsheet_cell, write_profile_table

    formula = '=HYPERLINK("http://x","y")'
    for text in (formula, "+cmd", "-2+3", "@SUM(A1:A9)", "\t=1"):
        assert spreadsheet_cell(text) == "'" + text
    for value in (-1.23, "-1.23", "+4", "-.5e-3", 0, None, True, "plain", "a=b"):
        assert spreadsheet_cell(value) == value

    result = read_summary_file(bad_files / "result" / "summary.json")
    record = {"name": formula, "smiles": "C=CC=O", "status": "done", "reason": "", "wall_time_s": -1.23,
              "extra": {"supplier": "@evil", "charge_note": "-1"}}
    rows = compound_rows(record, result)
    columns = table_columns(result.settings.temperatures_k, ["supplier", "=header"])
    path = tmp_path / "scan_table.csv"
    with path.open("w", newline="") as handle:
        write_table_csv(handle, columns, rows)
    with path.open(newline="") as handle:
        (header, *body) = list(csv.reader(handle))
    assert header[-1] == "'=header"
    cells = dict(zip(header, body[0]))
    assert cells["name"] == "'" + formula and cells["supplier"] == "'@evil"
    assert cells["compound_wall_time_s"] == "-1.23"  # a negative number stays a number
    assert float(cells["global_min_deg"]) == rows[0]["global_min_deg"]
    assert rows[0]["name"] == formula  # the rows themselves (for the HTML report) keep the text
    # rows without formula-like text come out exactly as csv.DictWriter writes them
    plain_rows = compound_rows({**record, "name": "acrolein", "extra": {"supplier": "S-1"}}, result)
    plain_columns = table_columns(result.settings.temperatures_k, ["supplier"])
    with (tmp_path / "mine.csv").open("w", newline="") as handle:
        write_table_csv(handle, plain_columns, plain_rows)
    with (tmp_path / "dict.csv").open("w", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=plain_columns, extrasaction="ignore")
        writer.writeheader()
        writer.writerows(plain_rows)
    assert (tmp_path / "mine.csv").read_text() == (tmp_path / "dict.csv").read_text()

    bond = result.bonds[0]
    points = list(bond.points)
    points[0] = dataclasses.replace(points[0], failure="=1+1 failed")
    write_profile_table(dataclasses.replace(bond, points=tuple(points)), tmp_path / "profile.csv")
    with (tmp_path / "profile.csv").open(newline="") as handle:
        table = list(csv.DictReader(handle))
    assert table[0]["failure"] == "'=1+1 failed"
    angles = [float(row["angle_deg"]) for row in table]  # negative angles stay numbers
    assert min(angles) < 0 and all(float(row["energy_rel_kcal_mol"]) >= 0 for row in table)


def test_the_html_report_escapes_a_formula_or_markup_name():
    import html as html_module

    from torsionscan.output.html import html_report

    name = '=HYPERLINK("http://x","y")<script>alert(1)</script>'
    rows = [{"name": name, "bond": "2-3", "status": "failed", "reason": "<b>bad</b>"}]
    page = html_report(title="t", run_info={}, settings={}, caution="c", columns=["name", "bond", "status", "reason"],
                       rows=rows, plots={})
    assert "<script>alert(1)</script>" not in page and "<b>bad</b>" not in page
    assert html_module.escape(name, quote=True) in page
    assert "'=HYPERLINK" not in page  # the apostrophe is for spreadsheets only
