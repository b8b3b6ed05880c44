"""The parameter files of fit-set read back by independent libraries: ParmEd reads the AMBER frcmod,
the GROMACS [ dihedraltypes ] and the CHARMM parameter file and sees the fitted force constants,
periodicities and phases (after the unit conversion); OpenMM reads its force-field XML, and the
torsion energy it computes for every member bond at its scan geometries equals the fitted terms
to 1e-6 kcal/mol."""

import csv
import io
import math

import numpy as np
import openmm
import parmed
import pytest
from openmm import app, unit

from rdkit.Chem import rdForceFieldHelpers

from fitset_helpers import (DIENES, ENONE, OTHER_TRUTH, STYRENE_TRUTH, STYRENES, TRUTH, model_scan, with_truth,
                            write_run)
from torsionscan import geometry
from torsionscan.forcefield import bond_residual, fit_torsion
from torsionscan.output.parameters import FILE_NAMES, MEMBER_FORCES, member_stem, write_parameter_set
from torsionscan.torsionfit import term_energy
from torsionscan.torsiontypes import fit_parameter_set, mmff94_class, parameter_quartets, parse_pattern
from torsionscan.units import BOHR_ANGSTROM, KCAL_KJ
from torsionscan.workflows import fit_set_run


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """fit-set on a run of three dienes (TRUTH) and acrolein (OTHER_TRUTH): (parameters, files, results)."""
    results = [with_truth(model_scan(n, s), TRUTH) for n, s in DIENES.items()]
    results.append(with_truth(model_scan("acrolein", ENONE["acrolein"]), OTHER_TRUTH))
    folder = tmp_path_factory.mktemp("files")
    run = write_run(folder / "run", results)
    parameters, paths = fit_set_run(run, out_dir=folder / "params")
    assert len(parameters.types) == 2
    return parameters, paths, {r.name: r for r in results}


def _expected(fit):
    """(k kcal/mol, periodicity, phase deg) of each fitted term."""
    return [(t.k_kcal_mol, t.periodicity, t.phase_deg) for t in fit.terms]


def _seen(dihedral_types):
    return [(t.phi_k, t.per, t.phase) for t in dihedral_types]


def _check(seen, expected, k_tolerance):
    assert len(seen) == len(expected)
    for (k, per, phase), (k_fit, per_fit, phase_fit) in zip(seen, expected):
        assert per == per_fit
        assert phase == pytest.approx(phase_fit, abs=1e-6)
        assert k == pytest.approx(k_fit, abs=k_tolerance)


@pytest.mark.parametrize("fmt", ["amber", "charmm", "gromacs"])
def test_parmed_reads_the_fitted_terms(written, fmt):
    parameters, paths, _ = written
    path = str(paths[fmt])
    if fmt == "amber":
        types = parmed.amber.AmberParameterSet(path).dihedral_types
    elif fmt == "charmm":
        types = parmed.charmm.CharmmParameterSet(path).dihedral_types
    else:  # ParmEd converts GROMACS's kJ/mol back to kcal/mol
        types = parmed.gromacs.GromacsTopologyFile(path).parameterset.dihedral_types
    for fit in parameters.types:
        for key in (fit.classes, tuple(reversed(fit.classes))):  # both directions of the quartet
            _check(_seen(types[key]), _expected(fit), 1e-8)
    assert {k for k in types} == {c for fit in parameters.types for c in (fit.classes, tuple(reversed(fit.classes)))}


def _templates(result, atoms, classes):
    """A residue template for the molecule whose dihedral atoms carry the type's classes (the others
    a class no torsion uses), and its topology."""
    topology = app.Topology()
    residue = topology.addResidue("MOL", topology.addChain())
    members = dict(zip(atoms, classes))
    lines = ["<ForceField>", " <AtomTypes>"]
    handles = []
    for a in result.mol.GetAtoms():
        element = app.Element.getByAtomicNumber(a.GetAtomicNum())
        handles.append(topology.addAtom(f"X{a.GetIdx()}", element, residue))
        lines.append(f'  <Type name="t{a.GetIdx()}" class="{members.get(a.GetIdx(), "ZZ")}" element="{element.symbol}" '
                     f'mass="{element.mass.value_in_unit(unit.dalton)}"/>')
    lines += [" </AtomTypes>", " <Residues>", '  <Residue name="MOL">']
    lines += [f'   <Atom name="X{a.GetIdx()}" type="t{a.GetIdx()}"/>' for a in result.mol.GetAtoms()]
    for b in result.mol.GetBonds():
        i, j = b.GetBeginAtomIdx(), b.GetEndAtomIdx()
        topology.addBond(handles[i], handles[j])
        lines.append(f'   <Bond atomName1="X{i}" atomName2="X{j}"/>')
    lines += ["  </Residue>", " </Residues>", "</ForceField>"]
    return io.StringIO("\n".join(lines)), topology


def _energies_kcal_mol(system, frames_angstrom):
    context = openmm.Context(system, openmm.VerletIntegrator(1.0), openmm.Platform.getPlatformByName("Reference"))
    energies = []
    for coords in frames_angstrom:
        context.setPositions(np.asarray(coords) * 0.1)  # nm
        state = context.getState(getEnergy=True)
        energies.append(state.getPotentialEnergy().value_in_unit(unit.kilojoule_per_mole) / KCAL_KJ)
    return np.array(energies)


def test_openmm_reads_the_xml_and_gives_the_fitted_torsion_energy(written):
    parameters, paths, results = written
    generator = app.ForceField(str(paths["openmm"])).getGenerators()[0]
    assert type(generator).__name__ == "PeriodicTorsionGenerator"
    checked = 0
    for fit in parameters.types:
        for m in fit.members:
            result = results[m.compound]
            bond = result.bond(m.bond)
            templates, topology = _templates(result, m.dihedral_atoms, fit.classes)
            field = app.ForceField(templates, str(paths["openmm"]))
            system = field.createSystem(topology)
            (force,) = [f for f in system.getForces() if isinstance(f, openmm.PeriodicTorsionForce)]
            assert force.getNumTorsions() == len(fit.terms)  # the one quartet, every term
            seen = []
            for n in range(force.getNumTorsions()):
                *quartet, periodicity, phase, k = force.getTorsionParameters(n)
                assert tuple(quartet) in (m.dihedral_atoms, tuple(reversed(m.dihedral_atoms)))
                seen.append((k.value_in_unit(unit.kilojoule_per_mole) / KCAL_KJ, periodicity,
                             math.degrees(phase.value_in_unit(unit.radian))))
            _check(sorted(seen, key=lambda s: s[1]), _expected(fit), 1e-12)
            frames = [p.coords_bohr * BOHR_ANGSTROM for p in bond.relaxed_points]
            model = term_energy(fit.terms, [math.degrees(geometry.dihedral(f, *m.dihedral_atoms)) for f in frames])
            assert np.max(np.abs(_energies_kcal_mol(system, frames) - model)) < 1e-6
            checked += 1
    assert checked == 5


def test_per_bond_serialized_forces_give_the_same_energy(written):
    parameters, paths, results = written
    fit = parameters.types[0]
    m = fit.members[-1]  # hexatriene's second bond
    assert (m.compound, m.bond) == ("hexatriene", "4-5")
    path = paths["openmm"].parent / MEMBER_FORCES / f"{member_stem(m.compound, m.bond)}_openmm.xml"
    force = openmm.XmlSerializer.deserialize(path.read_text())
    result = results[m.compound]
    system = openmm.System()
    for a in result.mol.GetAtoms():
        system.addParticle(a.GetMass())
    system.addForce(force)
    frames = [p.coords_bohr * BOHR_ANGSTROM for p in result.bond(m.bond).relaxed_points]
    model = term_energy(fit.terms, [math.degrees(geometry.dihedral(f, *m.dihedral_atoms)) for f in frames])
    assert np.max(np.abs(_energies_kcal_mol(system, frames) - model)) < 1e-6
    assert set(FILE_NAMES) == {"amber", "gromacs", "charmm", "openmm"}


# -- a type that occurs on more than one quartet about its bonds --------------------------------------
def _ortho(result):
    """The quartets C1-C2-C3-C(ortho) of a styrene (0-based), from the bonds alone."""
    return [(0, 1, 2, a.GetIdx()) for a in result.mol.GetAtomWithIdx(2).GetNeighbors() if a.GetIdx() != 1]


@pytest.fixture(scope="module")
def styrenes(tmp_path_factory):
    """Styrene and 4-methylstyrene whose profiles carry STYRENE_TRUTH on both ortho quartets (as a
    force field keyed by classes applies a 2-2-37-37 type), plus hexatriene (TRUTH), written with
    the members' quartets: (parameters, paths, results by name)."""
    results = []
    for name, smiles in STYRENES.items():
        scan = model_scan(name, smiles)
        results.append(with_truth(scan, STYRENE_TRUTH, quartets={"2-3": _ortho(scan)}))
    results.append(with_truth(model_scan("hexatriene", DIENES["hexatriene"]), TRUTH))
    pairs = [(r.name, r) for r in results]
    parameters = fit_parameter_set(pairs)
    paths = write_parameter_set(parameters, tmp_path_factory.mktemp("styrenes") / "params",
                                quartets=parameter_quartets(pairs, parameters))
    return parameters, paths, {r.name: r for r in results}


def test_a_type_on_both_ortho_quartets_is_recovered(styrenes):
    parameters, _, results = styrenes
    fit = {t.label: t for t in parameters.types}["2-2-37-37"]
    terms = {t.periodicity: t for t in fit.terms}
    for truth in STYRENE_TRUTH:
        assert terms[truth.periodicity].phase_deg == truth.phase_deg
        assert terms[truth.periodicity].k_kcal_mol == pytest.approx(truth.k_kcal_mol, abs=1e-3)
    # odd terms are all but undetermined (their sum over the two quartets nearly vanishes): small in energy
    for result in results.values():
        if result.name in STYRENES:
            residual = bond_residual(result, result.bonds[0])
            odd = sum(term_energy([terms[1], terms[3]], residual.dihedral_deg(q)) for q in _ortho(result))
            assert np.ptp(odd) < 1e-3
    assert fit.rmse_fit_kcal_mol < 1e-3 and fit.rmse_leave_out_kcal_mol < 1e-3 and fit.molecule_count == 2
    # terms on the scanned quartet alone (the per-bond fit) need twice the V2 barrier
    single = {t.periodicity: t for t in fit_torsion(results["styrene"], results["styrene"].bonds[0]).terms}
    assert single[2].k_kcal_mol == pytest.approx(2 * STYRENE_TRUTH[0].k_kcal_mol, abs=0.02)


def _mmff94_templates(result):
    """A residue template whose atoms carry the classes of their MMFF94 types, and its topology."""
    properties = rdForceFieldHelpers.MMFFGetMoleculeProperties(result.mol)
    classes = [mmff94_class(properties.GetMMFFAtomType(a)) for a in range(result.mol.GetNumAtoms())]
    return _templates(result, range(len(classes)), classes)


def test_openmm_with_mmff94_classes_reproduces_the_fitted_profile(styrenes):
    """Every atom with its MMFF94 class: OpenMM puts the type's terms on both ortho quartets, and MMFF94
    without the bond's torsion terms plus OpenMM's torsion energy is the fitted member curve."""
    parameters, paths, results = styrenes
    fit = {t.label: t for t in parameters.types}["2-2-37-37"]
    for m in fit.members:
        result = results[m.compound]
        templates, topology = _mmff94_templates(result)
        system = app.ForceField(templates, str(paths["openmm"])).createSystem(topology)
        (force,) = [f for f in system.getForces() if isinstance(f, openmm.PeriodicTorsionForce)]
        quartets = {tuple(force.getTorsionParameters(n)[:4]) for n in range(force.getNumTorsions())}
        assert {min(q, q[::-1]) for q in quartets} == {min(q, q[::-1]) for q in _ortho(result)}
        residual = bond_residual(result, result.bond(m.bond))
        torsion = _energies_kcal_mol(system, residual.frames_angstrom)  # mirror images: the same energy
        by_hand = sum(term_energy(fit.terms, residual.dihedral_deg(q)) for q in _ortho(result))
        assert np.max(np.abs(torsion - by_hand)) < 1e-6
        values = residual.mm_without_kcal_mol + torsion
        curve = (values - np.mean(values - residual.qm_kcal_mol))[np.argsort(residual.angles_deg)]
        assert np.max(np.abs(curve - np.array(m.mm_with_fit_kcal_mol))) < 1e-6
        # the per-bond force carries the same terms on the same quartets
        path = paths["openmm"].parent / MEMBER_FORCES / f"{member_stem(m.compound, m.bond)}_openmm.xml"
        alone = openmm.System()
        for a in result.mol.GetAtoms():
            alone.addParticle(a.GetMass())
        alone.addForce(openmm.XmlSerializer.deserialize(path.read_text()))
        assert np.max(np.abs(_energies_kcal_mol(alone, residual.frames_angstrom) - torsion)) < 1e-6


def test_files_say_which_quartets_the_terms_act_on(styrenes):
    parameters, paths, results = styrenes
    for fmt in FILE_NAMES:
        text = paths[fmt].read_text()
        head = text[:text.index("2-2-37-37")]
        assert "every dihedral whose four atom classes are the type's" in head, fmt
        assert "no other torsion terms about the member bonds" in head, fmt
        assert "atom classes do not tell bonds apart" in head, fmt
        assert "type 2-2-37-37 acts on 2 quartets about each of 2 bonds" in text, fmt
        assert "other quartets about its bonds (their torsion terms must be zero): A5 A2 D7 D7 (MMFF94 5-2-37-37)" in text
        # hexatriene's central C=C has a 2-2-2-2 quartet too; its other scanned bond is a member, not listed
        assert ("its classes also match dihedrals about other bonds, which get these terms too: hexatriene double bond "
                "3-4 (C2-C3-C4-C5)") in text, fmt
        assert text.count("double bond 3-4") == 1, fmt  # named once, though both member bonds see it
    with paths["members table"].open() as handle:
        rows = {(r["compound"], r["bond"]): r for r in csv.DictReader(handle)}
    assert rows[("styrene", "2-3")]["class_quartets"] == "1-2-3-4 1-2-3-8"
    assert rows[("styrene", "2-3")]["other_quartets"] == "11-2-3-4 11-2-3-8"
    assert rows[("hexatriene", "2-3")]["also_matches_bonds"] == "3-4 4-5"
    # the files still read back
    assert len(parmed.amber.AmberParameterSet(str(paths["amber"])).dihedral_types) == 3  # A2 D7 both ways, A2 A2 A2 A2
    assert len(parmed.charmm.CharmmParameterSet(str(paths["charmm"])).dihedral_types) == 3  # A2 D7 both ways, A2 A2 A2 A2
    assert len(parmed.gromacs.GromacsTopologyFile(str(paths["gromacs"])).parameterset.dihedral_types) == 3  # A2 D7 both ways, A2 A2 A2 A2


def test_smarts_type_acts_on_every_quartet_the_pattern_types(styrenes):
    parameters, _, results = styrenes
    pairs = [(name, results[name]) for name in STYRENES]
    patterns = (parse_pattern("vinyl-aryl", "[C:1]=[C:2]-[c:3]:[c:4]", "cv cv ca ca"),)
    (fit,) = fit_parameter_set(pairs, typing=patterns).types
    mmff = {t.label: t for t in parameters.types}["2-2-37-37"]
    assert max(abs(a.k_kcal_mol - b.k_kcal_mol) for a, b in zip(fit.terms, mmff.terms)) < 1e-9
    quartets = parameter_quartets(list(results.items()), parameters)
    for m in mmff.members:
        residual = bond_residual(results[m.compound], results[m.compound].bond(m.bond))
        assert np.max(np.abs(residual.dihedral_deg(m.dihedral_atoms) - residual.angles_deg)) < 1e-9
        assert sorted(quartets[(m.compound, m.bond)].matching) == sorted(_ortho(results[m.compound]))
