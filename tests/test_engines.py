"""The two GFN2-xTB implementations behind the engine interface: agreement, units, errors."""

import numpy as np
import pytest

from torsionscan.engines import available_backends, make_engine
from torsionscan.errors import InputError
from torsionscan.molecule import load_molecule, starting_structures
from torsionscan.units import ANGSTROM_BOHR

pytestmark = pytest.mark.xtb

BOTH = pytest.mark.skipif(
    set(available_backends()) != {"xtb-python", "tblite"}, reason="needs both xtb-python and tblite"
)


@pytest.fixture(scope="module")
def acrolein():
    molecule = load_molecule("C=CC=O")
    coords = starting_structures(molecule, count=1)[0] * ANGSTROM_BOHR
    return molecule, coords


@BOTH
def test_xtb_python_and_tblite_agree(acrolein):
    # two independent implementations of GFN2-xTB (Bannwarth, Ehlert, Grimme, JCTC 2019) must agree
    molecule, coords = acrolein
    results = [
        make_engine(molecule.numbers, backend=name).energy_and_gradient(coords)
        for name in ("xtb-python", "tblite")
    ]
    assert abs(results[0][0] - results[1][0]) <= 1e-6
    assert np.abs(results[0][1] - results[1][1]).max() <= 1e-6


@pytest.mark.parametrize("backend", available_backends())
def test_gradient_is_the_derivative_of_the_energy_in_hartree_per_bohr(acrolein, backend):
    molecule, coords = acrolein
    engine = make_engine(molecule.numbers, backend=backend)
    _, gradient = engine.energy_and_gradient(coords)
    step = 1e-4  # Bohr
    for atom, axis in [(0, 0), (2, 1), (3, 2), (5, 0)]:
        plus, minus = coords.copy(), coords.copy()
        plus[atom, axis] += step
        minus[atom, axis] -= step
        numeric = (engine.energy_and_gradient(plus)[0] - engine.energy_and_gradient(minus)[0]) / (2 * step)
        assert numeric == pytest.approx(gradient[atom, axis], abs=2e-6)


def test_warm_start_gives_the_same_energy_as_a_cold_start(acrolein):
    molecule, coords = acrolein
    engine = make_engine(molecule.numbers)
    engine.energy_and_gradient(coords * 1.01)
    warm = engine.energy_and_gradient(coords)[0]
    cold = make_engine(molecule.numbers).energy_and_gradient(coords)[0]
    assert warm == pytest.approx(cold, abs=1e-7)


@pytest.mark.parametrize("backend", available_backends())
def test_loose_relaxations_get_gradients_precise_to_a_small_share_of_their_threshold(acrolein, backend):
    molecule, coords = acrolein
    displaced = coords + np.random.default_rng(3).normal(scale=0.02, size=coords.shape)
    tight_engine, loose_engine = (make_engine(molecule.numbers, backend=backend) for _ in range(2))
    loose_engine.resolve_gradients_to(4.5e-4)  # a scan point's convergence threshold (Hartree/Bohr)
    tight = [tight_engine.energy_and_gradient(c) for c in (coords, displaced)]
    loose = [loose_engine.energy_and_gradient(c) for c in (coords, displaced)]
    errors = [np.abs(t[1] - l[1]).max() for t, l in zip(tight, loose)]
    # the setting reaches the library (the SCF really is looser), and the gradient error stays
    # within 1 % of the threshold the relaxation tests
    assert 1e-9 < max(errors) < 4.5e-6
    assert max(abs(t[0] - l[0]) for t, l in zip(tight, loose)) < 1e-7
    loose_engine.resolve_gradients_to(None)  # back to the precision finite differences need
    again = loose_engine.energy_and_gradient(displaced)[1]
    assert np.abs(again - tight[1][1]).max() < 2e-7


def test_a_relaxation_asks_for_the_precision_of_its_threshold_and_gives_it_back(acrolein):
    from torsionscan.optimize import Convergence
    from torsionscan.relax import Relaxer

    molecule, coords = acrolein
    engine = make_engine(molecule.numbers)
    asked, resolve = [], engine.resolve_gradients_to
    engine.resolve_gradients_to = lambda tolerance: (asked.append((tolerance, engine.evaluations)), resolve(tolerance))
    Relaxer(engine, molecule.numbers).relax(coords, Convergence(max_gradient=4.5e-4, rms_gradient=3.0e-4))
    assert asked == [(4.5e-4, 0), (None, engine.evaluations)] and engine.evaluations > 1
    assert engine.accuracy == engine.TIGHT_ACCURACY


def test_gfn1_is_selectable_and_differs_from_gfn2(acrolein):
    molecule, coords = acrolein
    gfn1 = make_engine(molecule.numbers, method="GFN1-xTB").energy_and_gradient(coords)[0]
    gfn2 = make_engine(molecule.numbers).energy_and_gradient(coords)[0]
    assert gfn1 < 0 and gfn2 < 0 and abs(gfn1 - gfn2) > 0.1


def test_odd_electron_count_needs_unpaired_electrons():
    with pytest.raises(InputError, match="unpaired"):
        make_engine([6, 1, 1, 1])  # methyl radical without --unpaired-electrons
    make_engine([6, 1, 1, 1], unpaired_electrons=1)


def test_element_outside_gfn_parametrisation_is_refused():
    with pytest.raises(InputError, match="not covered"):
        make_engine([6, 92])


def test_unknown_method_and_engine_are_refused():
    with pytest.raises(InputError, match="method"):
        make_engine([1, 1], method="PM7")
    with pytest.raises(InputError, match="engine"):
        make_engine([1, 1], backend="quantum-magic")


@BOTH
def test_gbsa_water_agrees_between_the_two_libraries(acrolein):
    molecule, coords = acrolein
    results = [
        make_engine(molecule.numbers, backend=name, solvent="water", solvation="gbsa").energy_and_gradient(coords)
        for name in ("xtb-python", "tblite")
    ]
    assert abs(results[0][0] - results[1][0]) <= 1e-6
    assert np.abs(results[0][1] - results[1][1]).max() <= 1e-6


def test_a_solvent_lowers_the_energy_of_a_polar_molecule(acrolein):
    molecule, coords = acrolein
    gas, _ = make_engine(molecule.numbers).energy_and_gradient(coords)
    water, _ = make_engine(molecule.numbers, solvent="water").energy_and_gradient(coords)
    assert water < gas  # solvation free energy of a polar solute in water is negative (common knowledge)


@pytest.mark.parametrize(
    "options, words",
    [
        ({"solvent": "seawater"}, "unknown solvent 'seawater'; choose one of: acetone"),
        ({"solvent": "octanol", "solvation": "gbsa"}, "GBSA has no parameters for octanol"),
        ({"solvent": "water", "solvation": "pcm"}, "unknown solvation model"),
        ({"solvation": "alpb"}, "--solvation-model needs --solvent"),
    ],
)
def test_solvent_choices_that_cannot_work_are_explained(acrolein, options, words):
    molecule, _ = acrolein
    with pytest.raises(InputError, match=words):
        make_engine(molecule.numbers, **options)


@pytest.mark.skipif("xtb-python" not in available_backends(), reason="needs xtb-python")
def test_alpb_is_refused_for_xtb_python(acrolein):
    molecule, _ = acrolein
    with pytest.raises(InputError, match="xtb-python offers only GBSA"):
        make_engine(molecule.numbers, backend="xtb-python", solvent="water")


@pytest.mark.parametrize("backend", available_backends())
def test_conjugation_reuses_the_last_calculation(acrolein, backend):
    molecule, coords = acrolein
    engine = make_engine(molecule.numbers, backend=backend)
    engine.energy_and_gradient(coords)
    order, gap = engine.conjugation(coords, 1, 2)
    assert engine.evaluations == 1
    # a C-C single bond between two pi systems: Wiberg order a little above 1 (common knowledge)
    assert 1.0 < order < 1.3 and 1.0 < gap < 6.0
    engine.conjugation(coords + 0.01, 1, 2)
    assert engine.evaluations == 2


@pytest.mark.xtb
@pytest.mark.parametrize("backend", ["xtb-python", "tblite"])
def test_gradients_from_a_reference_do_not_depend_on_their_order(backend):
    from torsionscan.molecule import load_molecule, starting_structures
    from torsionscan.units import ANGSTROM_BOHR

    molecule = load_molecule("C=CC=O")
    start = starting_structures(molecule, 1)[0] * ANGSTROM_BOHR
    displaced = [start + np.random.default_rng(n).normal(scale=0.005, size=start.shape) for n in range(6)]
    engine = make_engine(molecule.numbers, backend=backend)
    forward = engine.gradients_from_reference(start, displaced)
    backward = engine.gradients_from_reference(start, displaced[::-1])[::-1]
    alone = [make_engine(molecule.numbers, backend=backend).gradients_from_reference(start, [d])[0] for d in displaced]
    assert all(np.array_equal(a, b) and np.array_equal(a, c) for a, b, c in zip(forward, backward, alone))
    # and they are the converged gradients: a warm-started chain agrees to the SCF accuracy
    chained = [engine.energy_and_gradient(d)[1] for d in displaced]
    assert max(np.abs(a - b).max() for a, b in zip(forward, chained)) < 1e-6
    assert engine.evaluations == 2 * 7 + 6
