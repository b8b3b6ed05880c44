"""DFT re-scoring with PySCF: the setup, butadiene and biphenyl against high-level values, and
the method-disagreement indicator. Real single points; the slowest tests of the suite (minutes)."""


import numpy as np
import pytest

pytest.importorskip("pyscf")

import torsionscan  # noqa: E402
from torsionscan.errors import InputError  # noqa: E402
from torsionscan.output.summary import summary_dict  # noqa: E402
from torsionscan.rescore import PRESETS, parse_level, rescore_summary, single_point  # noqa: E402
from torsionscan.scan import ScanSettings  # noqa: E402
from torsionscan.units import BOHR_ANGSTROM  # noqa: E402

STANDARD = PRESETS["standard"]
WATER = (["O", "H", "H"], np.array([[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]]))


def _rescored(smiles, step, threads=2):
    result = torsionscan.scan(smiles, settings=ScanSettings(step_deg=step, conformers=2, frequencies=False))
    summary = summary_dict(result)
    frames = {entry["bond"]: [p.coords_bohr * BOHR_ANGSTROM for p in bond.relaxed_points]
              for entry, bond in zip(summary["bonds"], result.bonds)}
    return result, rescore_summary(summary, frames, list(result.symbols), STANDARD, threads)["bonds"][0]


def _energy(minima_or_maxima, near):
    return min((m for m in minima_or_maxima if abs(abs(m["angle_deg"]) - near) < 25), key=lambda m: m["energy_rel_kcal_mol"])


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


def test_butadiene_rescored_moves_towards_the_high_level_values():
    result, entry = _rescored("C=CC=C", step=30.0)
    gfn = entry["minima"], entry["maxima"]
    dft = entry["rescored"]["minima"], entry["rescored"]["maxima"]
    # E(gauche) - E(s-trans) = 2.9 kcal/mol (Martin-Drumel et al. 2019, see shared/reference)
    gauche_gfn, gauche_dft = _energy(gfn[0], 30)["energy_rel_kcal_mol"], _energy(dft[0], 30)["energy_rel_kcal_mol"]
    assert abs(gauche_dft - 2.9) < abs(gauche_gfn - 2.9)
    assert gauche_dft == pytest.approx(2.9, abs=0.5)  # CAM-B3LYP-D3(BJ)/def2-SVP: ~0.5 kcal/mol (measured, issue 6)
    # s-trans -> gauche barrier ~6 kcal/mol (Feller and Craig 2009, CCSD(T)/CBS; from memory): the
    # preset overestimates it as range-separated hybrids do, within 1 kcal/mol; it does not beat
    # GFN2-xTB's 5.4 here (both ~0.6-0.8 off, opposite signs)
    barrier_dft = _energy(dft[1], 95)["energy_rel_kcal_mol"]
    assert barrier_dft == pytest.approx(6.0, abs=1.0)
    assert entry["method_disagreement"]["warning"] is None or "up to" in entry["method_disagreement"]["warning"]
    assert all(p["energy_rescored_rel_kcal_mol"] is not None for p in entry["points"])


def test_biphenyl_barriers_at_the_standard_level_match_ccsdt():
    # CCSD(T)/CBS (Johansson and Olsen, J. Chem. Theory Comput. 2008): 1.90 at 0 deg, 2.10 at 90 deg.
    # The composite scheme: single points at the GFN2-xTB minimum and barrier tops (three single
    # points keep this test to about two minutes; a full re-scored scan of biphenyl takes ~10)
    result = torsionscan.scan("c1ccccc1-c1ccccc1", settings=ScanSettings(step_deg=30.0, conformers=2,
                                                                         frequencies=False))
    bond = result.bonds[0]
    minimum = min(bond.minima, key=lambda m: m.energy_hartree)
    tops = {round(abs(m.angle_deg)) % 180: m for m in bond.maxima}

    def energy(record):
        return single_point(list(result.symbols), record.coords_bohr * BOHR_ANGSTROM, STANDARD, threads=2)

    base = energy(minimum)
    assert (energy(tops[0]) - base) * 627.5094740631 == pytest.approx(1.90, abs=0.7)
    assert (energy(tops[90]) - base) * 627.5094740631 == pytest.approx(2.10, abs=0.7)


def test_disagreement_fires_on_glyoxal_and_stays_quiet_on_styrene():
    # glyoxal: experiment and DFT have a cis minimum ~4-5 kcal/mol above trans (from memory);
    # GFN2-xTB has none there
    _, glyoxal = _rescored("O=CC=O", step=30.0)
    warning = glyoxal["method_disagreement"]["warning"]
    assert warning and "1 minima with GFN2-xTB but 2 re-scored" in warning
    _, styrene = _rescored("C=Cc1ccccc1", step=30.0)
    assert styrene["method_disagreement"]["warning"] is None
    assert styrene["method_disagreement"]["max_kcal_mol"] < 1.0


@pytest.mark.parametrize("extra, words", [
    (["--rescore", "nofunctional/def2-svp"], "PySCF cannot use it"),
    (["--rescore", "standard", "--solvent", "water"], "gas phase only"),
])
def test_rescoring_problems_are_refused_before_the_scan(extra, words, capsys, tmp_path):
    from torsionscan.cli import main

    assert main(["scan", "C=CC=O", "--out", str(tmp_path / "x"), *extra]) == 2
    assert words in capsys.readouterr().err
    assert not (tmp_path / "x").exists()  # nothing was computed
