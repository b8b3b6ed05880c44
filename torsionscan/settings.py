"""How a scan is run: the ScanSettings record and its checks."""

import math
import numbers
from dataclasses import asdict, dataclass, field

from .engines import solvation_model
from .errors import InputError
from .optimize import Convergence


MIN_CONFORMERS, MAX_CONFORMERS = 1, 200
MIN_SEED, MAX_SEED = 0, 2**31 - 1
# kelvin: below 1 K the Boltzmann weights underflow; above 5000 K no molecule here is intact
MIN_TEMPERATURE_K, MAX_TEMPERATURE_K = 1.0, 5000.0


def _temperature(value):
    """True for a usable temperature in kelvin."""
    return isinstance(value, numbers.Real) and math.isfinite(value) and MIN_TEMPERATURE_K <= value <= MAX_TEMPERATURE_K


@dataclass(frozen=True)
class ScanSettings:
    """How a scan is run. Angles in degrees, temperatures in kelvin, energies in kcal/mol."""

    step_deg: float = 15.0
    conformers: int = 5
    seed: int = 61453
    method: str = "GFN2-xTB"
    engine: str = "auto"
    temperatures_k: tuple[float, ...] = (298.15,)
    scis_window_deg: float = 30.0
    solvent: str | None = None  # implicit solvent (engines.SOLVENTS) or None for the gas phase
    solvation_model: str | None = None  # "alpb" or "gbsa"; None = ALPB when a solvent is given
    frequencies: bool = True  # harmonic frequencies and free energies at the stationary points
    temperature_range_k: tuple[float, float] = (200.0, 450.0)  # of the populations-vs-temperature plot
    hysteresis_kcal_mol: float = 0.3
    point_convergence: Convergence = field(default_factory=Convergence)
    start_convergence: Convergence = field(
        default_factory=lambda: Convergence(max_gradient=1.5e-4, rms_gradient=1.0e-4)
    )
    # minima and maxima: tight, because torsional gradients near a shallow minimum are tiny
    refine_convergence: Convergence = field(
        default_factory=lambda: Convergence(max_gradient=2.0e-5, rms_gradient=1.5e-5)
    )

    def check(self):
        """Raise InputError for settings that cannot work."""
        steps = 180.0 / self.step_deg if self.step_deg > 0 else 0.0
        if not 1.0 <= self.step_deg <= 90.0 or abs(steps - round(steps)) > 1e-9:
            raise InputError(
                f"--step {self.step_deg:g}: the grid step must be 1 to 90 degrees and divide 180 (e.g. 5, 10, 15, 30)"
            )
        if not MIN_CONFORMERS <= self.conformers <= MAX_CONFORMERS:
            raise InputError(f"--conformers {self.conformers}: give {MIN_CONFORMERS} to {MAX_CONFORMERS} start "
                             "structures (each costs a full GFN-xTB optimisation; 5 is the default)")
        if not MIN_SEED <= self.seed <= MAX_SEED:
            raise InputError(f"--seed {self.seed}: the embedding seed must be a whole number from {MIN_SEED} to "
                             f"{MAX_SEED} (RDKit takes a 32-bit seed)")
        if not self.temperatures_k or not all(_temperature(t) for t in self.temperatures_k):
            raise InputError(f"--temperature values must be finite numbers from {MIN_TEMPERATURE_K:g} to "
                             f"{MAX_TEMPERATURE_K:g} K")
        low, high = self.temperature_range_k
        if not (_temperature(low) and _temperature(high) and low < high):
            raise InputError(f"--temperature-range needs TMIN < TMAX, both from {MIN_TEMPERATURE_K:g} to "
                             f"{MAX_TEMPERATURE_K:g} K")
        if not 0.0 < self.scis_window_deg <= 90.0:
            raise InputError("--scis-window must be between 0 and 90 degrees")
        if self.solvent is not None and not self.solvent.strip():
            raise InputError("--solvent is empty; give a solvent name such as water, or leave the option out "
                             "for the gas phase")
        solvation_model(self.solvent, self.solvation_model)

    def as_dict(self):
        """Plain-data form (every field, nested settings included), for hashing and display."""
        return asdict(self)
