"""The writers of a result folder, driven by the analytic model engine (fast; no chemistry claims):
every file, an exact summary round trip, the profile table's values, the figures' panels and
legends, the numbered drawings, the terminal summary (the one population answer first, its
cross-checks, wells, interconversion, symmetric rotors) and the one-line errors of reading a
summary back. Records with quantum-rotor fields are filled by hand with torsionscan.rotor."""

import csv
import dataclasses
import json
import math

import matplotlib.pyplot as plt
import pytest
from rdkit import Chem

import torsionscan
from torsionscan import rotor
from torsionscan.analysis import analyse_profile
from torsionscan.cli import format_summary
from torsionscan.engines.model import ModelEngine
from torsionscan.errors import InputError
from torsionscan.molecule import find_conjugated_bonds, load_molecule, numbered_smiles
from torsionscan.output import bond_stem, render_drawings, render_figures, write_results
from torsionscan.output.drawing import molecule_drawing
from torsionscan.output.plot import ROTOR_CURVE_TEMPERATURES, populations_figure, profile_figure
from torsionscan.output.report import (
    CLASSICAL_NAME, HARMONIC_NAME, SLOW_INTERCONVERSION_NOTE, SLOW_INTERCONVERSION_S, SYMMETRIC_ROTOR_REASON,
    symmetric_rotor_shape,
)
from torsionscan.output.summary import POPULATION_DISAGREEMENT, read_summary_file
from torsionscan.profile import FourierSeries
from torsionscan.records import Interconversion, MethodDisagreement, RescoredProfile, RrhoPopulations, ScanResult
from torsionscan.units import KCAL_KJ, rt_kcal_mol

FILE_ENDINGS = ("profile.csv", "scan.xyz", "minima.sdf", "profile.png", "profile.svg", "populations.png",
                "structure.svg", "structure.png")
# biphenyl-shaped symmetric rotor: V = -0.3 cos 2phi + 0.6 cos 4phi kcal/mol. Closed form: minima where
# cos 2phi = 1/8 (V' = 0.6 sin 2phi (1 - 8 cos 2phi)), V there -0.61875; V(0) = V(180) = 0.3, V(90) = 0.9
ROTOR_SERIES = FourierSeries(0.0, (0.0, -0.3, 0.0, 0.6), (0.0, 0.0, 0.0, 0.0))
TWIST_DEG = 0.5 * math.degrees(math.acos(0.125))
PLANAR_KCAL, PERPENDICULAR_KCAL = 0.3 + 0.61875, 0.9 + 0.61875
MODEL_INERTIA = 20.0  # amu Bohr^2, a made-up moment of inertia where a record needs one


@pytest.fixture(scope="module")
def model_result():
    """A butadiene-shaped model profile: minima at +-90.72 deg, barriers 2.70 (180) and 5.30 (0) kcal/mol."""
    molecule = load_molecule("C=CC=C")
    bond = find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC=C", name="model-diene", engine=engine,
                            settings=torsionscan.ScanSettings(conformers=2, frequencies=False))


@pytest.fixture(scope="module")
def rotor_result():
    """A biphenyl-shaped symmetric rotor on the model potential (30 deg grid), marked symmetric."""
    molecule = load_molecule("c1ccccc1-c1ccccc1")
    bond = find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(bond.atoms, ROTOR_SERIES)])
    result = torsionscan.scan("c1ccccc1-c1ccccc1", name="model-biaryl", engine=engine,
                              settings=torsionscan.ScanSettings(conformers=2, frequencies=False, step_deg=30.0))
    return dataclasses.replace(result, bonds=tuple(dataclasses.replace(b, symmetric_rotor=True) for b in result.bonds))


def _classical(result):
    """The result with no quantum-rotor fields (what a scan without a moment of inertia gives)."""
    bonds = tuple(dataclasses.replace(b, profile=dataclasses.replace(
        b.profile, rotor_inertia_amu_bohr2=None, rotor=(), wells=(), free_energies=(), interconversion=()))
        for b in result.bonds)
    return dataclasses.replace(result, bonds=bonds)


def _interconversion(temperature_k, forward_kcal, backward_kcal):
    """An Interconversion record from Eyring rates (no tunnelling factor) of two free-energy barriers."""
    forward, backward = (rotor.eyring_rate(g, temperature_k) for g in (forward_kcal, backward_kcal))
    return Interconversion(temperature_k, forward_kcal, backward_kcal, forward, backward, 1.0, 1.0,
                           rotor.half_life_s(forward + backward))


def _filled(result, half_life_barrier_kcal=None, other_modes_scis_kcal=0.4):
    """The result with every quantum-rotor field filled by hand on its fit (torsionscan.rotor):
    rotor populations, wells, region free energies (other modes: s-cis +0.4 kcal/mol above s-trans),
    all-harmonic populations, and interconversion over a barrier of half_life_barrier_kcal (if given)."""
    bond = result.bonds[0]
    profile = bond.profile
    series, temperatures = profile.fit.series, result.settings.temperatures_k
    rotors, free, rrho, rates = [], [], [], []
    for t in temperatures:
        rotors.append(rotor.rotor_populations(series, MODEL_INERTIA, t))
        levels, vectors = rotor.torsional_levels(series, MODEL_INERTIA,
                                                 window_kcal_mol=rotor.BOLTZMANN_WINDOW_RT * rt_kcal_mol(t))
        free.append(rotor.conformer_free_energies(levels, rotor.region_weights(vectors), other_modes_scis_kcal, 0.0, t))
        rrho.append(RrhoPopulations(t, 0.3, 0.7, -rt_kcal_mol(t) * math.log(0.3 / 0.7)))
        if half_life_barrier_kcal is not None:
            rates.append(_interconversion(t, half_life_barrier_kcal, half_life_barrier_kcal - 0.5))
    profile = dataclasses.replace(profile, rotor_inertia_amu_bohr2=MODEL_INERTIA, rotor=tuple(rotors),
                                  wells=rotor.well_fundamentals(series, MODEL_INERTIA), free_energies=tuple(free),
                                  rrho_populations=tuple(rrho), interconversion=tuple(rates))
    return dataclasses.replace(result, bonds=(dataclasses.replace(bond, profile=profile),))


@pytest.fixture(scope="module")
def written(model_result, tmp_path_factory):
    out = tmp_path_factory.mktemp("model")
    write_results(model_result, out)
    return out


def _rescored(result, shift_hartree=1e-4):
    """The result with a made-up re-scored profile on its one bond (scan energies plus a tilt)."""
    bond = result.bonds[0]
    energies = tuple(p.energy_hartree + shift_hartree * math.cos(math.radians(p.angle_deg))
                     for p in bond.relaxed_points)
    pairs = bond.points_with_frames()
    analysis = analyse_profile([p.angle_deg for p, _ in pairs], [energies[n] for _, n in pairs], bond.symmetric,
                               result.settings.temperatures_k, result.settings.scis_window_deg)
    rescored = RescoredProfile(
        level="test-level", level_reference="none", energies_hartree=energies, analysis=analysis,
        disagreement=MethodDisagreement(0.1, 0.2, 1.0, "profiles differ: made up for a test"), wall_time_s=0.0)
    return dataclasses.replace(result, bonds=(dataclasses.replace(bond, rescored=rescored),))


def test_every_file_is_written(model_result, written):
    assert (written / "summary.json").stat().st_size > 0
    for bond in model_result.bonds:
        for ending in FILE_ENDINGS:
            assert (written / f"{bond_stem(bond.label)}_{ending}").stat().st_size > 0, ending
    assert not list(written.glob(".*")), "temporary files left behind"


def test_summary_round_trips_exactly(model_result, written):
    text = (written / "summary.json").read_text()
    assert ScanResult.from_dict(json.loads(text)).to_dict() == model_result.to_dict()
    assert read_summary_file(written / "summary.json").to_dict() == model_result.to_dict()


def test_profile_table_holds_the_records_energies(model_result, written):
    bond = model_result.bonds[0]
    rows = list(csv.DictReader((written / f"{bond_stem(bond.label)}_profile.csv").open()))
    assert len(rows) == len(bond.points)
    assert "energy_rescored_rel_kcal_mol" not in rows[0]
    for row, point in zip(rows, bond.points):
        kcal = bond.profile.relative_kcal_mol(point.energy_hartree)
        assert float(row["angle_deg"]) == point.angle_deg
        assert float(row["energy_rel_kcal_mol"]) == pytest.approx(kcal, abs=5e-6)
        assert float(row["energy_rel_kj_mol"]) == pytest.approx(kcal * KCAL_KJ, abs=5e-6)
        assert float(row["fit_kcal_mol"]) == pytest.approx(bond.profile.fit.series.value(point.angle_deg), abs=5e-6)
        assert row["mirrored"] == str(point.mirrored)
        assert row["central_bond_order"] == ""  # the model engine reports no bond order


def test_structures_match_the_records(model_result, written):
    bond = model_result.bonds[0]
    lines = (written / f"{bond_stem(bond.label)}_scan.xyz").read_text().splitlines()
    n_atoms = int(lines[0])
    assert len(lines) == len(bond.relaxed_points) * (n_atoms + 2)
    minima = list(Chem.SDMolSupplier(str(written / f"{bond_stem(bond.label)}_minima.sdf"), removeHs=False))
    assert len(minima) == len(bond.profile.minima)
    assert all(m.GetProp("method") == model_result.method for m in minima)


def test_profile_figure_has_one_panel_without_bond_orders(model_result):
    bond = model_result.bonds[0]
    figure = profile_figure(model_result, bond)
    assert len(figure.axes) == 1
    assert model_result.method in figure.axes[0].get_title()
    with_orders = dataclasses.replace(bond, points=tuple(dataclasses.replace(p, central_bond_order=1.2)
                                                         for p in bond.points))
    assert len(profile_figure(model_result, with_orders).axes) == 2


def test_rescored_column_overlay_and_lines(model_result, tmp_path):
    result = _rescored(model_result)
    bond = result.bonds[0]
    write_results(result, tmp_path)
    rows = list(csv.DictReader((tmp_path / f"{bond_stem(bond.label)}_profile.csv").open()))
    expected = {id(p): bond.rescored.analysis.relative_kcal_mol(bond.rescored.energies_hartree[n])
                for p, n in bond.points_with_frames()}
    for row, point in zip(rows, bond.points):
        assert float(row["energy_rescored_rel_kcal_mol"]) == pytest.approx(expected[id(point)], abs=5e-6)
    assert read_summary_file(tmp_path / "summary.json").to_dict() == result.to_dict()
    figures = render_figures(result)[bond.label]
    assert set(figures) == {"profile.png", "profile.svg", "populations.png"}
    # the vector figure keeps its words as text (editable, searchable), not as glyph outlines
    assert "populations:" in figures["profile.svg"].decode() and "sans-serif" in figures["profile.svg"].decode()
    text = format_summary(result, tmp_path)
    assert "re-scored at test-level" in text and "WARNING: profiles differ" in text
    assert f"difference to {result.method}" in text


def test_terminal_summary_uses_the_engines_words(model_result):
    text = format_summary(model_result, "out")
    assert text.splitlines()[-1] == model_result.caution
    assert "Semi-empirical" not in text and "GFN" not in text
    assert "minima (kcal/mol)" in text and "-90.7°" in text
    # a symmetric profile shows each barrier once: over 0 deg (5.30) and over 180 deg (2.70)
    barriers = [line for line in text.splitlines() if "barrier" in line]
    assert len(barriers) == 2
    assert any("5.30 kcal/mol" in line for line in barriers) and any("2.70 kcal/mol" in line for line in barriers)
    assert "disagree" not in text


@pytest.mark.parametrize("variant", ["classical leads", "rotor leads"])
def test_rrho_disagreement_flag_uses_the_threshold(model_result, variant):
    # other modes equal in both regions: the classical integral stays close to the leading answer
    if variant == "classical leads":
        result = _classical(model_result)
    else:
        result = _filled(model_result, other_modes_scis_kcal=0.0)
    bond = result.bonds[0]
    leading = bond.profile.leading_populations()[0]

    def text_with(s_cis):
        rrho = RrhoPopulations(leading.temperature_k, s_cis, 1.0 - s_cis, 0.0)
        profile = dataclasses.replace(bond.profile, rrho_populations=(rrho,))
        return format_summary(dataclasses.replace(result, bonds=(dataclasses.replace(bond, profile=profile),)), "out")

    assert "from free energies of the minima" in text_with(leading.s_cis)
    assert f"{HARMONIC_NAME} {100 * leading.s_cis:.1f}%" in text_with(leading.s_cis)
    assert "disagree" not in text_with(leading.s_cis + 0.9 * POPULATION_DISAGREEMENT)
    flagged = text_with(leading.s_cis + 1.1 * POPULATION_DISAGREEMENT)
    assert f"[disagrees with the leading answer at {leading.temperature_k:g} K]" in flagged


def _bond_lines(text):
    """The terminal lines of the first bond, from its dihedral line up to the next unindented line."""
    lines = text.splitlines()
    start = next(n for n, line in enumerate(lines) if line.startswith("dihedral "))
    end = next((n for n in range(start + 1, len(lines)) if not lines[n].startswith(" ")), len(lines))
    return lines[start:end]


def test_the_leading_answer_comes_first_and_the_cross_checks_are_named(model_result):
    result = _filled(model_result)
    profile = result.bonds[0].profile
    lead, classical, harmonic = profile.free_energies[0], profile.populations[0], profile.rrho_populations[0]
    text = format_summary(result, "out")
    lines = _bond_lines(text)
    assert lines[1] == "  populations (quantum hindered rotor with harmonic other modes):"
    assert text.count(profile.population_model) == 1
    assert lines[2] == (f"    {lead.temperature_k:g} K: s-cis {100 * lead.s_cis:.1f}%, "
                        f"s-trans {100 * lead.s_trans:.1f}%, ΔG(s-cis − s-trans) {lead.delta_g_kcal_mol:+.2f} kcal/mol")
    (check,) = [line for line in lines if "cross-checks" in line]
    assert lines.index(check) == 3 and lines.index(check) < next(
        n for n, x in enumerate(lines) if x.startswith("  minima (kcal/mol)"))
    assert f"{CLASSICAL_NAME} {100 * classical.s_cis:.1f}%" in check
    assert f"{HARMONIC_NAME} {100 * harmonic.s_cis:.1f}%" in check
    # with the other modes equal in both regions the region free energies give the rotor's own split
    # (conformer_free_energies' closed form: G_R = -RT ln sum_i P_iR exp(-E_i/RT))
    even = _filled(model_result, other_modes_scis_kcal=0.0).bonds[0].profile
    assert even.free_energies[0].s_cis == pytest.approx(even.rotor[0].s_cis, rel=1e-9)


def test_without_a_rotor_the_classical_integral_leads(model_result):
    result = _classical(model_result)
    p = result.bonds[0].profile.populations[0]
    lines = _bond_lines(format_summary(result, "out"))
    assert lines[1] == "  populations (classical integral over the profile):"
    assert lines[2].startswith(f"    {p.temperature_k:g} K: s-cis {100 * p.s_cis:.1f}%")
    assert f"|φ| ≤ {p.scis_window_deg:g}° {100 * p.scis_window:.1f}%" in lines[2]
    assert not any("cross-checks" in line or "fundamental" in line or "interconversion" in line for line in lines)


def test_wells_and_interconversion_lines(model_result):
    slow_barrier = 22.0  # kcal/mol: Eyring half-life of hours at 298 K
    result = _filled(model_result, half_life_barrier_kcal=slow_barrier)
    profile = result.bonds[0].profile
    (well,) = profile.wells
    (rate,) = profile.interconversion
    assert rate.half_life_s > SLOW_INTERCONVERSION_S
    text = format_summary(result, "out")
    assert (f"torsional fundamental per well (quantum rotor): ±{abs(well.angle_deg):.1f}° {well.fundamental_cm1:.1f} "
            f"cm⁻¹ (tunnelling splitting {well.tunnelling_splitting_cm1:.3g} cm⁻¹)") in text
    assert (f"interconversion at {rate.temperature_k:g} K: ΔG‡ s-trans → s-cis {slow_barrier:.2f}, "
            f"s-cis → s-trans {slow_barrier - 0.5:.2f} kcal/mol; rates {rate.forward_rate_per_s:.3g} and "
            f"{rate.backward_rate_per_s:.3g} s⁻¹; half-life {rate.half_life_s:.3g} s") in text
    assert SLOW_INTERCONVERSION_NOTE in text
    # a splitting that is not finite (ground level above the inner barrier) is not shown
    nan_split = dataclasses.replace(well, tunnelling_splitting_cm1=math.nan)
    quiet = dataclasses.replace(profile, wells=(nan_split,))
    quiet_result = dataclasses.replace(result, bonds=(dataclasses.replace(result.bonds[0], profile=quiet),))
    quiet_text = format_summary(quiet_result, "out")
    assert "tunnelling" not in quiet_text and f"{well.fundamental_cm1:.1f} cm⁻¹" in quiet_text


@pytest.mark.parametrize("factor, slow", [(0.5, False), (0.999, False), (1.001, True), (100.0, True)])
def test_the_slow_interconversion_sentence_uses_the_threshold(model_result, factor, slow):
    result = _classical(model_result)
    bond = result.bonds[0]
    t = result.settings.temperatures_k[0]
    half_life = factor * SLOW_INTERCONVERSION_S
    record = Interconversion(t, 20.0, 19.0, 1.0, 1.0, 1.0, 1.0, half_life)
    profile = dataclasses.replace(bond.profile, interconversion=(record,))
    text = format_summary(dataclasses.replace(result, bonds=(dataclasses.replace(bond, profile=profile),)), "out")
    assert f"half-life {half_life:.3g} s" in text
    assert (SLOW_INTERCONVERSION_NOTE in text) == slow


def test_a_symmetric_rotor_has_no_s_cis_split(rotor_result):
    bond = rotor_result.bonds[0]
    twist, planar, perpendicular = symmetric_rotor_shape(bond.profile)
    # against the closed form of ROTOR_SERIES; 0.2 deg: the model's minimum refinement stops at its
    # gradient tolerance on a flat well; 0.005 kcal/mol: the fit of a 30-degree grid
    assert twist == pytest.approx(TWIST_DEG, abs=0.2)
    assert planar == pytest.approx(PLANAR_KCAL, abs=5e-3)
    assert perpendicular == pytest.approx(PERPENDICULAR_KCAL, abs=5e-3)
    text = format_summary(rotor_result, "out")
    lines = _bond_lines(text)
    assert lines[1] == f"  symmetric rotor: {SYMMETRIC_ROTOR_REASON}"
    assert lines[2] == (f"  twist {twist:.1f}°; barrier at planar {planar:.2f}, "
                        f"at perpendicular {perpendicular:.2f} kcal/mol")
    assert text.count(SYMMETRIC_ROTOR_REASON) == 1 and "  flags: symmetric rotor" in lines
    assert not any(word in text for word in ("populations (", "cross-checks", "s-trans)", "interconversion"))
    assert bond.scis_meaning and bond.scis_meaning in lines[0] and "planar" in lines[0]


def test_the_header_and_bond_lines_carry_the_numbers_of_the_structure(model_result):
    text = format_summary(model_result, "out")
    numbered = numbered_smiles(model_result.mol)
    assert text.splitlines()[0].startswith(f"{model_result.name}  {numbered}  — ")
    # the numbers in the SMILES are the atoms' 1-based indices (read back by RDKit)
    parsed = Chem.MolFromSmiles(numbered)
    assert sorted(a.GetAtomMapNum() for a in parsed.GetAtoms()) == [
        a.GetIdx() + 1 for a in model_result.mol.GetAtoms() if a.GetAtomicNum() > 1]
    for atom in parsed.GetAtoms():
        assert atom.GetSymbol() == model_result.symbols[atom.GetAtomMapNum() - 1]
    for b in parsed.GetBonds():
        assert model_result.mol.GetBondBetweenAtoms(b.GetBeginAtom().GetAtomMapNum() - 1,
                                                    b.GetEndAtom().GetAtomMapNum() - 1) is not None
    bond = model_result.bonds[0]
    assert bond.scis_meaning == "s-cis: C1=C2 syn to C3=C4"
    assert f"0° = {bond.scis_meaning}, 180° = s-trans" in _bond_lines(text)[0]


def test_figure_texts_lie_inside_the_canvas_and_the_legend_above_the_title(model_result, rotor_result):
    filled = _filled(model_result)
    bond = filled.bonds[0]
    two_panels = dataclasses.replace(bond, points=tuple(dataclasses.replace(p, central_bond_order=1.2,
                                                                            homo_lumo_gap_ev=3.0)
                                                        for p in bond.points))
    profiles = [profile_figure(filled, bond), profile_figure(filled, two_panels),
                profile_figure(rotor_result, rotor_result.bonds[0])]
    figures = profiles + [populations_figure(filled, bond), populations_figure(rotor_result, rotor_result.bonds[0])]
    try:
        for figure in figures:
            figure.canvas.draw()
            renderer = figure.canvas.get_renderer()
            width, height = figure.get_size_inches()
            drawn = figure.get_tightbbox(renderer)  # inches, everything drawn
            assert drawn.x0 >= 0 and drawn.y0 >= 0 and drawn.x1 <= width and drawn.y1 <= height
            top = figure.axes[0]
            title = top.title.get_window_extent(renderer)
            assert title.y0 >= top.get_window_extent(renderer).y1
            if figure in profiles:  # their legend sits above the title
                assert top.get_legend().get_window_extent(renderer).y0 >= title.y1
        panel_title = figures[1].axes[1].title.get_window_extent(figures[1].canvas.get_renderer())
        assert panel_title.y1 <= figures[1].axes[0].bbox.y0  # the conjugation panel's title below the profile
        assert len(figures[1].axes) == 3  # with the gap's own axis on the right
    finally:
        for figure in figures:
            plt.close(figure)


def _legend(figure):
    return [t.get_text() for t in figure.axes[0].get_legend().get_texts()]


def test_the_profile_legend_shows_the_leading_populations(model_result, rotor_result):
    filled = _filled(model_result)
    lead = filled.bonds[0].profile.free_energies[0]
    figure = profile_figure(filled, filled.bonds[0])
    legend = _legend(figure)
    plt.close(figure)
    assert "populations: quantum hindered rotor with harmonic other modes" in legend
    assert f"{lead.temperature_k:g} K: s-cis {100 * lead.s_cis:.1f}%, s-trans {100 * lead.s_trans:.1f}%" in legend
    figure = profile_figure(rotor_result, rotor_result.bonds[0])
    legend = _legend(figure)
    plt.close(figure)
    assert not any("s-cis" in line and "%" in line for line in legend)
    assert not any(line.startswith(("s-cis region", "s-trans region")) for line in legend)
    assert any(line.startswith("symmetric rotor, no s-cis/s-trans split") for line in legend)


def test_the_populations_figure_adds_the_quantum_rotor_curve(model_result):
    filled = _filled(model_result)
    bond = filled.bonds[0]
    figure = populations_figure(filled, bond)
    lines = {line.get_label(): line for line in figure.axes[0].get_lines()}
    plt.close(figure)
    curve = lines["s-cis, quantum hindered rotor on the profile"]
    temperatures, values = curve.get_data()
    low, high = filled.settings.temperature_range_k
    assert len(temperatures) == ROTOR_CURVE_TEMPERATURES and (temperatures[0], temperatures[-1]) == (low, high)
    for t, value in ((temperatures[0], values[0]), (temperatures[-1], values[-1])):
        assert value == pytest.approx(100 * rotor.rotor_populations(bond.profile.fit.series, MODEL_INERTIA, t).s_cis,
                                      rel=1e-12)
    assert any("classical integral" in label for label in lines)
    assert "s-cis, quantum rotor with harmonic other modes" in lines
    figure = populations_figure(_classical(model_result), _classical(model_result).bonds[0])
    labels = [line.get_label() for line in figure.axes[0].get_lines()]
    plt.close(figure)
    assert not any("quantum" in label for label in labels)


def test_drawings_are_written_with_the_first_bonds_dihedral(model_result, written):
    bond = model_result.bonds[0]
    drawing = molecule_drawing(model_result.mol, bond.dihedral_atoms)
    assert (written / "structure.svg").read_text() == drawing["svg"]
    assert (written / "structure.png").read_bytes() == drawing["png"]
    assert (written / f"{bond_stem(bond.label)}_structure.svg").read_text() == drawing["svg"]
    assert (written / "structure.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert set(render_drawings(model_result)) == {"structure.svg", "structure.png", f"bond_{bond.label}_structure.svg",
                                                  f"bond_{bond.label}_structure.png"}


@pytest.mark.parametrize("content, words", [
    (None, "not found"),
    ("this is not json", "not JSON"),
    ("{}", "no schema_version"),
    ('{"schema_version": 1}', "schema version 1"),
])
def test_reading_a_bad_summary_gives_one_line(tmp_path, content, words):
    path = tmp_path / "summary.json"
    if content is not None:
        path.write_text(content)
    with pytest.raises(InputError) as caught:
        read_summary_file(path)
    message = str(caught.value)
    assert words in message and len(message.splitlines()) == 1


def test_a_killed_writers_temporary_folder_is_removed_when_the_folder_is_written_again(model_result, tmp_path):
    import os
    import time

    from torsionscan.output import STALE_PARTIAL_S

    out = tmp_path / "compound"
    stale, fresh = tmp_path / ".compound.a1b2c3d4.partial", tmp_path / ".compound.e5f6g7h8.partial"
    others = [tmp_path / ".compound-2.a1b2c3d4.partial", tmp_path / ".compound.b3lyp.a1b2c3d4.partial"]
    for folder in (stale, fresh, *others):
        folder.mkdir()
        (folder / "summary.json").write_text("{}")
    old = time.time() - 2 * STALE_PARTIAL_S
    for folder in (stale, *others):
        os.utime(folder, (old, old))
    write_results(model_result, out)
    assert (out / "summary.json").exists() and not stale.exists()
    assert fresh.exists()  # may be another writer's, still at work
    assert all(folder.exists() for folder in others)  # other folders' ("compound-2", "compound.b3lyp")
