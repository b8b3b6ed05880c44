"""DFT behind the engine interface (engines/dft.py): analytic gradients against finite
differences, the dispersion part on its own, the same energy as re-scoring's single points,
constrained relaxations with the package's optimiser, open shells, charges, electron-count
errors and the reuse of the previous SCF density. Small molecules at small levels (plumbing),
each test a few seconds."""

import numpy as np
import pytest

pytest.importorskip("pyscf")

from scipy.optimize import minimize as scipy_minimize  # noqa: E402

from torsionscan import geometry  # noqa: E402
from torsionscan.coordinate import DihedralConstraint  # noqa: E402
from torsionscan.engines import CHARGE, ENERGY, GRADIENT, SPIN  # noqa: E402
from torsionscan.engines.dft import DftEngine, dispersion, molecule, parse_level  # noqa: E402
from torsionscan.errors import InputError  # noqa: E402
from torsionscan.optimize import Convergence  # noqa: E402
from torsionscan.relax import Relaxer  # noqa: E402
from torsionscan.rescore import PRESETS, single_point  # noqa: E402
from torsionscan.units import ANGSTROM_BOHR, BOHR_ANGSTROM, HARTREE_EV  # noqa: E402

pytestmark = pytest.mark.dft

SMALLEST = "hf-d3bj/sto-3g"  # Hartree-Fock with D3(BJ) in a minimal basis: for plumbing only, never for a number
# formaldehyde, slightly out of plane so that no gradient component vanishes by symmetry (Bohr)
FORMALDEHYDE = (["C", "O", "H", "H"], np.array([[0.0, 0.0, -0.53], [0.02, 0.01, 0.68], [0.0, 0.94, -1.12],
                                                 [0.03, -0.93, -1.11]]) * ANGSTROM_BOHR)
WATER = (["O", "H", "H"], np.array([[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.03, -0.7572, -0.4692]])
         * ANGSTROM_BOHR)
STEP_BOHR = 1e-3  # central differences: truncation ~h^2 |E'''| / 6 ~ 1e-7 and SCF noise ~1e-10 / h ~ 1e-7


def _central_difference(energy, coords, direction, step=STEP_BOHR):
    return (energy(coords + step * direction) - energy(coords - step * direction)) / (2.0 * step)


def _hydrogen_peroxide(dihedral_deg):
    """H-O-O-H with O-O 1.45, O-H 0.97 Angstrom, O-O-H 100 degrees and the given dihedral (Bohr)."""
    oo, oh, angle, phi = 1.45, 0.97, np.radians(100.0), np.radians(dihedral_deg)
    first = [-oh * np.cos(angle), oh * np.sin(angle), 0.0]
    second = [oo + oh * np.cos(angle), oh * np.sin(angle) * np.cos(phi), oh * np.sin(angle) * np.sin(phi)]
    return np.array([first, [0.0, 0.0, 0.0], [oo, 0.0, 0.0], second]) * ANGSTROM_BOHR


def test_the_engine_states_what_it_is():
    engine = DftEngine(*FORMALDEHYDE[:1], PRESETS["standard"])
    assert (engine.name, engine.method) == ("pyscf", "CAM-B3LYP-D3(BJ)/def2-SVP")
    assert engine.capabilities == frozenset({ENERGY, GRADIENT, CHARGE, SPIN}) and engine.evaluations == 0
    assert engine.max_atomic_number == 86  # def2-SVP: H-Rn, with core potentials beyond Kr
    assert DftEngine(["H", "H"], "hf/sto-3g").max_atomic_number == 54  # PySCF's STO-3G ends at Xe
    assert "CAM-B3LYP-D3(BJ)/def2-SVP" in engine.caution and "kcal/mol" in engine.caution
    # def2 beyond Kr replaces the core by the basis's effective core potential: HI keeps 25 + 1 electrons
    hydrogen_iodide = molecule(["H", "I"], [[0.0, 0.0, 0.0], [0.0, 0.0, 3.04]], PRESETS["standard"])
    assert hydrogen_iodide.has_ecp() and hydrogen_iodide.nelectron == 26


def test_the_analytic_gradient_with_dispersion_is_the_derivative_of_the_energy():
    # Hartree-Fock-D3(BJ): every component against a central difference (step 1e-3 Bohr); the
    # measured difference is 6e-7 Hartree/Bohr, the tolerance 2e-6
    symbols, coords = WATER
    engine = DftEngine(symbols, SMALLEST)
    energy, gradient = engine.energy_and_gradient(coords)
    assert gradient.shape == (3, 3) and energy == pytest.approx(engine.energy(coords), abs=1e-9)
    differences = np.array([_central_difference(engine.energy, coords, unit.reshape(3, 3))
                            for unit in np.eye(9)]).reshape(3, 3)
    assert np.abs(gradient - differences).max() < 2e-6
    assert np.abs(gradient.sum(axis=0)).max() < 1e-6  # no net force: translation invariance


def test_the_dft_gradient_includes_the_moving_grid():
    # with a functional the integration grid moves with the atoms; without its response the gradient
    # of B3LYP-D3(BJ) on formaldehyde is 1.7e-5 Hartree/Bohr off a central difference, with it 6e-7.
    # Two random directions (step 1e-3 Bohr along a unit vector), tolerance 2e-6
    symbols, coords = FORMALDEHYDE
    engine = DftEngine(symbols, "b3lyp-d3bj/sto-3g")
    _, gradient = engine.energy_and_gradient(coords)
    for direction in np.random.default_rng(5).normal(size=(2, 4, 3)):
        direction /= np.linalg.norm(direction)
        assert float(np.sum(gradient * direction)) == pytest.approx(
            _central_difference(engine.energy, coords, direction), abs=2e-6)


@pytest.mark.parametrize("text", ["hf-d3bj/sto-3g", "hf-d3zero/sto-3g", "b3lyp-d4/sto-3g"])
def test_the_dispersion_gradient_is_the_derivative_of_the_dispersion_energy(text):
    # the dftd3/dftd4 libraries' analytic gradient against a central difference (step 1e-4 Bohr:
    # the dispersion energy is smooth and cheap, truncation ~1e-10); no SCF involved
    symbols, coords = FORMALDEHYDE
    level = parse_level(text)

    def energy(x):
        return dispersion(molecule(symbols, x, level), level)[0]

    value, gradient = dispersion(molecule(symbols, coords, level), level)
    assert value < 0.0 and gradient.shape == (4, 3)
    differences = np.array([_central_difference(energy, coords, unit.reshape(4, 3), 1e-4)
                            for unit in np.eye(12)]).reshape(4, 3)
    assert np.abs(gradient - differences).max() < 1e-8


def test_the_energy_is_rescorings_single_point():
    symbols, coords = FORMALDEHYDE
    energy, _ = DftEngine(symbols, SMALLEST).energy_and_gradient(coords)
    assert energy == pytest.approx(single_point(symbols, coords * BOHR_ANGSTROM, parse_level(SMALLEST)), abs=1e-8)


def test_a_constrained_relaxation_holds_the_dihedral_and_converges():
    # H-O-O-H held at 90 degrees from a start at 60 (the optimiser first turns it onto the constraint)
    symbols, start = ["H", "O", "O", "H"], _hydrogen_peroxide(60.0)
    engine = DftEngine(symbols, SMALLEST)
    constraint = DihedralConstraint((0, 1, 2, 3), np.radians(90.0))
    result = Relaxer(engine, np.array([1, 8, 8, 1])).relax(start, Convergence(), constraints=[constraint])
    coords = result.x.reshape(-1, 3)
    assert result.converged and result.evaluations <= 10 and engine.evaluations == result.evaluations
    assert np.degrees(geometry.dihedral(coords, 0, 1, 2, 3)) == pytest.approx(90.0, abs=1e-8)
    # stationary under the constraint: the gradient is parallel to the dihedral's normal (Lagrange),
    # checked independently of the optimiser's own projection
    _, gradient = engine.energy_and_gradient(coords)
    normal = geometry.dihedral_gradient(coords, 0, 1, 2, 3).ravel()
    normal /= np.linalg.norm(normal)
    left = gradient.ravel() - (gradient.ravel() @ normal) * normal
    assert np.abs(left).max() < 4.5e-4
    # SciPy's SLSQP reaches the same constrained minimum (measured: 4e-8 Hartree lower, converged tighter);
    # a gradient left below 4.5e-4 Hartree/Bohr on curvatures above ~0.05 Hartree/Bohr^2 leaves <= 2e-6 Hartree
    reference = scipy_minimize(lambda x: engine.energy(x.reshape(-1, 3)), start.ravel(), method="SLSQP",
                               jac=lambda x: engine.energy_and_gradient(x.reshape(-1, 3))[1].ravel(),
                               constraints=[{"type": "eq", "fun": constraint.residual, "jac": constraint.jacobian}],
                               options={"ftol": 1e-10, "maxiter": 200})
    assert reference.success and result.energy == pytest.approx(reference.fun, abs=2e-6)


def test_a_radical_and_a_cation_give_the_ionisation_energy_of_methyl():
    # planar CH3 (C-H 1.079 Angstrom) as a doublet (UKS) and as the closed-shell cation (charge 1)
    # at the standard preset: IE = E(CH3+) - E(CH3) = 9.84 eV (NIST Chemistry WebBook, from memory);
    # B3LYP-type hybrids reproduce ionisation energies to ~0.2 eV (from memory); measured 9.91 eV
    r = 1.079
    coords = np.array([[0.0, 0.0, 0.0]] + [[r * np.cos(a), r * np.sin(a), 0.0]
                                           for a in np.radians([0.0, 120.0, 240.0])]) * ANGSTROM_BOHR
    symbols = ["C", "H", "H", "H"]
    radical = DftEngine(symbols, PRESETS["standard"], unpaired_electrons=1)
    energy, gradient = radical.energy_and_gradient(coords)
    cation = DftEngine(symbols, PRESETS["standard"], charge=1).energy(coords)
    assert (cation - energy) * HARTREE_EV == pytest.approx(9.84, abs=0.3)
    assert np.isfinite(gradient).all() and np.abs(gradient[:, 2]).max() < 1e-7  # planar: no force out of plane


def test_an_impossible_electron_count_is_refused_in_one_line():
    with pytest.raises(InputError, match="9 electrons cannot have 0 unpaired") as error:
        DftEngine(["C", "H", "H", "H"], SMALLEST)  # methyl is a radical
    assert "\n" not in str(error.value)
    with pytest.raises(InputError, match="not covered"):
        DftEngine(["Og"], PRESETS["standard"])


def test_the_second_order_retry_reaches_the_same_energy():
    symbols, coords = FORMALDEHYDE
    reference = DftEngine(symbols, SMALLEST).energy(coords)
    stalled = DftEngine(symbols, SMALLEST)
    stalled.max_scf_cycles = 2  # the first-order SCF stops unconverged: the second-order SCF finishes it
    assert stalled.energy(coords) == pytest.approx(reference, abs=1e-8)


def test_the_previous_density_starts_the_next_scf_after_a_small_move():
    symbols, coords = FORMALDEHYDE
    moved = coords + 0.02 * np.random.default_rng(3).normal(size=coords.shape)  # an optimiser-sized step
    far = coords + np.array([0.0, 0.0, 1.0]) * (np.arange(4) == 2)[:, None]  # O moved 1 Bohr
    level = "b3lyp/sto-3g"

    def cycles_and_energy(engine, previous, now):
        """SCF cycles and energy at `now` right after a calculation at `previous`."""
        engine.energy(previous)
        before = engine.scf_cycles
        energy = engine.energy(now)
        return engine.scf_cycles - before, energy

    warm, warm_energy = cycles_and_energy(DftEngine(symbols, level), coords, moved)
    cold, cold_energy = cycles_and_energy(DftEngine(symbols, level, reuse_guess=False), coords, moved)
    assert warm < cold and warm_energy == pytest.approx(cold_energy, abs=1e-8)
    assert cycles_and_energy(DftEngine(symbols, level), far, moved)[0] == cold  # too far: a fresh start
