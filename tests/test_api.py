"""The Python interface as a notebook uses it: scan, look at the result, build its table, write its
files; 1-based atom numbers, relative energies in kcal/mol, quality flags, the thread settings and
the package's public names. The scan runs on the analytic model engine (minima at +-90.72 deg,
barrier tops 5.30 kcal/mol at 0 deg and 2.70 kcal/mol at 180 deg), so every number is known."""

import dataclasses
import io
import json
import os
import subprocess
import sys

import pytest

import torsionscan
from torsionscan.engines.model import ModelEngine
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.output.progress import BatchProgress
from torsionscan.profile import FourierSeries
from torsionscan.quality import FLAG_MEANINGS, HYSTERESIS, UNCONVERGED
from torsionscan.records import Hysteresis

SETTINGS = torsionscan.ScanSettings(conformers=2, frequencies=False, step_deg=30.0)


@pytest.fixture(scope="module")
def result():
    molecule = load_molecule("C=CC=C")
    (bond,) = find_conjugated_bonds(molecule)
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC=C", name="butadiene", engine=engine, settings=SETTINGS)


def test_a_notebook_session(result, tmp_path):
    (bond,) = result.bonds
    # atoms: 1-based numbers beside the 0-based indices, the same numbers as the bond label
    assert bond.dihedral_atom_numbers == tuple(a + 1 for a in bond.dihedral_atoms) == (1, 2, 3, 4)
    assert bond.label == "2-3"
    (row,) = result.table()
    assert row["name"] == "butadiene" and row["bond"] == "2-3" and row["dihedral_atoms"] == "1-2-3-4"
    lead = bond.profile.leading_populations()[0]
    assert row["s_cis_pct_298.15K"] == pytest.approx(100 * lead.s_cis)
    assert abs(row["global_min_deg"]) == pytest.approx(90.72, abs=0.05)
    assert row["barrier_kcal_mol"] is None  # both minima are s-trans: no barrier into the other region
    assert row["flags"] == "" and bond.flags == ()
    assert all(isinstance(v, (str, float, int, bool, type(None))) for v in row.values())
    # points and stationary points carry energies relative to the profile's zero, kcal/mol
    points = result.table("points")
    assert len(points) == len(bond.points) == 12
    assert min(p["energy_kcal_mol"] for p in points) == pytest.approx(0.0, abs=0.01)
    top = max(points, key=lambda p: p["energy_kcal_mol"])
    assert (top["angle_deg"], top["energy_kcal_mol"]) == (0.0, pytest.approx(5.30, abs=0.01))
    stationary = {(r["kind"], round(r["angle_deg"])): r["energy_kcal_mol"] for r in result.table("stationary")}
    assert stationary[("maximum", 0)] == pytest.approx(5.30, abs=0.01)
    assert stationary[("maximum", 180)] == pytest.approx(2.70, abs=0.01)
    assert stationary[("minimum", 91)] == pytest.approx(0.0, abs=1e-6)
    with pytest.raises(torsionscan.InputError, match="choose one of bonds, points, stationary"):
        result.table("pointz")
    # the repr answers first
    text = repr(result)
    assert text.startswith("<ScanResult butadiene C=CC=C: model potential")
    assert f"bond 2-3 (atoms 1-2-3-4), s-cis {100 * lead.s_cis:.1f}% at 298.15 K" in text and "flags: none" in text
    # the command line's files from Python, and back
    folder = torsionscan.write(result, tmp_path / "butadiene")
    assert (folder / "summary.json").is_file() and (folder / "bond_2-3_profile.png").is_file()
    assert (folder / "scan_3d.html").stat().st_size > 500_000  # the viewer library is embedded: opens offline
    assert json.loads((folder / "summary.json").read_text()) == result.to_dict()
    assert torsionscan.read(folder).to_dict() == result.to_dict()


def test_to_dataframe_with_or_without_pandas(result):
    try:
        import pandas  # noqa: F401
    except ImportError:
        with pytest.raises(torsionscan.InputError, match="needs pandas"):
            result.to_dataframe()
        return
    frame = result.to_dataframe("points")
    assert list(frame["angle_deg"]) == [p.angle_deg for p in result.bonds[0].points]


def test_flags_reach_the_api_and_the_batch_line(result):
    (bond,) = result.bonds
    points = list(bond.points)
    computed = next(n for n, p in enumerate(points) if not p.mirrored and p.angle_deg == 60.0)
    points[computed] = dataclasses.replace(points[computed], converged=False)
    flagged = dataclasses.replace(bond, hysteresis=(Hysteresis(60.0, 0.8),), points=tuple(points))
    changed = dataclasses.replace(result, bonds=(flagged,))
    assert flagged.flags == (HYSTERESIS, UNCONVERGED)
    assert dict(flagged.flag_details) == {HYSTERESIS: "at 60.0° (0.80 kcal/mol)", UNCONVERGED: "1 point at 60.0°"}
    assert changed.table()[0]["flags"] == "hysteresis, unconverged points"
    assert all(flag in FLAG_MEANINGS for flag in flagged.flags)
    stream = io.StringIO()
    progress = BatchProgress(stream)
    progress.start(2, 0)
    progress.update({"name": "butadiene", "status": "done", "wall_time_s": 1.5, "result": changed.to_dict()})
    progress.update({"name": "x", "status": "failed", "reason": "no conjugated single bond", "wall_time_s": 0.1})
    lines = stream.getvalue().splitlines()
    lead = bond.profile.leading_populations()[0]
    assert lines[1].startswith(f"butadiene: bond 2-3: s-cis {100 * lead.s_cis:.1f}% at 298.15 K, "
                               "no barrier into the other region [hysteresis, unconverged points] (1.5 s)")
    assert lines[2].startswith("x: FAILED in 0.1 s: no conjugated single bond")
    assert progress.flagged == [("butadiene", [("2-3", HYSTERESIS), ("2-3", UNCONVERGED)])]


def test_public_names_and_thread_settings(monkeypatch):
    names = dir(torsionscan)
    assert "os" not in names and "limit_threads" not in names and "threads" not in names
    assert {"scan", "write", "read", "ScanSettings", "set_threads", "thread_settings"} <= set(names)
    for variable, value in torsionscan.thread_settings().items():  # recorded, so monkeypatch restores them
        monkeypatch.setenv(variable, value or "1")
    torsionscan.set_threads(3)
    assert set(torsionscan.thread_settings().values()) == {"3"}
    with pytest.raises(torsionscan.InputError, match="whole number of threads"):
        torsionscan.set_threads(0)


@pytest.mark.parametrize("setting, expected", [(None, "1"), ("4", "4"), ("keep", None)])
def test_the_import_sets_unset_thread_variables_from_torsionscan_threads(setting, expected):
    env = {k: v for k, v in os.environ.items() if k not in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                                            "MKL_NUM_THREADS", "TORSIONSCAN_THREADS")}
    if setting is not None:
        env["TORSIONSCAN_THREADS"] = setting
    code = "import os, torsionscan; print(os.environ.get('OMP_NUM_THREADS'))"
    done = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=60)
    assert done.stdout.strip() == str(expected)


def test_the_demo_list_ships_with_the_package():
    from torsionscan.cli import DEMO_LIST, DEMO_OUT, build_parser
    from torsionscan.compounds import read_compound_list

    assert DEMO_LIST.is_absolute() and DEMO_LIST.is_file() and "torsionscan" in DEMO_LIST.parts
    args = build_parser().parse_args(["demo"])
    assert args.list == DEMO_LIST and args.out == DEMO_OUT and not DEMO_OUT.is_absolute()
    entries = read_compound_list(DEMO_LIST)
    assert [e.name for e in entries][:2] == ["methoxy-diene", "methoxymethyl-diene"] and len(entries) == 10
