"""The parameter files of fit-set read back by independent libraries: ParmEd reads the AMBER frcmod,
the GROMACS [ dihedraltypes ] and the CHARMM parameter file and sees the fitted force constants,
periodicities and phases (after the unit conversion); OpenMM reads its force-field XML, and the
torsion energy it computes for every member bond at its scan geometries equals the fitted terms
to 1e-6 kcal/mol."""

import io
import math

import numpy as np
import openmm
import parmed
import pytest
from openmm import app, unit

from fitset_helpers import DIENES, ENONE, OTHER_TRUTH, TRUTH, model_scan, with_truth, write_run
from torsionscan import geometry
from torsionscan.output.parameters import FILE_NAMES, MEMBER_FORCES, member_stem
from torsionscan.torsionfit import term_energy
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
