"""The refinement commands' happy paths through a real subprocess (DFT plumbing in a minimal basis)
and their refusals before any calculation."""

import json
import subprocess
import sys

import pytest

from torsionscan.cli import main
from torsionscan.records import ScanResult

pytestmark = pytest.mark.dft

QUICK = ["--step", "60", "--conformers", "1", "--no-frequencies"]


def _run(*args):
    return subprocess.run([sys.executable, "-m", "torsionscan.cli", *args], capture_output=True, text=True, timeout=600)


def test_scan_with_stationary_refinement_and_a_later_full_refinement(tmp_path):
    out = tmp_path / "butadiene"
    done = _run("scan", "C=CC=C", *QUICK, "--refine", "hf/sto-3g", "--refine-points", "stationary",
                "--processes", "2", "--out", str(out))
    assert done.returncode == 0, done.stderr
    assert "refined at HF/sto-3g (the stationary points re-optimised" in done.stdout
    result = ScanResult.from_dict(json.loads((out / "summary.json").read_text()))
    refined = result.bonds[0].refined
    assert refined.points_mode == "stationary" and refined.analysis.minima
    assert all(m.converged for m in refined.analysis.minima)
    assert refined.analysis.planar_scis is not None  # a diene: the planar s-cis structure is refined too


@pytest.mark.parametrize("args, words", [
    (["scan", "C=CC=C", "--refine", "nonsense"], "give a preset"),
    (["scan", "C=CC=C", "--refine", "standard", "--solvent", "water"], "gas phase only"),
    (["scan", "C=CC=C", "--refine", "standard", "--refine-points", "all", "--processes", "0"], "--processes"),
    (["scan", "C=CC=C", "--reference", "coupled-cluster"], "--reference needs --refine"),
    (["scan", "c1ccccc1-c1ccccc1", "--refine", "standard", "--reference", "coupled-cluster"], "heavy atoms"),
    (["refine", "/nonexistent-folder", "--level", "standard"], "no summary.json"),
])
def test_refinement_requests_that_cannot_work_are_refused_in_one_line(args, words, capsys):
    assert main(args) == 2
    message = capsys.readouterr().err
    assert words in message and message.count("\n") == 1
