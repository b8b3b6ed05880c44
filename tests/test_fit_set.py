"""Torsion types across molecules (fit-set): typing, the joint fit recovering known terms through the
whole path from a run database to the parameter files, the leave-one-molecule-out check against
an independent per-bond fit, the re-scored and refined profiles, and one-line refusals. All on
model-potential frames with pseudo-quantum profiles (MMFF94 without torsions + known terms)."""

import csv
import json

import numpy as np
import pytest

from fitset_helpers import DIENES, ENONE, OTHER_TRUTH, TRUTH, model_scan, with_truth, write_run
from torsionscan.cli import main
from torsionscan.errors import InputError
from torsionscan.forcefield import bond_residual, fit_torsion
from torsionscan.records import FitOptions, TorsionParameterSet, from_plain
from torsionscan.torsionfit import fit_joint_terms, fit_terms, profile_errors, term_energy
from torsionscan.output.parameters import write_parameter_set
from torsionscan.torsiontypes import (fit_parameter_set, mmff94_class, mmff94_type, parameter_quartets, parse_pattern,
                                      pattern_type, transfer_verdict)


@pytest.fixture(scope="module")
def scans():
    """Model-potential scans of three dienes (type 2-2-2-2) and acrolein (2-2-3-7), by name."""
    return {name: model_scan(name, smiles) for name, smiles in {**DIENES, **ENONE}.items()}


@pytest.fixture(scope="module")
def truth_run(scans, tmp_path_factory):
    """A run whose dienes follow TRUTH and acrolein OTHER_TRUTH."""
    results = [with_truth(scans[n], TRUTH) for n in DIENES] + [with_truth(scans["acrolein"], OTHER_TRUTH)]
    return write_run(tmp_path_factory.mktemp("truth") / "run", results), results


def _terms(terms):
    return {t.periodicity: (t.phase_deg, t.k_kcal_mol) for t in terms}


def _difference(terms_a, terms_b):
    """Largest difference of the signed force constants k cos(phase) of two term sets, kcal/mol."""
    signed = [{t.periodicity: t.k_kcal_mol * np.cos(np.radians(t.phase_deg)) for t in terms} for terms in (terms_a, terms_b)]
    return max(abs(signed[0].get(n, 0.0) - signed[1].get(n, 0.0)) for n in set(signed[0]) | set(signed[1]))


def _check_truth(terms, truth, tolerance=1e-3):
    found = _terms(terms)
    for term in truth:
        assert found[term.periodicity][0] == term.phase_deg
        assert found[term.periodicity][1] == pytest.approx(term.k_kcal_mol, abs=tolerance)
    assert found[4][1] == pytest.approx(0.0, abs=tolerance)


def _one_line(captured):
    lines = [line for line in captured.err.splitlines() if line.strip()]
    assert len(lines) == 1, captured.err
    assert "Traceback" not in captured.err
    return lines[0]


# -- pure parts -----------------------------------------------------------------------------------
def test_joint_fit_recovers_shared_terms_with_own_offsets():
    rng = np.random.default_rng(3)
    angles = [np.arange(-180.0, 180.0, step) + rng.uniform(-3, 3) for step in (15.0, 30.0, 20.0)]
    offsets = (4.0, -7.5, 0.3)
    targets = [c + term_energy(TRUTH, a) for c, a in zip(offsets, angles)]
    fit = fit_joint_terms(angles, targets, 4)
    _check_truth(fit.terms, TRUTH, 1e-4)
    assert fit.constants_kcal_mol == pytest.approx(offsets, abs=1e-3)
    assert max(fit.rmse_kcal_mol) < 1e-4
    # one profile: the joint fit is the per-profile fit
    single = fit_terms(angles[0], targets[0])
    assert single.terms == fit_joint_terms(angles[:1], targets[:1]).terms


@pytest.mark.parametrize("free_phases", [False, True])
def test_zeroed_terms_have_phase_0_whatever_the_sign_left_by_rounding(free_phases):
    """A coefficient of -1e-13 kcal/mol (rounding noise) is written as k = 0 with phase 0, not phase 180."""
    angles = np.arange(-180.0, 180.0, 15.0)
    target = term_energy(TRUTH, angles) - 1e-13 * np.cos(np.radians(4 * angles))
    fit = fit_joint_terms([angles], [target], 4, free_phases)
    (fourth,) = [t for t in fit.terms if t.periodicity == 4]
    assert (fourth.k_kcal_mol, fourth.phase_deg) == (0.0, 0.0)
    assert {t.phase_deg for t in fit.terms if t.periodicity == 2} == {180.0}  # a real negative term keeps 180


def test_mmff94_types_are_symmetric_under_reversal_and_named_in_two_characters():
    assert mmff94_type((2, 2, 3, 7))[:3] == mmff94_type((7, 3, 2, 2))[:3] == (
        "2-2-3-7", ("A2", "A2", "A3", "A7"), "MMFF94 atom types 2-2-3-7")
    assert mmff94_type((7, 3, 2, 2))[3] is True and mmff94_type((2, 2, 3, 7))[3] is False
    assert [mmff94_class(t) for t in (1, 9, 10, 37, 99)] == ["A1", "A9", "B0", "D7", "J9"]


def test_smarts_pattern_matches_the_dihedral_in_either_direction(scans):
    result = scans["acrolein"]  # C=C-C=O, dihedral 0-1-2-3
    forward = parse_pattern("enone", "[C:1]=[C:2]-[C:3]=[O:4]")
    backward = parse_pattern("enone-reversed", "[O:1]=[C:2]-[C:3]=[C:4]", "o2 c2 c2 c1", row_number=2)
    diene = parse_pattern("diene", "[C:1]=[C:2]-[C:3]=[C:4]", row_number=3)
    atoms = result.bonds[0].dihedral_atoms
    assert pattern_type([diene, forward], result.mol, atoms) == (forward, False)
    assert pattern_type([backward, forward], result.mol, atoms) == (backward, True)  # first match wins
    assert pattern_type([diene], result.mol, atoms) is None
    assert forward.classes == ("A1", "A2", "A3", "A4") and diene.classes == ("C1", "C2", "C3", "C4")
    assert backward.classes == ("o2", "c2", "c2", "c1")


@pytest.mark.parametrize("smarts, phrase", [
    ("[C:1]=[C:2]-[C:3]=[", "does not parse"),
    ("[C:1]=[C:2]-[C:3]=O", "maps atoms :1, :2, :3"),
    ("[C:1]=[C:2]-[C:3]=[O:3]", "maps atoms"),
    ("[C:1]=[C:2].[C:3]=[O:4]", "not bonded"),
    ("[C:1]=[C:3]-[C:2]=[O:4]", "not bonded"),
])
def test_bad_patterns_are_refused_in_one_line(smarts, phrase):
    with pytest.raises(InputError, match=phrase):
        parse_pattern("bad", smarts)


def test_transfer_verdict_thresholds():
    assert transfer_verdict(0.1, None, 1)[0] is None
    assert transfer_verdict(0.3, 0.55, 3)[0] is False  # above 0.5 kcal/mol
    assert transfer_verdict(0.1, 0.30, 3)[0] is False  # more than twice the training error
    assert transfer_verdict(0.1, 0.24, 3)[0] is True  # within twice plus the noise allowance
    assert transfer_verdict(1e-6, 1e-5, 3)[0] is True  # noise, not a failure to transfer


# -- whole path -----------------------------------------------------------------------------------
def test_known_terms_recovered_through_the_whole_path(truth_run, tmp_path, capsys, caplog):
    run, results = truth_run
    out = tmp_path / "params"
    assert main(["fit-set", str(run), "--out", str(out)]) == 0
    captured = capsys.readouterr()
    assert not captured.err.strip()
    (warning,) = [r.getMessage() for r in caplog.records]  # acrolein alone in its type: said once, still fitted
    assert "one molecule" in warning and "2-2-3-7" in warning
    assert "2-2-2-2" in captured.out and "transfers" in captured.out
    record = from_plain(TorsionParameterSet, json.loads((out / "torsion_parameters.json").read_text()))
    types = {t.label: t for t in record.types}
    assert set(types) == {"2-2-2-2", "2-2-3-7"}
    diene, enone = types["2-2-2-2"], types["2-2-3-7"]
    assert diene.molecule_count == 3 and len(diene.members) == 4  # hexatriene brings two bonds
    _check_truth(diene.terms, TRUTH)
    _check_truth(enone.terms, OTHER_TRUTH)
    assert diene.rmse_fit_kcal_mol < 1e-3 and diene.rmse_leave_out_kcal_mol < 1e-3 and diene.transferable is True
    assert enone.rmse_leave_out_kcal_mol is None and enone.transferable is None
    assert diene.rmse_mm_kcal_mol > 0.1  # MMFF94 as it is does not know these terms
    assert diene.classes == ("A2",) * 4 and enone.classes == ("A2", "A2", "A3", "A7")
    # every member's dihedral in the order of its type's classes, with its own offset
    by_bond = {(m.compound, m.bond): m for m in diene.members}
    assert set(by_bond) == {("butadiene", "2-3"), ("isoprene", "2-3"), ("hexatriene", "2-3"), ("hexatriene", "4-5")}
    # tables: one row per type and per bond, values equal to the record
    with (out / "torsion_types.csv").open() as handle:
        rows = {r["type"]: r for r in csv.DictReader(handle)}
    assert float(rows["2-2-2-2"]["k2_kcal_mol"]) == round(_terms(diene.terms)[2][1], 6)
    assert rows["2-2-3-7"]["transferable"] == "" and rows["2-2-2-2"]["transferable"] == "yes"
    with (out / "torsion_members.csv").open() as handle:
        members = list(csv.DictReader(handle))
    assert len(members) == 5 and all(not r["left_out_reason"] for r in members)
    # the command passes each member's quartets about its bond to the writers (hexatriene's central
    # C=C also carries the 2-2-2-2 classes, and the files say so)
    assert all(r["class_quartets"] for r in members)
    assert any(r["also_matches_bonds"] for r in members if r["compound"] == "hexatriene")
    for name in ("torsions.frcmod", "torsions_gromacs.itp", "torsions_charmm.prm", "torsions_openmm.xml",
                 "type_2-2-2-2.png", "type_2-2-3-7.png", "member_forces/hexatriene_bond_4-5_openmm.xml"):
        assert (out / name).stat().st_size > 200, name


def test_leave_one_out_equals_a_fit_without_the_molecule(scans):
    """Two molecules of one type with different terms: each one's leave-one-out error is its error under
    the per-bond fit of the other (forcefield.fit_torsion), and the type is flagged."""
    a, b = with_truth(scans["butadiene"], TRUTH), with_truth(scans["isoprene"], OTHER_TRUTH)
    parameters = fit_parameter_set([("butadiene", a), ("isoprene", b)])
    (fit,) = parameters.types
    members = {m.compound: m for m in fit.members}
    for this, other in ((a, b), (b, a)):
        terms = fit_torsion(other, other.bonds[0]).terms
        residual = bond_residual(this, this.bonds[0])
        expected = profile_errors(residual.qm_kcal_mol, residual.mm_without_kcal_mol + term_energy(terms, residual.angles_deg))[0]
        assert members[this.name].rmse_leave_out_kcal_mol == pytest.approx(expected, abs=1e-9)
    assert fit.rmse_leave_out_kcal_mol > max(0.5, fit.rmse_fit_kcal_mol)
    assert fit.transferable is False and "not transferable" in fit.verdict


def test_boltzmann_weights_change_the_joint_fit(scans):
    a, b = with_truth(scans["butadiene"], TRUTH), with_truth(scans["isoprene"], OTHER_TRUTH)
    plain = fit_parameter_set([("butadiene", a), ("isoprene", b)]).types[0].terms
    weighted = fit_parameter_set([("butadiene", a), ("isoprene", b)], options=FitOptions(weight_temperature_k=300.0))
    assert _difference(weighted.types[0].terms, plain) > 1e-2


@pytest.mark.parametrize("where, quantum", [("rescored", "rescored"), ("refined", "refined")])
def test_rescored_and_refined_profiles(scans, where, quantum):
    results = [(n, with_truth(scans[n], TRUTH, where=where)) for n in DIENES]
    parameters = fit_parameter_set(results, quantum=quantum)
    (fit,) = parameters.types
    _check_truth(fit.terms, TRUTH)
    assert {m.quantum_profile for m in fit.members} == {f"synthetic {'level' if where == 'rescored' else 'refined'}"}
    # the scan's own profile (the model potential) is something else entirely
    assert _difference(fit_parameter_set(results, quantum="gfn").types[0].terms, fit.terms) > 0.1


def test_refined_profile_uses_mm_energies_at_the_refined_structures(scans):
    """The refined structures are the scan's scaled by 1.01: MMFF94 at the scan's structures would
    leave a stretch-energy difference in the residual and the terms would not come back."""
    result = with_truth(scans["butadiene"], TRUTH, where="refined")
    bond = result.bonds[0]
    _check_truth(fit_torsion(result, bond, quantum="refined").terms, TRUTH)
    refined = bond_residual(result, bond, "refined")
    scan_side = bond_residual(result, bond, "gfn")  # the same points in the same order, at the scan's structures
    assert refined.angles_deg == pytest.approx(scan_side.angles_deg, abs=1e-9)
    terms = fit_terms(refined.angles_deg, refined.qm_kcal_mol - scan_side.mm_without_kcal_mol).terms
    assert max(abs(_terms(terms)[t.periodicity][1] - t.k_kcal_mol) for t in TRUTH) > 1e-2


def test_smarts_types_with_unmatched_bonds_listed(truth_run, tmp_path, capsys):
    run, _ = truth_run
    table = tmp_path / "types.csv"
    table.write_text("name,smarts,classes\n"
                     "terminal diene,[CH2:1]=[CH:2]-[CH:3]=[CH2:4],c1 c2 c2 c1\n"
                     "inner diene,[C:1]=[C:2]-[C:3]=[C:4]\n")
    out = tmp_path / "smarts"
    assert main(["fit-set", str(run), "--types", str(table), "--out", str(out), "--formats", "openmm,amber"]) == 0
    captured = capsys.readouterr()
    assert "left out: acrolein bond 2-3: no torsion type pattern matches dihedral C1-C2-C3-O4" in captured.out
    record = from_plain(TorsionParameterSet, json.loads((out / "torsion_parameters.json").read_text()))
    types = {t.label: t for t in record.types}
    # butadiene only is a terminal diene (isoprene's C3 has no H, hexatriene's inner ends neither)
    assert [m.compound for m in types["terminal diene"].members] == ["butadiene"]
    assert {m.compound for m in types["inner diene"].members} == {"isoprene", "hexatriene"}
    assert types["terminal diene"].classes == ("c1", "c2", "c2", "c1")
    assert types["inner diene"].classes == ("B1", "B2", "B3", "B4")  # the second row's default classes
    _check_truth(types["inner diene"].terms, TRUTH)
    assert record.left_out == (("acrolein", "2-3", "no torsion type pattern matches dihedral C1-C2-C3-O4"),)
    assert (out / "torsions.frcmod").is_file() and not (out / "torsions_gromacs.itp").exists()


# -- refusals -------------------------------------------------------------------------------------
def _types_table(tmp_path, text):
    path = tmp_path / "types.csv"
    path.write_text(text)
    return str(path)


@pytest.mark.parametrize("case, phrase", [
    ("not a run", "holds no batch run"),
    ("empty run", "no finished compound; run 'torsionscan batch"),
    ("unknown format", "--formats pdb: unknown format; choose from amber, gromacs, charmm, openmm"),
    ("empty formats", "--formats is empty"),
    ("no such types", "neither mmff94 nor a file"),
    ("unparsable smarts", "does not parse"),
    ("three mapped atoms", "map exactly four atoms"),
    ("no smarts column", "needs the columns name and smarts"),
    ("duplicate name", "used twice"),
    ("long amber class", "longer than AMBER's 2 characters"),
    ("same classes", "have the same atom classes"),
    ("no rescored energies", "no re-scored energies; run 'torsionscan rescore'"),
    ("no refined profile", "no refined profile; run 'torsionscan refine"),
    ("bad periodicities", "--periodicities must be 1 to 6"),
])
def test_refusals_are_one_line_with_exit_status_2(case, phrase, truth_run, tmp_path, capsys):
    run, _ = truth_run
    args = ["fit-set", str(run), "--out", str(tmp_path / "out")]
    if case == "not a run":
        args[1] = str(tmp_path)
    elif case == "empty run":
        write_run(tmp_path / "empty", [])
        args[1] = str(tmp_path / "empty")
    elif case == "unknown format":
        args += ["--formats", "amber,pdb"]
    elif case == "empty formats":
        args += ["--formats", " , "]
    elif case == "no such types":
        args += ["--types", str(tmp_path / "missing.csv")]
    elif case == "unparsable smarts":
        args += ["--types", _types_table(tmp_path, "name,smarts\nx,[C:1]=[C:2]-[C:3]=[\n")]
    elif case == "three mapped atoms":
        args += ["--types", _types_table(tmp_path, "name,smarts\nx,[C:1]=[C:2]-[C:3]=C\n")]
    elif case == "no smarts column":
        args += ["--types", _types_table(tmp_path, "name,pattern\nx,[C:1]=[C:2]-[C:3]=[C:4]\n")]
    elif case == "duplicate name":
        args += ["--types", _types_table(tmp_path, "name,smarts\nx,[C:1]=[C:2]-[C:3]=[C:4]\nx,[C:1]=[C:2]-[C:3]=[O:4]\n")]
    elif case == "long amber class":
        args += ["--types", _types_table(tmp_path, "name,smarts,classes\nx,[C:1]=[C:2]-[C:3]=[C:4],CG2D CG2D CG2D CG2D\n")]
    elif case == "same classes":
        args += ["--types", _types_table(tmp_path, "name,smarts,classes\nx,[C:1]=[C:2]-[C:3]=[C:4],c c c c\n"
                                                   "y,[C:1]=[C:2]-[C:3]=[O:4],c c c c\n")]
    elif case == "no rescored energies":
        args += ["--quantum", "rescored"]
    elif case == "no refined profile":
        args += ["--quantum", "refined"]
    elif case == "bad periodicities":
        args += ["--periodicities", "7"]
    assert main(args) == 2
    line = _one_line(capsys.readouterr())
    assert phrase in line, line
    assert line.startswith("torsionscan: error: ")


def test_fit_set_for_a_100_compound_run_takes_seconds(scans, tmp_path):
    """The cost is reading the results and one MMFF94 evaluation per frame: a few seconds for 100
    compounds (measured: see benchmarks/fit_set_benchmark.py)."""
    import time

    base = [with_truth(scans[n], TRUTH) for n in DIENES]
    results = [(f"{r.name}-{n}", r) for n in range(34) for r in base]  # 102 compounds, 136 bonds
    started = time.perf_counter()
    parameters = fit_parameter_set(results)
    elapsed = time.perf_counter() - started
    assert len(parameters.types[0].members) == 136 and parameters.types[0].molecule_count == 102
    assert elapsed < 20.0, elapsed


def test_fit_set_in_a_real_subprocess(truth_run, tmp_path):
    import subprocess
    import sys

    run, _ = truth_run
    out = tmp_path / "sub"
    done = subprocess.run([sys.executable, "-m", "torsionscan.cli", "fit-set", str(run), "--out", str(out),
                           "--formats", "gromacs"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert "2-2-2-2" in done.stdout and (out / "torsions_gromacs.itp").is_file()
    assert [line for line in done.stderr.splitlines() if line.strip()] == [
        "torsionscan: WARNING: 1 type(s) with one molecule only, fitted without a transfer check (add molecules "
        "with these types to check them): 2-2-3-7"]
    bad = subprocess.run([sys.executable, "-m", "torsionscan.cli", "fit-set", str(run), "--formats", "lammps"],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2
    assert bad.stderr.strip().splitlines() == [
        "torsionscan: error: --formats lammps: unknown format; choose from amber, gromacs, charmm, openmm"]


def test_notes_name_other_quartets_that_carry_another_types_classes(scans, tmp_path):
    """A catch-all pattern types acrolein's bond and, about isoprene's bond, the quartets C=C-C-CH3 and
    those with hydrogens: the files put its terms there too, which the diene fit did not assume."""
    results = [("isoprene", with_truth(scans["isoprene"], TRUTH)), ("acrolein", with_truth(scans["acrolein"], OTHER_TRUTH))]
    patterns = (parse_pattern("diene", "[C:1]=[C:2]-[C:3]=[C:4]", "d1 d2 d2 d1"),
                parse_pattern("generic", "[*:1]~[C:2]-[C:3]~[*:4]", "x1 x2 x2 x1", row_number=2))
    parameters = fit_parameter_set(results, typing=patterns)
    quartets = parameter_quartets(results, parameters, patterns)
    written = write_parameter_set(parameters, tmp_path / "out", formats=("gromacs",), quartets=quartets)
    text = written["gromacs"].read_text()
    assert ("; type diene: some other quartets about its bonds carry the classes of type generic, whose terms the "
            "files put there too although this fit assumed none") in text
    assert "type generic: some other quartets" not in text  # the diene classes occur about no acrolein quartet
    assert "x1 x2 x2 x1 (type generic)" in text
