"""Frozen result records of a scan, and their plain-data form (the summary schema).

Every record is a frozen dataclass. ``to_plain(record)`` turns any of them into JSON-ready data
at full precision (non-finite floats as the strings "nan", "inf", "-inf", arrays as nested
lists, the RDKit molecule as a MOL block) and ``from_plain(type, data)`` reads it back, driven by
the field types alone, refusing unknown fields. ``ScanResult.to_dict``/``from_dict`` add the
schema header. Energies are absolute Hartree; relative kcal/mol values are derived
(``relative_kcal_mol``), and rounding happens only in writers. Angles in degrees, coordinates
in Bohr, atom indices 0-based.
"""

import dataclasses
import math
import types
import typing
from dataclasses import dataclass, field

import numpy as np
from rdkit import Chem

from .errors import InputError
from .mm import Quartet
from .profile import FourierFit
from .quality import bond_flags, flag_details
from .reference import ReferenceEnergy
from .rotor import ConformerFreeEnergies, RotorPopulations, WellFundamental
from .settings import ScanSettings
from .thermo import RegionPopulations, is_s_cis
from .torsionfit import DEFAULT_MAX_PERIODICITY, MAX_PERIODICITY, TorsionTerm
from .units import HARTREE_KCAL_MOL

SCHEMA_VERSION = 2
TIE_HARTREE = 1e-8  # energies closer than this count as equal when choosing the lowest minimum


# -- plain-data form ------------------------------------------------------------------------------
def to_plain(value):
    """JSON-ready form of a record (or of any value a record field holds)."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, Chem.Mol):
        return Chem.MolToMolBlock(value, includeStereo=True, kekulize=False, forceV3000=True)
    if isinstance(value, np.ndarray):
        return to_plain(value.tolist())
    if isinstance(value, (list, tuple)):
        return [to_plain(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else str(value)
    if value is None or isinstance(value, str):
        return value
    raise TypeError(f"no plain-data form for {type(value).__name__}")


def _decode(kind, value, where):
    origin, args = typing.get_origin(kind), typing.get_args(kind)
    if origin in (typing.Union, types.UnionType):
        if value is None and type(None) in args:
            return None
        (kind,) = [a for a in args if a is not type(None)]
        return _decode(kind, value, where)
    if value is None and kind not in (object, typing.Any):
        raise InputError(f"summary field {where} is empty; the file is damaged: rerun the scan")
    if dataclasses.is_dataclass(kind):
        return from_plain(kind, value, where)
    if origin is tuple:
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(_decode(args[0], v, f"{where}[{n}]") for n, v in enumerate(value))
        if len(args) != len(value):
            raise InputError(f"summary field {where} has {len(value)} entries, {len(args)} expected")
        return tuple(_decode(a, v, f"{where}[{n}]") for n, (a, v) in enumerate(zip(args, value)))
    if kind is np.ndarray:
        return np.array(value, dtype=float)
    if kind is Chem.Mol:
        mol = Chem.MolFromMolBlock(value, removeHs=False, sanitize=True)
        if mol is None:
            raise InputError(f"summary field {where} is not a readable molecule; rerun the scan")
        return mol
    if kind is float:
        return float(value)
    if kind in (int, bool, str) and not isinstance(value, kind):
        raise InputError(f"summary field {where} should be {kind.__name__}, found {value!r}")
    return value


def from_plain(kind, data, where=None):
    """The record of dataclass `kind` from its plain-data form; InputError for unknown or missing fields."""
    where = where or kind.__name__
    if not isinstance(data, dict):
        raise InputError(f"summary field {where} should be an object; the file is damaged: rerun the scan")
    known = {f.name: f for f in dataclasses.fields(kind)}
    unknown = sorted(set(data) - set(known))
    if unknown:
        raise InputError(f"summary field {where} has unknown entries {', '.join(unknown)}; "
                         "it was written by another torsionscan version")
    hints = typing.get_type_hints(kind)
    values = {}
    for name, spec in known.items():
        if name in data:
            values[name] = _decode(hints[name], data[name], f"{where}.{name}")
        elif spec.default is dataclasses.MISSING and spec.default_factory is dataclasses.MISSING:
            raise InputError(f"summary field {where}.{name} is missing; the file is damaged: rerun the scan")
    return kind(**values)


# -- records --------------------------------------------------------------------------------------
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
    central_bond_order: float = float("nan")  # Wiberg bond order of the scanned bond, if the engine reports it
    homo_lumo_gap_ev: float = float("nan")


@dataclass(frozen=True)
class Hysteresis:
    """Two sweeps reached different relaxed energies at the same angle."""

    angle_deg: float
    energy_difference_kcal_mol: float


@dataclass(frozen=True)
class StationaryRecord:
    """A minimum, barrier top or constrained planar structure of a profile."""

    kind: str  # "minimum", "maximum" or "planar s-cis"
    angle_deg: float  # measured on the refined geometry (or the fit's angle when interpolated)
    fit_angle_deg: float  # where the Fourier fit puts it
    energy_hartree: float
    refinement: str  # how the energy was obtained
    converged: bool
    coords_bohr: np.ndarray | None = field(default=None, repr=False)  # None: interpolated, no structure
    frequencies_cm1: tuple[float, ...] = ()  # harmonic, ascending, imaginary as negative; () if not computed
    imaginary_count: int | None = None
    imaginary_along_torsion: bool | None = None  # freezing the dihedral removes an imaginary mode
    gibbs_corrections_kcal_mol: tuple[float, ...] = ()  # G - E_el per temperature of the settings
    other_modes_gibbs_kcal_mol: tuple[float, ...] = ()  # the same without the torsion mode (projected out)
    # merged from a minimum/maximum pair closer than analysis.FLAT_KCAL_MOL: the profile is flat
    # here, so the harmonic torsion mode may come out of either sign
    flat_region: bool = False


@dataclass(frozen=True)
class Barrier:
    """Energy to go from a minimum over the neighbouring maximum in one direction."""

    from_minimum_deg: float
    over_maximum_deg: float
    to_minimum_deg: float
    height_kcal_mol: float
    converged: bool  # both end points' optimisations converged


@dataclass(frozen=True)
class RrhoPopulations:
    """Conformer populations from free energies of the located minima at one temperature."""

    temperature_k: float
    s_cis: float
    s_trans: float
    delta_g_kcal_mol: float  # -RT ln(s_cis / s_trans)


@dataclass(frozen=True)
class Readiness:
    """Cost of reaching the planar s-cis geometry of a diene from its most stable conformer."""

    temperature_k: float
    delta_g_kcal_mol: float  # G(planar s-cis, torsion frozen) - G(most stable minimum)
    delta_e_kcal_mol: float  # same with electronic energies (lowest-energy minimum)
    boltzmann_factor: float  # exp(-delta_g / RT)


@dataclass(frozen=True)
class Interconversion:
    """Eyring transition-state rates between the s-trans and s-cis regions at one temperature.

    forward: from the lowest s-trans minimum over the lowest barrier top into the s-cis region;
    backward: from the lowest s-cis minimum back. Free-energy barriers in kcal/mol (quasi-RRHO,
    the barrier top's imaginary mode left out); rates per second with the Wigner tunnelling
    factor from the top's imaginary frequency; half_life_s: of the approach to equilibrium,
    ln 2 / (k_forward + k_backward).
    """

    temperature_k: float
    forward_barrier_kcal_mol: float
    backward_barrier_kcal_mol: float
    forward_rate_per_s: float
    backward_rate_per_s: float
    forward_transmission: float
    backward_transmission: float
    half_life_s: float


@dataclass(frozen=True)
class ProfileAnalysis:
    """What one energy profile says: its fit, stationary points, barriers and populations.

    The scan, the re-scored profile and every later level are analysed into this one shape
    (analysis.analyse_profile); the free-energy parts are filled where frequencies were computed.
    """

    reference_energy_hartree: float  # zero of all relative energies: the lowest energy found
    fit: FourierFit | None  # relative energies, kcal/mol; None when only stationary points are known
    minima: tuple[StationaryRecord, ...]
    maxima: tuple[StationaryRecord, ...]
    barriers: tuple[Barrier, ...]
    populations: tuple[RegionPopulations, ...]
    rrho_populations: tuple[RrhoPopulations, ...] = ()
    planar_scis: StationaryRecord | None = None  # dienes: the planar s-cis structure (with frequencies)
    readiness: tuple[Readiness, ...] = ()  # dienes, with frequencies
    rotor_inertia_amu_bohr2: float | None = None  # reduced moment of the torsion at the global minimum
    rotor: tuple[RotorPopulations, ...] = ()  # the torsion as a 1-D quantum hindered rotor on the fit
    wells: tuple[WellFundamental, ...] = ()  # torsional fundamental (and tunnelling splitting) per well
    free_energies: tuple[ConformerFreeEnergies, ...] = ()  # rotor + other modes (harmonic, torsion projected)
    interconversion: tuple[Interconversion, ...] = ()

    def leading_populations(self):
        """The one population answer per temperature, best model first: region free energies from the
        quantum rotor plus the other modes (with frequencies), else the quantum rotor alone, else the
        classical integral. Each entry has temperature_k, s_cis, s_trans and delta_g_kcal_mol."""
        return self.free_energies or self.rotor or self.populations

    @property
    def population_model(self):
        """Words for the model behind leading_populations()."""
        if self.free_energies:
            return "quantum hindered rotor with harmonic other modes"
        if self.rotor:
            return "quantum hindered rotor on the electronic profile"
        return "classical integral over the profile"

    def relative_kcal_mol(self, energy_hartree):
        """An absolute energy (Hartree) relative to this profile's zero, kcal/mol (NaN stays NaN)."""
        return (energy_hartree - self.reference_energy_hartree) * HARTREE_KCAL_MOL

    def lowest_minimum(self, region=None):
        """The lowest minimum, or the lowest in region "s-cis"/"s-trans"; None if there is none."""
        chosen = [m for m in self.minima if math.isfinite(m.energy_hartree)
                  and (region is None or (region == "s-cis") == is_s_cis(m.angle_deg))]
        if not chosen:
            return None
        lowest = min(m.energy_hartree for m in chosen)
        # mirror images tie to rounding: take the first by angle, so the choice is reproducible
        return min((m for m in chosen if m.energy_hartree - lowest < TIE_HARTREE), key=lambda m: m.angle_deg)

    def barrier_to_other_region(self):
        """Lowest barrier from the global minimum into the other region (kcal/mol), or None."""
        best = self.lowest_minimum()
        if best is None:
            return None
        heights = [b.height_kcal_mol for b in self.barriers
                   if abs(b.from_minimum_deg - best.angle_deg) < 1e-3
                   and is_s_cis(b.to_minimum_deg) != is_s_cis(best.angle_deg)]
        return min(heights, default=None)


@dataclass(frozen=True)
class MethodDisagreement:
    """How far a higher-level profile at the same geometries departs from the scan's."""

    rms_kcal_mol: float  # after the best constant shift
    max_kcal_mol: float
    threshold_kcal_mol: float
    warning: str | None  # None when the profiles agree within the threshold in every respect


@dataclass(frozen=True)
class RescoredProfile:
    """Single points of a higher level at the scan's relaxed geometries, analysed like the scan."""

    level: str
    level_reference: str
    energies_hartree: tuple[float, ...]  # one per relaxed point (BondScan.relaxed_points order)
    analysis: ProfileAnalysis  # extrema interpolated on the fit (no structures)
    disagreement: MethodDisagreement
    wall_time_s: float


@dataclass(frozen=True)
class ReferencePoint:
    """The coupled-cluster reference energy of one refined stationary structure."""

    kind: str  # "minimum", "maximum" or "planar s-cis"
    angle_deg: float
    energy: ReferenceEnergy


@dataclass(frozen=True)
class RefinedProfile:
    """The scan's structures re-optimised at a higher level with the dihedral held exactly.

    points_mode "all": every computed grid point re-optimised (mirror images added for symmetric
    profiles) and analysed like the scan, minima and barrier tops refined off-grid at this level;
    "stationary": only the scan's minima, barrier tops and (dienes) planar s-cis structure
    re-optimised: the analysis then has no fit and no integrated populations.
    """

    level: str
    level_reference: str
    points_mode: str
    points: tuple[ScanPoint, ...]  # "all": the re-optimised grid points by angle; "stationary": none
    analysis: ProfileAnalysis
    disagreement: MethodDisagreement | None  # "all": against the scan's profile at the same angles
    gradient_evaluations: int
    wall_time_s: float
    thermal_note: str  # which thermal corrections the free energies use
    reference: tuple[ReferencePoint, ...] = ()  # coupled-cluster estimates at the refined stationary points
    reference_label: str = ""

    def reference_relative_kcal_mol(self, point):
        """A ReferencePoint's energy relative to the lowest reference minimum, kcal/mol (NaN without one)."""
        lowest = min((p.energy.energy_hartree for p in self.reference if p.kind == "minimum"), default=math.nan)
        return (point.energy.energy_hartree - lowest) * HARTREE_KCAL_MOL


@dataclass(frozen=True)
class FitOptions:
    """How torsion terms are fitted: periodicities 1..max_periodicity, phases 0/180 unless free_phases,
    Boltzmann weights exp(-E_QM/RT) at weight_temperature_k if given."""

    max_periodicity: int = DEFAULT_MAX_PERIODICITY
    free_phases: bool = False
    weight_temperature_k: float | None = None

    def check(self):
        """Raise InputError for options that cannot work."""
        if not 1 <= self.max_periodicity <= MAX_PERIODICITY:
            raise InputError(f"--periodicities must be 1 to {MAX_PERIODICITY}")
        if self.weight_temperature_k is not None and not self.weight_temperature_k > 0:
            raise InputError("--weight-temperature must be above 0 K")


@dataclass(frozen=True)
class TorsionFit:
    """Dihedral terms sum_n k_n [1 + cos(n phi - phase_n)] completing an MM model for one bond.

    All terms sit on the scan's dihedral (dihedral_atoms); the MM torsion terms of every quartet
    about the bond were removed before fitting. Profile curves are kcal/mol, each MM curve
    shifted by its best constant onto the quantum one, at profile_angles_deg.
    """

    mm_model: str
    quantum_profile: str  # the method (or level) whose energies were fitted
    dihedral_atoms: tuple[int, int, int, int]
    mmff_types: tuple[int, ...] | None  # MMFF94 types of the dihedral atoms, None for user MM energies
    terms: tuple[TorsionTerm, ...]
    constant_kcal_mol: float
    options: FitOptions
    removed_torsions: tuple[Quartet, ...]  # the MMFF94 torsions taken out (empty for user energies)
    before_model: str
    rmse_before_kcal_mol: float
    max_error_before_kcal_mol: float
    rmse_without_torsion_kcal_mol: float
    max_error_without_torsion_kcal_mol: float
    rmse_after_kcal_mol: float
    max_error_after_kcal_mol: float
    profile_angles_deg: tuple[float, ...]
    qm_kcal_mol: tuple[float, ...]
    mm_without_torsion_kcal_mol: tuple[float, ...]
    mm_with_fit_kcal_mol: tuple[float, ...]
    mm_full_kcal_mol: tuple[float, ...] | None
    fit_seconds: float


@dataclass(frozen=True)
class TypeMember:
    """One scanned bond as a member of a torsion type fitted across molecules (kcal/mol).

    dihedral_atoms (0-based) are in the order of the type's atom classes (the bond's own quartet,
    reversed where the type reads it the other way; the dihedral angle is the same). RMS errors
    are against the quantum profile after the best constant shift: MMFF94 as it is, MMFF94 without
    the bond's torsion terms, with the type's terms, and with the terms fitted without this
    member's molecule (None for a type of one molecule). Curves at profile_angles_deg (sorted),
    each MM curve shifted by its best constant onto the quantum one.
    """

    compound: str
    bond: str  # "j-k", 1-based
    dihedral_atoms: tuple[int, int, int, int]
    mmff_types: tuple[int, ...] | None
    quantum_profile: str  # the method or level whose energies were fitted
    constant_kcal_mol: float  # this profile's own offset in the joint fit
    rmse_mm_kcal_mol: float
    rmse_without_torsion_kcal_mol: float
    rmse_fit_kcal_mol: float
    rmse_leave_out_kcal_mol: float | None
    profile_angles_deg: tuple[float, ...]
    qm_kcal_mol: tuple[float, ...]
    mm_with_fit_kcal_mol: tuple[float, ...]
    mm_full_kcal_mol: tuple[float, ...]


@dataclass(frozen=True)
class TorsionTypeFit:
    """One set of dihedral terms sum_n k_n [1 + cos(n phi - phase_n)] for every bond of a torsion type.

    classes: the atom-class names the parameter files use for the type's four atoms. RMS errors
    pool every member point (each member after its best constant shift); rmse_leave_out_kcal_mol
    is the leave-one-molecule-out error (None with one molecule); transferable is None when that
    check was impossible.
    """

    label: str
    classes: tuple[str, str, str, str]
    definition: str  # what the type is: its MMFF94 atom types or its SMARTS pattern
    terms: tuple[TorsionTerm, ...]
    members: tuple[TypeMember, ...]
    molecule_count: int
    point_count: int
    rmse_mm_kcal_mol: float
    rmse_without_torsion_kcal_mol: float
    rmse_fit_kcal_mol: float
    rmse_leave_out_kcal_mol: float | None
    transferable: bool | None
    verdict: str  # the transfer check in words


@dataclass(frozen=True)
class TorsionParameterSet:
    """Torsion types fitted across the compounds of a run, and the bonds left out (with the reason)."""

    typing: str  # "mmff94" or the SMARTS pattern file
    mm_model: str
    quantum: str  # "gfn", "rescored" or "refined"
    options: FitOptions
    types: tuple[TorsionTypeFit, ...]
    left_out: tuple[tuple[str, str, str], ...]  # (compound, bond "j-k", reason)
    program: str
    fit_seconds: float


@dataclass(frozen=True)
class BondScan:
    """Everything measured for one dihedral."""

    dihedral_atoms: tuple[int, int, int, int]
    conjugated: bool
    symmetric: bool  # E(phi) = E(-phi): half the circle computed, the rest mirrored
    points: tuple[ScanPoint, ...]  # full circle, sorted by angle (mirrored points included)
    profile: ProfileAnalysis
    hysteresis: tuple[Hysteresis, ...]
    hysteresis_threshold_kcal_mol: float
    gradient_evaluations_total: int  # the two sweeps and the refinement of the stationary points
    wall_time_s: float
    sweep_gradient_evaluations: int = 0  # of gradient_evaluations_total, the two sweeps'
    frequency_gradient_evaluations: int = 0  # spent on Hessians and the planar s-cis structure
    frequency_wall_time_s: float = 0.0
    rescored: RescoredProfile | None = None
    refined: RefinedProfile | None = None
    torsion_fit: TorsionFit | None = None
    scis_meaning: str = ""  # which fragments 0 deg puts syn, e.g. "s-cis: C1=C2 syn to C3=C4" (1-based)
    symmetric_rotor: bool = False  # equivalent ortho sides, confirmed E(phi) = E(180 - phi): no s-cis/s-trans split

    @property
    def label(self):
        """1-based label "j-k" of the central bond, as on the command line."""
        return f"{self.dihedral_atoms[1] + 1}-{self.dihedral_atoms[2] + 1}"

    @property
    def dihedral_atom_numbers(self):
        """The dihedral's atoms i, j, k, l as 1-based atom numbers (dihedral_atoms holds 0-based indices)."""
        return tuple(int(a) + 1 for a in self.dihedral_atoms)

    @property
    def flags(self):
        """Names of the raised quality flags (quality.FLAG_MEANINGS), () when none."""
        return bond_flags(self)

    @property
    def flag_details(self):
        """[(flag, what was found)] of the raised quality flags."""
        return flag_details(self)

    def relative_kcal_mol(self, record):
        """A ScanPoint's or StationaryRecord's energy relative to the profile's zero, kcal/mol."""
        return self.profile.relative_kcal_mol(record.energy_hartree)

    def points_table(self):
        """One plain row per point of the full circle (mirror images included): angle_deg,
        energy_kcal_mol (relative to the profile's zero), energy_hartree, converged, mirrored."""
        return [{"bond": self.label, "angle_deg": p.angle_deg, "energy_kcal_mol": self.relative_kcal_mol(p),
                 "energy_hartree": p.energy_hartree, "converged": p.converged, "mirrored": p.mirrored}
                for p in self.points]

    def stationary_table(self):
        """One plain row per minimum and barrier top (and the planar s-cis structure when computed):
        kind, angle_deg, energy_kcal_mol (relative), energy_hartree, imaginary_count, flat_region, converged."""
        records = [*self.profile.minima, *self.profile.maxima]
        if self.profile.planar_scis is not None:
            records.append(self.profile.planar_scis)
        return [{"bond": self.label, "kind": m.kind, "angle_deg": m.angle_deg,
                 "energy_kcal_mol": self.relative_kcal_mol(m), "energy_hartree": m.energy_hartree,
                 "imaginary_count": m.imaginary_count, "flat_region": m.flat_region, "converged": m.converged}
                for m in sorted(records, key=lambda m: m.angle_deg)]

    def summary_row(self):
        """The bond's answer as one plain row (full precision): atoms (1-based), global minimum,
        barrier into the other region, per temperature the leading s-cis share in percent and
        ΔG(s-cis − s-trans), the planar s-cis cost of a diene, the population model and the flags.
        A symmetric rotor has no s-cis values (None)."""
        profile = self.profile
        lowest = profile.lowest_minimum()
        row = {"bond": self.label, "dihedral_atoms": "-".join(str(n) for n in self.dihedral_atom_numbers),
               "global_min_deg": None if lowest is None else lowest.angle_deg,
               "barrier_kcal_mol": None if self.symmetric_rotor else profile.barrier_to_other_region(),
               "symmetric_rotor": self.symmetric_rotor}
        leading = () if self.symmetric_rotor else profile.leading_populations()
        for p in leading:
            row[f"s_cis_pct_{p.temperature_k:g}K"] = 100.0 * p.s_cis
            row[f"dG_scis_minus_strans_{p.temperature_k:g}K_kcal_mol"] = p.delta_g_kcal_mol
        for r in () if self.symmetric_rotor else profile.readiness:
            row[f"dG_to_planar_scis_{r.temperature_k:g}K_kcal_mol"] = r.delta_g_kcal_mol
        row["population_model"] = profile.population_model if leading else None
        row["flags"] = ", ".join(self.flags)
        return row

    def __repr__(self):
        row = self.summary_row()
        shares = [f"s-cis {v:.1f}% at {k[len('s_cis_pct_'):-1]} K" for k, v in row.items()
                  if k.startswith("s_cis_pct_")]
        barrier = row["barrier_kcal_mol"]
        parts = [f"bond {self.label} (atoms {row['dihedral_atoms']})", *shares[:1]]
        if barrier is not None:
            parts.append(f"barrier {barrier:.2f} kcal/mol")
        if self.symmetric_rotor:
            parts.append("symmetric rotor")
        parts.append(f"flags: {row['flags'] or 'none'}")
        return f"<BondScan {', '.join(parts)}>"

    @property
    def relaxed_points(self):
        """Computed (not mirrored) points with an energy: the frames of the bond's XYZ file, in order."""
        return tuple(p for p in self.points if not p.mirrored and math.isfinite(p.energy_hartree))

    def points_with_frames(self):
        """(point, frame index into relaxed_points) for every point with an energy; a mirrored point
        gets the frame of its mirror image."""
        frames = {round(p.angle_deg % 360.0, 6): n for n, p in enumerate(self.relaxed_points)}
        pairs = []
        for p in self.points:
            if not math.isfinite(p.energy_hartree):
                continue
            n = frames.get(round((-p.angle_deg if p.mirrored else p.angle_deg) % 360.0, 6))
            if n is not None:
                pairs.append((p, n))
        return pairs


@dataclass(frozen=True)
class ScanResult:
    """A scanned molecule: its identity, how it was computed and one BondScan per dihedral."""

    name: str
    smiles: str
    mol: Chem.Mol = field(repr=False)  # with explicit hydrogens, in the atom order of all coordinates
    symbols: tuple[str, ...]
    charge: int
    unpaired_electrons: int
    method: str  # the engine's method name, e.g. "GFN2-xTB"
    engine: str  # the implementation that computed it
    caution: str  # the engine's statement of what the numbers are worth
    program: str  # "torsionscan <version>"
    settings: ScanSettings
    start_energy_hartree: float
    start_coords_bohr: np.ndarray = field(repr=False)
    start_gradient_evaluations: int = 0
    bonds: tuple[BondScan, ...] = ()
    failed_bonds: tuple[tuple[str, str], ...] = ()  # (bond label, reason) of bonds whose scan failed

    def bond(self, label):
        """The BondScan of bond "j-k" (1-based); InputError naming the scanned bonds otherwise."""
        for bond in self.bonds:
            if bond.label == label:
                return bond
        scanned = ", ".join(b.label for b in self.bonds) or "none"
        raise InputError(f"{self.name} has no scan of bond {label}; it holds {scanned}")

    def table(self, kind="bonds"):
        """Plain rows (dicts) for a notebook: kind "bonds" one row per scanned bond
        (BondScan.summary_row, with the compound's name), "points" one per scan point,
        "stationary" one per stationary point; energies relative in kcal/mol, atoms 1-based."""
        makers = {"bonds": lambda b: [b.summary_row()], "points": BondScan.points_table,
                  "stationary": BondScan.stationary_table}
        if kind not in makers:
            raise InputError(f"no table {kind!r}: choose one of {', '.join(makers)}")
        return [{"name": self.name, **row} for bond in self.bonds for row in makers[kind](bond)]

    def to_dataframe(self, kind="bonds"):
        """table(kind) as a pandas DataFrame (needs pandas: pip install "torsionscan[notebook]")."""
        try:
            import pandas
        except ImportError:
            raise InputError('to_dataframe needs pandas: pip install pandas (or "torsionscan[notebook]"); '
                             "table() gives the same rows without it") from None
        return pandas.DataFrame(self.table(kind))

    def __repr__(self):
        lines = [f"<ScanResult {self.name} {self.smiles}: {self.method} via {self.engine}, "
                 f"{len(self.bonds)} bond{'' if len(self.bonds) == 1 else 's'} scanned"
                 + (f", {len(self.failed_bonds)} failed" if self.failed_bonds else "")]
        lines += [f"  {bond!r}" for bond in self.bonds]
        lines += [f"  bond {label} failed: {reason}" for label, reason in self.failed_bonds]
        return "\n".join(lines) + ">"

    def to_dict(self):
        """The summary: schema header plus every field at full precision (JSON-ready)."""
        return {"schema_version": SCHEMA_VERSION, **to_plain(self)}

    @classmethod
    def from_dict(cls, data):
        """Parse a summary written by to_dict; InputError for another schema version or a damaged one."""
        if not isinstance(data, dict) or "schema_version" not in data:
            raise InputError("not a torsionscan summary (no schema_version); give the summary.json of a scan")
        version = data["schema_version"]
        if version != SCHEMA_VERSION:
            raise InputError(f"summary schema version {version} is not the one this torsionscan reads "
                             f"({SCHEMA_VERSION}); rerun the scan with this version")
        try:
            return from_plain(cls, {k: v for k, v in data.items() if k != "schema_version"})
        except InputError:
            raise
        except (TypeError, ValueError, KeyError, IndexError, AttributeError) as error:  # a value of the wrong kind
            raise InputError(f"the summary is damaged (a value of the wrong kind: {error}); rerun the scan") from None
