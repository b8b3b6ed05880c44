"""Torsion types shared across molecules: typing of scanned bonds, one joint fit per type, and the
leave-one-molecule-out transfer check. Energies in kcal/mol, angles in degrees.

Typing. Either by the MMFF94 atom types of the four dihedral atoms (read in the direction that
gives the smaller tuple, so a quartet and its reverse are one type), or by a table of named SMARTS
patterns with atoms mapped :1 :2 :3 :4 along the dihedral: the first pattern, in table order,
whose mapped atoms are the bond's dihedral quartet (in either direction) types the bond.

Joint fit. Per type, one set of terms sum_n k_n [1 + cos(n phi - delta_n)] fitted to the residuals
E_QM - E_MM,no-torsion (forcefield.bond_residual) of every member bond at once, each bond with its
own constant offset, with the per-bond fit's weighting and ridge (torsionfit.fit_joint_terms).

Quartets. The parameter files are keyed by atom classes, so an MD engine puts a type's terms on
every atom quartet about a member bond whose classes are the type's (in either direction), not
only on the scanned dihedral: styrene's two ortho quartets C=C-C(ar)-C(ar) are both MMFF94
2-2-37-37, about 180 deg apart. The fit, its errors and the member curves therefore use the terms
summed over every such quartet (bond_quartets: for MMFF94 typing the quartets of equal atom types,
for SMARTS typing those the same pattern types first). The bond's other quartets keep their MMFF94
terms removed from the residual, which the files cannot say by class; bond_quartets lists them, and
the class-matching quartets about other bonds of the molecules (a 2-2-2-2 type also matches
dihedrals about C=C double bonds), for the files' header notes.

Transfer check. For every molecule of a type the terms are fitted again without that molecule
and its bonds are evaluated with them; the pooled RMS error of those predictions is the type's
leave-one-out error. A type is not transferable when that error exceeds LEAVE_OUT_LIMIT_KCAL_MOL,
or exceeds LEAVE_OUT_RATIO times the training error by more than NOISE_KCAL_MOL (errors that
small are convergence noise of the profiles, not a failure to transfer).
"""

import math
import re
import time
from dataclasses import dataclass

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdForceFieldHelpers

from .errors import InputError
from .tables import read_csv_table
from .forcefield import bond_residual
from .mm import quartets_about
from .molecule import safe_name  # noqa: F401  (importing molecule also silences RDKit's own error log)
from .records import FitOptions, TorsionParameterSet, TorsionTypeFit, TypeMember
from .torsionfit import boltzmann_weights, fit_joint_terms, profile_errors, quartet_term_energy
from .version import __version__

MMFF94_TYPING = "mmff94"
LEAVE_OUT_RATIO = 2.0
LEAVE_OUT_LIMIT_KCAL_MOL = 0.5
NOISE_KCAL_MOL = 0.05
CLASS_NAME = re.compile(r"[A-Za-z0-9_+*']{1,6}")
_TENS_LETTERS = "ABCDEFGHIJ"


# -- typing ---------------------------------------------------------------------------------------
def mmff94_class(mmff_type):
    """Atom-class name of an MMFF94 atom type (1-99): a letter for the tens (A = 0 ... J = 9) and the
    units digit, e.g. 2 -> "A2", 37 -> "D7"; two characters, as AMBER's files allow."""
    if not 1 <= mmff_type <= 99:
        raise ValueError(f"MMFF94 atom types are 1-99, got {mmff_type}")
    return f"{_TENS_LETTERS[mmff_type // 10]}{mmff_type % 10}"


@dataclass(frozen=True)
class TypePattern:
    """A named SMARTS torsion type: query atoms of map numbers 1..4 and the four atom-class names."""

    name: str
    smarts: str
    query: Chem.Mol
    mapped: tuple[int, int, int, int]  # query atom index of map number 1, 2, 3, 4
    classes: tuple[str, str, str, str]


def _default_classes(row_number):
    """Atom classes of the n-th pattern without a classes cell: a letter per row (A-Z, then a-z) and
    the position 1-4, e.g. row 2 -> B1 B2 B3 B4."""
    letters = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz"
    if row_number > len(letters):
        return None
    return tuple(f"{letters[row_number - 1]}{p}" for p in range(1, 5))


def parse_pattern(name, smarts, classes_text="", row_number=1, where="pattern"):
    """A TypePattern from one table row; InputError when the SMARTS does not parse or does not map
    four atoms bonded in a chain 1-2-3-4."""
    query = Chem.MolFromSmarts(smarts) if smarts else None
    if query is None:
        raise InputError(f"{where} ({name}): SMARTS {smarts!r} does not parse; fix the pattern")
    numbers = [a.GetAtomMapNum() for a in query.GetAtoms()]
    mapped = [n for n in numbers if n]
    if sorted(mapped) != [1, 2, 3, 4]:
        found = ", ".join(f":{n}" for n in mapped) or "none"
        raise InputError(f"{where} ({name}): SMARTS {smarts!r} maps atoms {found}; map exactly four atoms "
                         ":1 :2 :3 :4 along the dihedral, e.g. [C:1]=[C:2]-[C:3]=[C:4]")
    atoms = tuple(numbers.index(n) for n in (1, 2, 3, 4))
    for a, b in zip(atoms, atoms[1:]):
        if query.GetBondBetweenAtoms(a, b) is None:
            raise InputError(f"{where} ({name}): in SMARTS {smarts!r} the mapped atoms are not bonded in the chain "
                             ":1-:2-:3-:4; bond them so the pattern describes a dihedral")
    if classes_text.strip():
        classes = tuple(classes_text.split())
        if len(classes) != 4 or not all(CLASS_NAME.fullmatch(c) for c in classes):
            raise InputError(f"{where} ({name}): classes {classes_text!r} should be four atom-class names of 1-6 "
                             "letters, digits or _+*' separated by spaces, e.g. 'c2 ce ce c2'")
    else:
        classes = _default_classes(row_number)
        if classes is None:
            raise InputError(f"{where} ({name}): more than 52 patterns need their atom-class names in a classes "
                             "column")
    return TypePattern(name, smarts, query, atoms, classes)


def read_type_patterns(path):
    """The TypePatterns of a CSV table with columns name, smarts and optionally classes, in table order."""
    columns, rows = read_csv_table(path, "torsion types", "the torsion types as CSV with columns name,smarts")
    if "name" not in columns or "smarts" not in columns:
        raise InputError(f"{path} needs the columns name and smarts (optionally classes): one torsion type per row")
    if not rows:
        raise InputError(f"{path} lists no torsion type; add rows name,smarts")
    patterns, seen = [], set()
    for number, (line, row) in enumerate(rows, start=1):
        name = (row.get(columns["name"]) or "").strip()
        smarts = (row.get(columns["smarts"]) or "").strip()
        where = f"{path} line {line}"
        if not name:
            raise InputError(f"{where}: the type has no name; give every row a name")
        if name in seen:
            raise InputError(f"{where}: type name {name!r} is used twice; give each type its own name")
        seen.add(name)
        classes = (row.get(columns["classes"]) or "") if "classes" in columns else ""
        patterns.append(parse_pattern(name, smarts, classes, number, where))
    return tuple(patterns)


def pattern_type(patterns, mol, dihedral_atoms):
    """(pattern, reversed) of the first pattern whose mapped atoms are the dihedral (in either
    direction), or None."""
    forward, backward = tuple(dihedral_atoms), tuple(reversed(dihedral_atoms))
    for pattern in patterns:
        for match in mol.GetSubstructMatches(pattern.query, uniquify=False, maxMatches=100000):
            quartet = tuple(match[a] for a in pattern.mapped)
            if quartet == forward:
                return pattern, False
            if quartet == backward:
                return pattern, True
    return None


def mmff94_type(mmff_types):
    """(label, classes, definition, reversed) of the MMFF94 torsion type of four atom types."""
    forward, backward = tuple(mmff_types), tuple(reversed(mmff_types))
    reverse = backward < forward
    key = backward if reverse else forward
    label = "-".join(str(t) for t in key)
    return label, tuple(mmff94_class(t) for t in key), f"MMFF94 atom types {label}", reverse


# -- quartets about a bond -----------------------------------------------------------------------
@dataclass(frozen=True)
class BondQuartets:
    """The atom quartets (0-based) a class-keyed force field relates to one member bond of a type.

    matching: every quartet about the bond with the type's classes, in the type's class order, the
    scanned dihedral first (the type's terms act on each); others: (quartet, its atom classes or
    None, words) of the other quartets about the bond; elsewhere: (bond "j-k", words) of other bonds of the
    molecule with a quartet of the type's classes (the files' terms would act there too).
    """

    matching: tuple[tuple[int, int, int, int], ...]
    others: tuple[tuple[tuple[int, int, int, int], tuple[str, ...] | None, str], ...]
    elsewhere: tuple[tuple[str, str], ...]


def _mmff94_atom_types(mol):
    properties = rdForceFieldHelpers.MMFFGetMoleculeProperties(Chem.Mol(mol), mmffVariant="MMFF94")
    return None if properties is None else [properties.GetMMFFAtomType(i) for i in range(mol.GetNumAtoms())]


def _bond_words(mol, j, k):
    kind = mol.GetBondBetweenAtoms(j, k).GetBondType()
    names = {Chem.BondType.SINGLE: "single", Chem.BondType.DOUBLE: "double", Chem.BondType.TRIPLE: "triple",
             Chem.BondType.AROMATIC: "aromatic"}
    return f"{names.get(kind, str(kind).lower())} bond"


def _all_quartets(mol):
    """(j, k, quartets about j-k) for every bond of mol, j < k."""
    for bond in mol.GetBonds():
        j, k = sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
        quartets = quartets_about(mol, j, k)
        if quartets:
            yield j, k, quartets


def _first_patterns(patterns, mol):
    """{quartet: (pattern, reversed)} of every quartet some pattern maps, as pattern_type finds it
    (the first pattern in table order, the first match of it), in both directions."""
    first = {}
    for pattern in patterns:
        for match in mol.GetSubstructMatches(pattern.query, uniquify=False, maxMatches=100000):
            quartet = tuple(match[a] for a in pattern.mapped)
            if quartet not in first:
                first[quartet], first[quartet[::-1]] = (pattern, False), (pattern, True)
    return first


def bond_quartets(mol, dihedral_atoms, typing=MMFF94_TYPING, atom_types=None):
    """The BondQuartets of the bond whose scanned dihedral is dihedral_atoms (in the type's class order).

    typing: MMFF94_TYPING (atom_types: the molecule's MMFF94 atom types, computed when None) or a
    tuple of TypePatterns, whose first match types a quartet as in collect_members.
    """
    atoms = tuple(dihedral_atoms)
    j, k = atoms[1], atoms[2]
    symbols = [a.GetSymbol() for a in mol.GetAtoms()]

    def numbered(q):
        return "-".join(f"{symbols[a]}{a + 1}" for a in q)

    if typing == MMFF94_TYPING:
        types = atom_types if atom_types is not None else _mmff94_atom_types(mol)
        key = tuple(types[a] for a in atoms)

        def typed(q):  # (type key, q in key order) or None when q has other types
            forward = tuple(types[a] for a in q)
            if forward == key:
                return q
            if forward[::-1] == key:
                return q[::-1]
            return None

        def described(q):
            label, classes, _, _ = mmff94_type([types[a] for a in q])
            return classes, f"{' '.join(classes)} (MMFF94 {label})"
    else:
        first = _first_patterns(typing, mol)
        scanned = first.get(atoms)
        pattern = scanned[0] if scanned else None

        def typed(q):
            found = first.get(q)
            if found is None or found[0] is not pattern:
                return None
            return q[::-1] if found[1] else q

        def described(q):
            found = first.get(q)
            if found is None:
                return None, f"{'-'.join(symbols[a] for a in q)} of no type in the table"
            return found[0].classes, f"{' '.join(found[0].classes)} (type {found[0].name})"

    matching, others = [atoms], []
    for q in quartets_about(mol, j, k):
        if q in (atoms, atoms[::-1]):
            continue
        ordered = typed(q)
        if ordered is not None:
            matching.append(ordered)
        else:
            others.append((q, *described(q)))
    elsewhere = []
    for a, b, quartets in _all_quartets(mol):
        if {a, b} == {j, k}:
            continue
        hits = [q for q in quartets if typed(q) is not None]
        if hits:
            elsewhere.append((f"{a + 1}-{b + 1}", f"{_bond_words(mol, a, b)} {a + 1}-{b + 1} ("
                              + ", ".join(numbered(q) for q in hits) + ")"))
    return BondQuartets(tuple(matching), tuple(others), tuple(elsewhere))


def parameter_quartets(results, parameters, typing=MMFF94_TYPING):
    """{(compound, bond): BondQuartets} of every member of a TorsionParameterSet fitted from results
    ((compound name, ScanResult) pairs) with the same typing: what the parameter files' notes and the
    per-bond forces need beside the record."""
    by_name = dict(results)
    found = {}
    for fit in parameters.types:
        for m in fit.members:
            result = by_name[m.compound]
            types = _mmff94_atom_types(result.mol) if typing == MMFF94_TYPING else None
            found[(m.compound, m.bond)] = bond_quartets(result.mol, m.dihedral_atoms, typing, types)
    return found


# -- members and fits -----------------------------------------------------------------------------
@dataclass(frozen=True)
class Member:
    """A typed bond: where it comes from, its type, its BondResidual and its BondQuartets."""

    compound: str
    bond: str
    label: str
    classes: tuple[str, str, str, str]
    definition: str
    reverse: bool  # the type reads the dihedral backwards
    residual: object  # forcefield.BondResidual
    quartets: BondQuartets | None = None  # None: the scanned dihedral only
    quartet_angles_deg: np.ndarray | None = None  # (points, quartets) of quartets.matching

    @property
    def atoms(self):
        atoms = self.residual.dihedral_atoms
        return tuple(reversed(atoms)) if self.reverse else tuple(atoms)

    @property
    def angles_deg(self):
        """The angles of every class-matching quartet at every point, shape (points, quartets)."""
        if self.quartet_angles_deg is not None:
            return self.quartet_angles_deg
        return np.asarray(self.residual.angles_deg, dtype=float)[:, None]


def collect_members(results, typing=MMFF94_TYPING, quantum="gfn"):
    """(members, left out) of every scanned bond of results ((compound name, ScanResult) pairs).

    typing: MMFF94_TYPING or a tuple of TypePatterns. Left out, as (compound, bond, reason): bonds
    without the quantum profile asked for, molecules MMFF94 cannot type, bonds no pattern matches.
    """
    members, left_out = [], []
    for name, result in results:
        atom_types = None
        for bond in result.bonds:
            try:
                residual = bond_residual(result, bond, quantum)
            except InputError as error:
                reason = str(error)
                if reason.startswith("MMFF94 cannot"):  # the advice of the per-bond fit does not apply here
                    reason = "MMFF94 cannot type or parameterise this molecule"
                left_out.append((name, bond.label, reason))
                continue
            if typing == MMFF94_TYPING:
                label, classes, definition, reverse = mmff94_type(residual.mmff_types)
                atom_types = atom_types or _mmff94_atom_types(result.mol)
            else:
                found = pattern_type(typing, result.mol, bond.dihedral_atoms)
                if found is None:
                    left_out.append((name, bond.label, "no torsion type pattern matches dihedral "
                                     + "-".join(f"{result.symbols[a]}{a + 1}" for a in bond.dihedral_atoms)))
                    continue
                pattern, reverse = found
                label, classes, definition = pattern.name, pattern.classes, f"SMARTS {pattern.smarts}"
            atoms = tuple(reversed(bond.dihedral_atoms)) if reverse else tuple(bond.dihedral_atoms)
            quartets = bond_quartets(result.mol, atoms, typing, atom_types)
            angles = np.column_stack([residual.angles_deg, *(residual.dihedral_deg(q) for q in quartets.matching[1:])])
            members.append(Member(name, bond.label, label, classes, definition, reverse, residual, quartets, angles))
    return members, left_out


def _weights(member, options):
    qm = member.residual.qm_kcal_mol
    return np.ones_like(qm) if options.weight_temperature_k is None else boltzmann_weights(
        qm, options.weight_temperature_k)


def joint_terms(members, options):
    """The JointFit of one set of terms to the residuals of members (each with its own offset), the
    terms acting on every class-matching quartet of each member."""
    return fit_joint_terms([m.angles_deg for m in members], [m.residual.residual_kcal_mol for m in members],
                           options.max_periodicity, options.free_phases, [_weights(m, options) for m in members])


def member_term_energy(member, terms):
    """The terms summed over the member's class-matching quartets at every point, kcal/mol."""
    return quartet_term_energy(terms, member.angles_deg)


def _model_error(member, terms):
    """RMS error (best constant shift) of MM without torsions + terms against the quantum profile."""
    r = member.residual
    return profile_errors(r.qm_kcal_mol, r.mm_without_kcal_mol + member_term_energy(member, terms))[0]


def pooled_rms(errors, counts):
    """The RMS over all points of profiles with RMS errors `errors` and `counts` points each."""
    counts = np.asarray(counts, dtype=float)
    return float(math.sqrt(np.sum(counts * np.asarray(errors, dtype=float) ** 2) / counts.sum()))


def transfer_verdict(rmse_fit, rmse_leave_out, molecules):
    """(transferable or None, words) of the leave-one-molecule-out check."""
    if rmse_leave_out is None:
        return None, "one molecule only: no transfer check possible (add molecules with this type)"
    if rmse_leave_out > LEAVE_OUT_LIMIT_KCAL_MOL:
        return False, (f"not transferable: leave-one-out error {rmse_leave_out:.2f} kcal/mol is above "
                       f"{LEAVE_OUT_LIMIT_KCAL_MOL} kcal/mol")
    if rmse_leave_out > LEAVE_OUT_RATIO * rmse_fit + NOISE_KCAL_MOL:
        return False, (f"not transferable: leave-one-out error {rmse_leave_out:.2f} kcal/mol is more than "
                       f"{LEAVE_OUT_RATIO:g} times the training error {rmse_fit:.2f}")
    return True, f"transfers: leave-one-out {rmse_leave_out:.2f} kcal/mol over {molecules} molecules"


def fit_type(members, options=FitOptions()):
    """The TorsionTypeFit of members that share one type: joint fit, errors, leave-one-molecule-out."""
    first = members[0]
    fit = joint_terms(members, options)
    molecules = list(dict.fromkeys(m.compound for m in members))
    leave_out = {}
    if len(molecules) > 1:
        for molecule in molecules:
            rest = [m for m in members if m.compound != molecule]
            terms = joint_terms(rest, options).terms
            for n, m in enumerate(members):
                if m.compound == molecule:
                    leave_out[n] = _model_error(m, terms)
    records = []
    for n, (m, constant) in enumerate(zip(members, fit.constants_kcal_mol)):
        r = m.residual
        qm, without, full = r.qm_kcal_mol, r.mm_without_kcal_mol, r.mm_full_kcal_mol
        with_fit = without + member_term_energy(m, fit.terms)
        order = np.argsort(r.angles_deg)

        def curve(values):
            return tuple(float(v) for v in (values - np.mean(values - qm))[order])

        records.append(TypeMember(
            compound=m.compound, bond=m.bond, dihedral_atoms=m.atoms, mmff_types=r.mmff_types,
            quantum_profile=r.profile_label, constant_kcal_mol=constant,
            rmse_mm_kcal_mol=profile_errors(qm, full)[0], rmse_without_torsion_kcal_mol=profile_errors(qm, without)[0],
            rmse_fit_kcal_mol=profile_errors(qm, with_fit)[0], rmse_leave_out_kcal_mol=leave_out.get(n),
            profile_angles_deg=tuple(float(a) for a in r.angles_deg[order]),
            qm_kcal_mol=tuple(float(v) for v in qm[order]), mm_with_fit_kcal_mol=curve(with_fit),
            mm_full_kcal_mol=curve(full),
        ))
    counts = [len(m.residual.angles_deg) for m in members]

    def pooled(attribute):
        return pooled_rms([getattr(r, attribute) for r in records], counts)

    rmse_fit = pooled("rmse_fit_kcal_mol")
    rmse_leave_out = pooled("rmse_leave_out_kcal_mol") if leave_out else None
    transferable, verdict = transfer_verdict(rmse_fit, rmse_leave_out, len(molecules))
    return TorsionTypeFit(
        label=first.label, classes=first.classes, definition=first.definition, terms=fit.terms,
        members=tuple(records), molecule_count=len(molecules), point_count=int(sum(counts)),
        rmse_mm_kcal_mol=pooled("rmse_mm_kcal_mol"), rmse_without_torsion_kcal_mol=pooled("rmse_without_torsion_kcal_mol"),
        rmse_fit_kcal_mol=rmse_fit, rmse_leave_out_kcal_mol=rmse_leave_out, transferable=transferable,
        verdict=verdict,
    )


def fit_parameter_set(results, typing=MMFF94_TYPING, options=FitOptions(), quantum="gfn", typing_label=None):
    """The TorsionParameterSet of (compound name, ScanResult) pairs: every typed bond, one fit per type
    (types in order of first appearance). InputError when no bond can be used."""
    started = time.perf_counter()
    options.check()
    members, left_out = collect_members(results, typing, quantum)
    if not members:
        if not left_out:
            raise InputError("the run holds no scanned bond to fit; scan compounds first ('torsionscan batch LIST "
                             "--out RUN')")
        compound, bond, reason = left_out[0]
        raise InputError(f"none of the {len(left_out)} scanned bonds can be fitted ({compound} bond {bond}: {reason})")
    groups = {}
    for m in members:
        groups.setdefault(m.label, []).append(m)
    types = tuple(fit_type(group, options) for group in groups.values())
    return TorsionParameterSet(
        typing=typing_label or (MMFF94_TYPING if typing == MMFF94_TYPING else "SMARTS patterns"),
        mm_model=members[0].residual.mm_model, quantum=quantum, options=options, types=types,
        left_out=tuple(left_out), program=f"torsionscan {__version__}", fit_seconds=time.perf_counter() - started,
    )
