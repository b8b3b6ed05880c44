"""Reading molecules, finding conjugated single bonds, choosing dihedral atoms, 3D start structures.

Atom indices inside the package are 0-based (RDKit's); the user interface shows and accepts
1-based atom numbers. Coordinates from RDKit are in Angstrom.

Dihedral atom rule. For a single bond j-k the outer atom on each side is a pi-bond partner of
the bond atom: a neighbour joined to it by a double or aromatic bond that is double in at
least one Kekulé structure (pauling_bond_orders > 0), so 0 deg means the two pi bonds are
eclipsed (s-cis) and 180 deg means they are anti (s-trans). A ring atom bonded only by sigma
bonds in every Kekulé structure (furan O, thiophene S, pyrrole N) is never the reference: for
2-vinylfuran the dihedral is C=C-C2=C3, the diene path through the ring. Where several partners remain they are ranked by
1. higher atomic number (pyridin-2-yl: N before C3);
2. larger Pauling bond order, the fraction of Kekulé structures in which the bond is double
   (naphthalen-2-yl: C1, 2/3, before C3, 1/3);
3. more heavy-atom neighbours (a substituted ortho carbon before an unsubstituted one);
4. lower canonical atom rank (RDKit CanonicalRankAtoms with tie breaking).
Every criterion is a property of the molecular graph, so the choice, mapped to canonical atoms,
does not depend on how the input numbers its atoms. Where the candidates left for criterion 4
are symmetry-equivalent (equal canonical rank without tie breaking: the ortho atoms of phenyl
or of 2,6-xylyl) either choice describes the same chemistry and the rank only fixes which one is
named. Where they are not (the two ortho carbons of 3-tolyl) the rank is a fixed convention;
TorsionBond.scis_meaning states which fragment 0 deg refers to. A bond atom without any pi
partner (a bond chosen by hand, pyrrole N) takes the best-ranked of its other neighbours by the
same criteria. `--bond i-j-k-l` names all four atoms and overrides the rule.
"""

import os
import re
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import numpy as np
from rdkit import Chem, RDLogger
from rdkit.Chem import AllChem, rdDetermineBonds

from .errors import InputError

RDLogger.DisableLog("rdApp.*")

_PI_BOND_TYPES = (Chem.BondType.DOUBLE, Chem.BondType.AROMATIC)
_FILE_SUFFIXES = {".sdf": "sdf", ".sd": "sdf", ".mol": "sdf", ".xyz": "xyz"}
_NUMBER_PROP = "_torsionscan_number"
COINCIDENT_ANGSTROM = 0.01  # two input atoms closer than this are one place given twice
MIN_DISTANCE_ANGSTROM = 0.5  # shorter than any bond (H2: 0.74 A)
LARGE_ATOMS = 60  # above this a scan gets a warning with its expected time
MAX_ATOMS = 300  # above this a scan is refused unless forced (--allow-large)
# Scan cost, measured on one core (xtb-python, 2-core machine shared): a warm-started GFN2-xTB gradient
# takes 0.14 s at 64 atoms, 0.43 s at 124, 0.85 s at 184 (about 2.5-3.5e-5 N^2 s); whole 30-degree scans
# with frequencies of C=CC=C-(CH2)n-H took 84 s at 34 atoms (1279 gradients, 1070 of them frequencies)
# and 236 s at 64 atoms (1742 gradients, 1557 frequencies: 24-31 N), 0.135 s per gradient at 64 atoms.
GRADIENT_S_PER_ATOM2 = 3.3e-5
SCAN_GRADIENTS = 450  # five start structures and a 15-degree scan of one bond
FREQUENCY_GRADIENTS_PER_ATOM = 17  # 3.5N per distinct stationary point (0.63 of 6N on the demo list), four to five


@dataclass(frozen=True)
class Molecule:
    """A molecule to scan: RDKit graph with explicit hydrogens, charge and spin, optional 3D input."""

    name: str
    mol: Chem.Mol
    charge: int
    unpaired_electrons: int
    input_coords_angstrom: np.ndarray | None = None

    @property
    def numbers(self):
        """Atomic numbers, shape (N,)."""
        return np.array([atom.GetAtomicNum() for atom in self.mol.GetAtoms()])

    @property
    def smiles(self):
        """Canonical SMILES without explicit hydrogens."""
        return Chem.MolToSmiles(Chem.RemoveHs(self.mol))

    @property
    def symbols(self):
        return [atom.GetSymbol() for atom in self.mol.GetAtoms()]

    @property
    def has_stereocentres(self):
        """True if any tetrahedral stereocentre (assigned or not) exists: the profile need not be symmetric."""
        centres = Chem.FindMolChiralCenters(self.mol, includeUnassigned=True, useLegacyImplementation=False)
        return bool(centres)


@dataclass(frozen=True)
class TorsionBond:
    """A rotatable single bond j-k and its dihedral i-j-k-l (0-based atom indices).

    scis_meaning: which fragments 0 deg puts syn, e.g. "s-cis: C1=C2 syn to C3=C4" (1-based
    numbers; "=" joins a pi partner, "–" a sigma-only neighbour). symmetric_rotor_candidate:
    the two other neighbours of j (or of k) are topologically equivalent, so E(phi) =
    E(180 deg - phi) is expected (phenyl, not 3-thienyl); a candidate, to be confirmed on the profile.
    """

    atoms: tuple[int, int, int, int]
    conjugated: bool
    scis_meaning: str = ""
    symmetric_rotor_candidate: bool = False

    @property
    def label(self):
        """1-based bond label as used on the command line, e.g. "3-4"."""
        return f"{self.atoms[1] + 1}-{self.atoms[2] + 1}"


def safe_name(text):
    """A file-system-safe name derived from free text (SMILES, titles)."""
    cleaned = re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("._")
    return cleaned[:60] or "molecule"


def _looks_like_path(text):
    return Path(text).suffix.lower() in _FILE_SUFFIXES


def _check_single_molecule(mol, what):
    if mol.GetNumAtoms() == 0:
        raise InputError(f"{what} holds no atoms; give a structure with atoms")
    fragments = Chem.GetMolFrags(mol)
    if len(fragments) > 1:
        raise InputError(
            f"{what} contains {len(fragments)} separate molecules; give one molecule (remove salts/solvents)"
        )


def _check_coordinates(coords, symbols, what):
    """InputError when two atoms of input coordinates (Angstrom) sit closer than any bond."""
    coords = np.asarray(coords, dtype=float)
    if len(coords) < 2:
        return
    distances = np.linalg.norm(coords[:, None, :] - coords[None, :, :], axis=-1)
    distances[np.diag_indices(len(coords))] = np.inf
    a, b = sorted(np.unravel_index(int(np.argmin(distances)), distances.shape))
    closest = float(distances[a, b])
    names = f"atoms {a + 1} ({symbols[a]}) and {b + 1} ({symbols[b]})"
    if closest < COINCIDENT_ANGSTROM:
        raise InputError(f"{what}: {names} coincide ({closest:.3f} \u00c5 apart); fix the coordinates")
    if closest < MIN_DISTANCE_ANGSTROM:
        raise InputError(f"{what}: {names} are only {closest:.2f} \u00c5 apart, closer than any bond; "
                         "fix the coordinates")


def _read_bytes(path, kind):
    """The bytes of a molecule file; one-line InputError for a folder, a missing, unreadable or empty file."""
    if path.is_dir():
        raise InputError(f"{path} is a directory, not a molecule file; give a .sdf, .mol or .xyz file")
    if not path.exists():
        raise InputError(f"file not found: {path}; check the path")
    if not path.is_file():
        raise InputError(f"{path} is not a regular file; give a .sdf, .mol or .xyz file")
    try:
        data = path.read_bytes()
    except OSError as error:
        raise InputError(f"{path} cannot be read ({error.strerror}); check its permissions") from None
    if not data.strip():
        raise InputError(f"{path} is empty; give a file with a structure")
    if b"\0" in data:
        raise InputError(f"{path} is a binary file, not {kind} text; give a text .sdf, .mol or .xyz file")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        return data.decode("latin-1")  # MOL/XYZ content is ASCII; only titles and data fields may be other text


def _read_sdf(path, record):
    if record < 1:
        raise InputError("--record counts from 1")
    supplier = Chem.SDMolSupplier()
    supplier.SetData(_read_bytes(path, "MOL/SDF"), removeHs=False, sanitize=True)
    count = 0
    for index, mol in enumerate(supplier, start=1):
        count = index
        if index == record:
            if mol is None:
                raise InputError(f"{path}: record {record} could not be read (bad structure block); fix the file")
            if mol.GetNumAtoms() == 0:
                raise InputError(f"{path}: record {record} holds no atoms; give a structure with atoms")
            return mol, (mol.GetProp("_Name").strip() if mol.HasProp("_Name") else "")
    if count == 0:
        raise InputError(f"{path}: no readable molecule records; is it an MDL MOL/SDF file?")
    raise InputError(f"{path}: has {count} record(s), cannot take record {record}; check --record")


def _read_xyz(path, charge):
    mol = Chem.MolFromXYZBlock(_read_bytes(path, "XYZ"))
    if mol is None or mol.GetNumAtoms() == 0:
        raise InputError(f"{path}: not a readable XYZ file (atom count line, comment line, 'El x y z' lines)")
    _check_coordinates(mol.GetConformer().GetPositions(), [a.GetSymbol() for a in mol.GetAtoms()], str(path))
    try:
        rdDetermineBonds.DetermineBonds(mol, charge=charge)
    except Exception as error:  # RDKit raises plain ValueError/RuntimeError here
        raise InputError(
            f"{path}: could not assign bonds from the coordinates ({error}); check --charge or use SDF input"
        ) from None
    return mol


def _input_coords(mol):
    """Angstrom coordinates of a molecule's 3D conformer, or None."""
    if mol.GetNumConformers() and mol.GetConformer().Is3D():
        return mol.GetConformer().GetPositions()
    return None


def _read_file(path, charge, record):
    """(RDKit molecule, 3D coordinates or None, default name, description) of a MOL/SDF/XYZ file."""
    kind = _FILE_SUFFIXES.get(path.suffix.lower())
    if kind is None and not path.is_dir():
        if not path.exists():
            raise InputError(f"file not found: {path}; check the path")
        raise InputError(f"{path}: unknown file type {path.suffix!r}; use .sdf, .mol or .xyz (or a SMILES string)")
    if kind == "xyz":
        mol, title = _read_xyz(path, charge or 0), ""
    else:
        mol, title = _read_sdf(path, record)
    return mol, _input_coords(mol), title or path.stem, str(path)


def _read_source(source, charge, record):
    """(RDKit molecule, 3D coordinates or None, default name, description for messages).

    An RDKit molecule is taken as it is and a path object (os.PathLike) is always a file. A string is
    SMILES when it parses as SMILES; otherwise it is a file when such a file (or folder) exists or it
    ends like a molecule file, so a SMILES never reads a file of the same name.
    """
    if isinstance(source, Chem.Mol):
        mol = Chem.Mol(source)
        title = mol.GetProp("_Name").strip() if mol.HasProp("_Name") else ""
        text = Chem.MolToSmiles(Chem.RemoveHs(mol)) if mol.GetNumAtoms() else ""
        return mol, _input_coords(mol), title or text, "the structure"
    if isinstance(source, os.PathLike):
        return _read_file(Path(source), charge, record)
    source = str(source).strip()
    if not source:
        raise InputError("no molecule given; pass a SMILES string or a MOL/SDF/XYZ file")
    mol = Chem.MolFromSmiles(source)
    if mol is not None:
        return mol, None, source, "the SMILES"
    if os.path.lexists(source) or _looks_like_path(source):
        return _read_file(Path(source), charge, record)
    raise InputError(f"could not read {source!r} as SMILES (nor is it an existing file); check the string")


def molecule_source(text=None, *, smiles=None, file=None):
    """What a command line names as its molecule: a SMILES string (str) or a file (Path).

    text: the positional argument; smiles / file: the explicit --smiles TEXT and --file PATH.
    Exactly one may be given. A positional argument that parses as SMILES and also names an
    existing file or folder is refused as ambiguous; otherwise it is SMILES if it parses, else a file.
    """
    given = [value for value in (text, smiles, file) if value is not None]
    if len(given) > 1:
        raise InputError("give only one of a molecule argument, --smiles TEXT and --file PATH")
    if not given:
        raise InputError("no molecule given; pass a SMILES string or a MOL/SDF/XYZ file (or --smiles / --file)")
    if file is not None:
        return Path(file)
    if smiles is not None:
        if smiles.strip() and Chem.MolFromSmiles(smiles.strip()) is None:
            raise InputError(f"could not read {smiles!r} as SMILES; check the string")
        return smiles
    if text.strip() and Chem.MolFromSmiles(text.strip()) is not None and os.path.lexists(text):
        kind = "folder" if os.path.isdir(text) else "file"
        raise InputError(f"{text!r} is ambiguous: both a SMILES string and the name of an existing {kind}; say which "
                         f"one you mean with --smiles {text!r} or --file {text!r}")
    if text.strip() and Chem.MolFromSmiles(text.strip()) is None and (os.path.lexists(text) or _looks_like_path(text)):
        return Path(text)
    return text


def scan_cost_estimate_s(atom_count, frequencies=True):
    """A rough wall time (s) of a default scan of one bond on one core, from the measured cost of a
    GFN2-xTB gradient (about GRADIENT_S_PER_ATOM2 * N^2 s) and typical gradient counts."""
    gradients = SCAN_GRADIENTS + (FREQUENCY_GRADIENTS_PER_ATOM * atom_count if frequencies else 0)
    return gradients * GRADIENT_S_PER_ATOM2 * atom_count ** 2


def check_size(count, allow_large=False, frequencies=True):
    """The warning text for a molecule of `count` atoms (hydrogens included) above LARGE_ATOMS (None
    below); InputError above MAX_ATOMS unless allow_large."""
    if count > MAX_ATOMS and not allow_large:
        raise InputError(
            f"{count} atoms (hydrogens included) is above the {MAX_ATOMS}-atom limit: a scan would take about "
            f"{_duration(scan_cost_estimate_s(count, frequencies))} per bond; pass --allow-large to run it anyway"
        )
    if count > LARGE_ATOMS:
        return (f"{count} atoms: expect about {_duration(scan_cost_estimate_s(count, frequencies))} per scanned bond "
                "on one core" + ("; frequencies are most of it (--no-frequencies skips them)" if frequencies else ""))
    return None


def _duration(seconds):
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.0f} h"


def load_molecule(source, *, name=None, charge=None, unpaired_electrons=0, record=1):
    """Read a molecule from a SMILES string, a MOL/SDF/XYZ file path or an RDKit molecule.

    charge: total charge; default is the sum of formal charges (SMILES/SDF/RDKit) or 0 (XYZ).
    record: 1-based record number in a multi-record SDF.
    """
    mol, coords, default_name, what = _read_source(source, charge, record)
    _check_single_molecule(mol, what)
    if coords is not None:
        _check_coordinates(coords, [atom.GetSymbol() for atom in mol.GetAtoms()], what)
    had_hydrogens = any(atom.GetAtomicNum() == 1 for atom in mol.GetAtoms())
    mol = Chem.AddHs(mol, addCoords=coords is not None)
    if coords is not None and not had_hydrogens and mol.GetNumAtoms() > len(coords):
        coords = mol.GetConformer().GetPositions()
    formal = Chem.GetFormalCharge(mol)
    return Molecule(
        name=safe_name(name) if name else safe_name(default_name),
        mol=mol,
        charge=formal if charge is None else int(charge),
        unpaired_electrons=int(unpaired_electrons),
        input_coords_angstrom=coords,
    )


def _pi_bonded_neighbours(atom, exclude):
    """Neighbours joined to `atom` by a double or aromatic bond (other than atom `exclude`)."""
    return [
        bond.GetOtherAtom(atom)
        for bond in atom.GetBonds()
        if bond.GetOtherAtomIdx(atom.GetIdx()) != exclude
        and (bond.GetBondType() in _PI_BOND_TYPES or bond.GetIsAromatic())
    ]


def _perfect_matchings(vertices, adjacency, memo):
    """Number of perfect matchings of the graph induced on `vertices` (a frozenset)."""
    if not vertices:
        return 1
    if vertices not in memo:
        v = min(vertices, key=lambda x: (len(adjacency[x] & vertices), x))
        rest = vertices - {v}
        memo[vertices] = sum(_perfect_matchings(rest - {w}, adjacency, memo) for w in adjacency[v] & rest)
    return memo[vertices]


def pauling_bond_orders(mol):
    """Fraction of Kekulé structures in which each double or aromatic bond is double (exact Fractions).

    Keys are sorted 0-based atom pairs. The Kekulé structures are the perfect matchings of the
    atoms that carry exactly one double bond (in RDKit's Kekulé form) over the ring bonds between
    them and the double bonds; an acyclic bond never changes (it would leave an odd fragment on
    each side), nor does a cumulated double bond. Naphthalene C1-C2 2/3, C2-C3 1/3; the furan
    C-O bond 0 (single in furan's only Kekulé structure); an isolated or acyclic C=C 1.
    """
    kekule = Chem.Mol(mol)
    Chem.Kekulize(kekule, clearAromaticFlags=False)
    doubles = [b for b in kekule.GetBonds() if b.GetBondType() == Chem.BondType.DOUBLE]
    double_count = {}
    for bond in doubles:
        for atom in (bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()):
            double_count[atom] = double_count.get(atom, 0) + 1
    matched = {atom for atom, count in double_count.items() if count == 1}
    adjacency = {v: set() for v in matched}
    for bond in kekule.GetBonds():
        a, b = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        if a in matched and b in matched and (bond.IsInRing() or bond.GetBondType() == Chem.BondType.DOUBLE) \
                and bond.GetBondType() in (Chem.BondType.SINGLE, Chem.BondType.DOUBLE):
            adjacency[a].add(b)
            adjacency[b].add(a)
    adjacency = {v: frozenset(n) for v, n in adjacency.items()}
    components = {}
    for start in sorted(matched):
        if start not in components:
            seen, todo = {start}, [start]
            while todo:
                for n in adjacency[todo.pop()] - seen:
                    seen.add(n)
                    todo.append(n)
            components.update(dict.fromkeys(seen, frozenset(seen)))
    memo = {}
    orders = {}
    for bond in mol.GetBonds():
        if not (bond.GetIsAromatic() or bond.GetBondType() == Chem.BondType.DOUBLE):
            continue
        a, b = sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
        if a in matched and b in adjacency[a]:
            system = components[a]
            orders[(a, b)] = Fraction(
                _perfect_matchings(system - {a, b}, adjacency, memo), _perfect_matchings(system, adjacency, memo))
        else:  # a cumulated double bond stays double; a bond to a sigma-only ring atom stays single
            orders[(a, b)] = Fraction(int(kekule.GetBondBetweenAtoms(a, b).GetBondType() == Chem.BondType.DOUBLE))
    return orders


class _ReferenceRule:
    """The dihedral atom rule of the module docstring on one molecule (ranks and bond orders computed once)."""

    def __init__(self, mol):
        self.mol = mol
        self.orders = pauling_bond_orders(mol)
        self.ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=True))
        self.classes = list(Chem.CanonicalRankAtoms(mol, breakTies=False))

    def order(self, a, b):
        """Pauling bond order of a-b (0 for a sigma-only or absent pi bond)."""
        return self.orders.get((min(a, b), max(a, b)), Fraction(0))

    def _key(self, centre, atom):
        heavy = sum(1 for n in atom.GetNeighbors() if n.GetAtomicNum() > 1)
        return (-atom.GetAtomicNum(), -self.order(centre, atom.GetIdx()), -heavy, self.ranks[atom.GetIdx()])

    def outer_atom(self, centre, exclude):
        """The dihedral's outer atom on `centre`'s side of bond centre-exclude, or None (a terminal atom)."""
        others = [n for n in self.mol.GetAtomWithIdx(centre).GetNeighbors() if n.GetIdx() != exclude]
        partners = [n for n in others if self.order(centre, n.GetIdx()) > 0] or others
        if not partners:
            return None
        return min(partners, key=lambda atom: self._key(centre, atom)).GetIdx()

    def symmetric_side(self, centre, exclude):
        """True if `centre` has exactly two other neighbours and they are topologically equivalent."""
        others = [n.GetIdx() for n in self.mol.GetAtomWithIdx(centre).GetNeighbors() if n.GetIdx() != exclude]
        return len(others) == 2 and self.classes[others[0]] == self.classes[others[1]]

    def meaning(self, atoms):
        """The s-cis text of dihedral atoms i-j-k-l (0-based), e.g. "s-cis: C1=C2 syn to C3=C4" (1-based)."""
        i, j, k, l = atoms
        name = [f"{a.GetSymbol()}{a.GetIdx() + 1}" for a in self.mol.GetAtoms()]
        join = {True: "=", False: "\u2013"}
        return (f"s-cis: {name[i]}{join[self.order(i, j) > 0]}{name[j]} syn to "
                f"{name[k]}{join[self.order(k, l) > 0]}{name[l]}")

    def torsion_bond(self, atoms):
        i, j, k, l = atoms
        return TorsionBond(
            atoms=(i, j, k, l), conjugated=_is_conjugated_single(self.mol.GetBondBetweenAtoms(j, k)),
            scis_meaning=self.meaning(atoms),
            symmetric_rotor_candidate=self.symmetric_side(j, k) or self.symmetric_side(k, j),
        )

    def bond(self, j, k):
        """The TorsionBond of bond j-k by the rule, or None if a bond atom has no other neighbour."""
        i, l = self.outer_atom(j, k), self.outer_atom(k, j)
        if i is None or l is None:
            return None
        return self.torsion_bond((i, j, k, l))


def _is_conjugated_single(bond):
    if bond.GetBondType() != Chem.BondType.SINGLE or bond.IsInRing() or bond.GetIsAromatic():
        return False
    j, k = bond.GetBeginAtom(), bond.GetEndAtom()
    return bool(_pi_bonded_neighbours(j, k.GetIdx())) and bool(_pi_bonded_neighbours(k, j.GetIdx()))


def is_diene_bond(mol, atoms):
    """True if dihedral i-j-k-l is the central bond of a 1,3-diene: C=C-C=C, not aromatic."""
    i, j, k, l = atoms
    double = [mol.GetBondBetweenAtoms(a, b) for a, b in ((i, j), (k, l))]
    return all(b is not None and b.GetBondType() == Chem.BondType.DOUBLE and not b.GetIsAromatic() for b in double) \
        and all(mol.GetAtomWithIdx(a).GetAtomicNum() == 6 for a in atoms)


def torsion_bond(mol, atoms):
    """The TorsionBond (conjugation flag, s-cis meaning, symmetry candidate) of given 0-based dihedral atoms."""
    return _ReferenceRule(mol).torsion_bond(tuple(int(a) for a in atoms))


def numbered_smiles(mol):
    """SMILES in which every heavy atom carries its 1-based atom number as atom map number.

    mol: an RDKit molecule (with or without explicit hydrogens). Hydrogens are not written
    (unless RDKit must keep one, which then carries its number too), so "[CH2:1]=[C:2]..." reads
    off the numbers used by --bond and the reports. Atoms are written in atom order where the
    graph allows (non-canonical SMILES).
    """
    numbered = Chem.Mol(mol)
    for atom in numbered.GetAtoms():
        atom.SetIntProp(_NUMBER_PROP, atom.GetIdx() + 1)
        atom.SetAtomMapNum(0)
    numbered = Chem.RemoveHs(numbered)
    for atom in numbered.GetAtoms():
        atom.SetAtomMapNum(atom.GetIntProp(_NUMBER_PROP))
    return Chem.MolToSmiles(numbered, canonical=False)


def find_conjugated_bonds(molecule):
    """Every acyclic single bond whose two atoms each carry a double or aromatic bond, as TorsionBonds.

    Bonds are j < k by atom index; the outer atoms follow the rule of the module docstring.
    """
    rule = _ReferenceRule(molecule.mol)
    found = []
    for bond in molecule.mol.GetBonds():
        if _is_conjugated_single(bond):
            j, k = sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
            found.append(rule.bond(j, k))
    return found


def select_bond(molecule, spec):
    """The bond named by a 1-based spec "j-k" (outer atoms by the rule) or "i-j-k-l" (all four given)."""
    parts = re.split(r"[-,\s]+", str(spec).strip())
    try:
        numbers = [int(p) for p in parts]
    except ValueError:
        raise InputError(f"--bond {spec!r}: give two or four 1-based atom numbers, e.g. 3-4 or 2-3-4-5") from None
    n_atoms = molecule.mol.GetNumAtoms()
    if len(numbers) not in (2, 4) or any(not 1 <= x <= n_atoms for x in numbers):
        raise InputError(
            f"--bond {spec!r}: give two or four atom numbers between 1 and {n_atoms} (1-based, hydrogens last)"
        )
    repeated = sorted({x for x in numbers if numbers.count(x) > 1})
    if repeated:
        raise InputError(f"--bond {spec}: atom {repeated[0]} appears more than once; a dihedral needs "
                         "distinct atoms (two for j-k, four for i-j-k-l)")
    atoms = [x - 1 for x in numbers]
    j, k = atoms[-3:-1] if len(atoms) == 4 else atoms
    mol = molecule.mol
    bond = mol.GetBondBetweenAtoms(j, k)
    if bond is None:
        raise InputError(f"--bond {spec}: atoms {j + 1} and {k + 1} are not bonded; run 'torsionscan bonds' to list bonds")
    if bond.IsInRing():
        raise InputError(f"--bond {spec}: bond {j + 1}-{k + 1} is in a ring and cannot rotate freely; choose an acyclic bond")
    if bond.GetBondType() != Chem.BondType.SINGLE:
        raise InputError(f"--bond {spec}: bond {j + 1}-{k + 1} is not a single bond; choose a single bond")
    for centre in (j, k):
        atom = mol.GetAtomWithIdx(centre)
        if atom.GetDegree() == 2 and atom.GetHybridization() == Chem.HybridizationType.SP:
            raise InputError(
                f"--bond {spec}: atom {centre + 1} ({atom.GetSymbol()}) is linear (sp: a triple bond or two double "
                f"bonds), so no dihedral about bond {j + 1}-{k + 1} is defined and its profile would be flat; "
                "choose a bond between two non-linear atoms")
    if len(atoms) == 4:
        i, l = atoms[0], atoms[3]
        if mol.GetBondBetweenAtoms(i, j) is None or mol.GetBondBetweenAtoms(k, l) is None:
            raise InputError(f"--bond {spec}: atoms must form a bonded chain i-j-k-l")
        return _ReferenceRule(mol).torsion_bond((i, j, k, l))
    torsion = _ReferenceRule(mol).bond(j, k)
    if torsion is None:
        raise InputError(f"--bond {spec}: a terminal atom has no other neighbour, so no dihedral is defined")
    return torsion


def side_atoms(mol, j, k):
    """Indices of the atoms on k's side of bond j-k (including k) of an RDKit molecule (or a Molecule)."""
    mol = getattr(mol, "mol", mol)
    fragmented = Chem.FragmentOnBonds(mol, [mol.GetBondBetweenAtoms(j, k).GetIdx()], addDummies=False)
    for fragment in Chem.GetMolFrags(fragmented):
        if k in fragment:
            return np.array(sorted(fragment))
    raise InputError(f"bond {j + 1}-{k + 1} does not split the molecule")


MAX_ATOM_ORDERS = 1000  # heavy-atom orders tried when recognising one structure as another


def atom_orders(mol, limit=MAX_ATOM_ORDERS):
    """(orders, parents) of an RDKit molecule with hydrogens: the orders of its heavy atoms that
    map its graph onto itself (identity first; at most limit), each an (N,) array with -1 at the
    hydrogens, and each atom's heavy neighbour for a hydrogen (-1 for a heavy atom). With them
    geometry.matched_superposition finds one structure in another with equivalent atoms
    exchanged: a phenyl ring flipped, a methyl group turned by a third of a turn. Atoms of
    different mass are not equivalent: RDKit's self-match keeps a 13C on itself, and a labelled
    hydrogen (2H, 3H) counts as a heavy atom, so it is never swapped with a 1H either."""
    mol = getattr(mol, "mol", mol)
    heavy = [atom.GetIdx() for atom in mol.GetAtoms() if atom.GetAtomicNum() > 1 or atom.GetIsotope() > 1]
    parents = np.full(mol.GetNumAtoms(), -1)
    for atom in mol.GetAtoms():
        neighbours = [n.GetIdx() for n in atom.GetNeighbors()]
        if atom.GetIdx() not in heavy and len(neighbours) == 1 and neighbours[0] in heavy:
            parents[atom.GetIdx()] = neighbours[0]
    skeleton = Chem.RWMol(mol)
    for index in sorted(np.flatnonzero(parents >= 0), reverse=True):
        skeleton.RemoveAtom(int(index))  # the remaining atoms keep their order
    kept = np.flatnonzero(parents < 0)
    identity = tuple(range(len(kept)))
    matches = skeleton.GetSubstructMatches(skeleton, uniquify=False, useChirality=False, maxMatches=limit)
    orders = []
    for match in sorted(set(matches) | {identity}, key=lambda m: m != identity):
        order = np.full(mol.GetNumAtoms(), -1)
        order[kept] = kept[list(match)]
        orders.append(order)
    return orders, parents


def starting_structures(molecule, count=5, seed=61453):
    """Up to `count` seeded ETKDG conformers pre-optimised with MMFF94 (UFF if MMFF cannot type), Angstrom.

    The input geometry, if the file had 3D coordinates, is included first. Deterministic for a
    given input, count and seed.
    """
    structures = [] if molecule.input_coords_angstrom is None else [molecule.input_coords_angstrom]
    mol = Chem.Mol(molecule.mol)
    mol.RemoveAllConformers()
    params = AllChem.ETKDGv3()
    params.randomSeed = seed
    params.numThreads = 1
    ids = list(AllChem.EmbedMultipleConfs(mol, numConfs=count, params=params))
    if not ids:
        params.useRandomCoords = True
        ids = list(AllChem.EmbedMultipleConfs(mol, numConfs=count, params=params))
    if not ids and not structures:
        raise InputError("could not build 3D coordinates for this molecule; check the structure or give an SDF/XYZ file")
    if ids:
        if AllChem.MMFFHasAllMoleculeParams(mol):
            AllChem.MMFFOptimizeMoleculeConfs(mol, numThreads=1, maxIters=500)
        elif AllChem.UFFHasAllMoleculeParams(mol):
            AllChem.UFFOptimizeMoleculeConfs(mol, numThreads=1, maxIters=500)
        structures.extend(mol.GetConformer(cid).GetPositions() for cid in ids)
    return structures
