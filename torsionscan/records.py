"""Frozen result records of a scan and their JSON form (the summary schema).

Energies are stored in Hartree (absolute) and converted to kcal/mol relative energies only
when the summary is written; angles are degrees; coordinates are Bohr.
"""

import math
from dataclasses import dataclass, field

import numpy as np

from .profile import FourierFit
from .thermo import RegionPopulations

SCHEMA_VERSION = 1


@dataclass(frozen=True)
class ScanPoint:
    """One relaxed geometry with the dihedral held at `angle_deg`."""

    angle_deg: float
    measured_angle_deg: float
    energy_hartree: float
    converged: bool
    gradient_evaluations: int
    max_gradient: float  # Hartree/Bohr, after removing the constrained direction
    coords_bohr: np.ndarray = field(repr=False)
    mirrored: bool = False  # True: the mirror image of the point at -angle_deg, not computed
    failure: str = ""  # reason when the calculation itself failed (energy is NaN then)
    central_bond_order: float = float("nan")  # Wiberg bond order of the scanned bond, as the engine reports it
    homo_lumo_gap_ev: float = float("nan")


@dataclass(frozen=True)
class Hysteresis:
    """Two sweeps reached different relaxed energies at the same angle."""

    angle_deg: float
    energy_difference_kcal_mol: float


@dataclass(frozen=True)
class StationaryRecord:
    """A minimum or barrier top of the profile, refined beyond the grid."""

    kind: str  # "minimum" or "maximum"
    angle_deg: float  # measured on the refined geometry
    fit_angle_deg: float  # where the Fourier fit puts it
    energy_hartree: float
    refinement: str  # how the energy was obtained
    converged: bool
    coords_bohr: np.ndarray = field(repr=False)
    frequencies_cm1: tuple[float, ...] = ()  # harmonic, ascending, imaginary as negative; () if not computed
    imaginary_count: int | None = None
    imaginary_along_torsion: bool | None = None  # freezing the dihedral removes an imaginary mode
    gibbs_corrections_kcal_mol: tuple[float, ...] = ()  # G - E_el per temperature of the settings


@dataclass(frozen=True)
class Barrier:
    """Energy to go from a minimum over the neighbouring maximum in one direction."""

    from_minimum_deg: float
    over_maximum_deg: float
    to_minimum_deg: float
    height_kcal_mol: float
    converged: bool  # both end points' optimisations converged


@dataclass(frozen=True)
class BondScan:
    """Everything measured for one dihedral."""

    dihedral_atoms: tuple[int, int, int, int]  # 0-based
    conjugated: bool
    symmetric: bool
    points: tuple[ScanPoint, ...]  # full circle, sorted by angle (mirrored points included)
    reference_energy_hartree: float  # zero of all relative energies: the lowest energy found
    fit: FourierFit
    minima: tuple[StationaryRecord, ...]
    maxima: tuple[StationaryRecord, ...]
    barriers: tuple[Barrier, ...]
    populations: tuple[RegionPopulations, ...]
    hysteresis: tuple[Hysteresis, ...]
    gradient_evaluations_total: int
    wall_time_s: float
    rrho_populations: tuple = ()  # freeenergy.RrhoPopulations per temperature (with frequencies)
    planar_scis: StationaryRecord | None = None  # dienes: the planar s-cis structure (with frequencies)
    readiness: tuple = ()  # freeenergy.Readiness per temperature (dienes, with frequencies)
    frequency_gradient_evaluations: int = 0  # spent on Hessians and the planar s-cis structure
    frequency_wall_time_s: float = 0.0

    @property
    def relaxed_points(self):
        """Computed (not mirrored) points with an energy: the frames of the bond's XYZ file, in order."""
        return tuple(p for p in self.points if not p.mirrored and math.isfinite(p.energy_hartree))


@dataclass(frozen=True)
class ScanResult:
    """A scanned molecule: its identity, how it was computed and one BondScan per dihedral."""

    name: str
    smiles: str
    mol: object = field(repr=False)  # RDKit molecule with explicit hydrogens (atom order of all coordinates)
    symbols: tuple[str, ...] = ()
    charge: int = 0
    unpaired_electrons: int = 0
    method: str = ""
    engine: str = ""
    settings: dict = field(default_factory=dict)
    start_energy_hartree: float = float("nan")
    start_coords_bohr: np.ndarray = field(default=None, repr=False)
    start_gradient_evaluations: int = 0
    bonds: tuple[BondScan, ...] = ()
    failed_bonds: tuple[tuple[str, str], ...] = ()  # (bond label, reason) of bonds whose scan failed
