"""Reading molecules, finding conjugated single bonds, choosing dihedral atoms, 3D start structures.

Atom indices inside the package are 0-based (RDKit's); the user interface shows and accepts
1-based atom numbers. Coordinates from RDKit are in Angstrom.

Dihedral atom rule. For a single bond j-k, the outer atom on each side is a neighbour joined to
the bond atom by a double or aromatic bond (its pi partner), so 0 deg means the two pi bonds
are eclipsed (s-cis) and 180 deg means they are anti (s-trans). Where a bond atom has several
pi partners (an aryl ring: two ortho atoms) the outer atom is the one with the higher atomic
number, then the one with more heavy-atom neighbours (a substituted ortho carbon), then the
lower atom number. Bonds chosen by hand whose atoms have no pi partner fall back to the
heaviest neighbour by the same ranking.
"""

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from rdkit import Chem, RDLogger
from rdkit.Chem import AllChem, rdDetermineBonds

from .errors import InputError

RDLogger.DisableLog("rdApp.*")

_PI_BOND_TYPES = (Chem.BondType.DOUBLE, Chem.BondType.AROMATIC)
_FILE_SUFFIXES = {".sdf": "sdf", ".sd": "sdf", ".mol": "sdf", ".xyz": "xyz"}


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
    """A rotatable single bond j-k and its dihedral i-j-k-l (0-based atom indices)."""

    atoms: tuple[int, int, int, int]
    conjugated: bool

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
    fragments = Chem.GetMolFrags(mol)
    if len(fragments) > 1:
        raise InputError(
            f"{what} contains {len(fragments)} separate molecules; give one molecule (remove salts/solvents)"
        )


def _read_sdf(path, record):
    supplier = Chem.SDMolSupplier(str(path), removeHs=False, sanitize=True)
    if record < 1:
        raise InputError("--record counts from 1")
    count = 0
    for index, mol in enumerate(supplier, start=1):
        count = index
        if index == record:
            if mol is None:
                raise InputError(f"{path}: record {record} could not be read (bad structure block); fix the file")
            return mol, (mol.GetProp("_Name").strip() if mol.HasProp("_Name") else "")
    if count == 0:
        raise InputError(f"{path}: no readable molecule records; is it an MDL MOL/SDF file?")
    raise InputError(f"{path}: has {count} record(s), cannot take record {record}; check --record")


def _read_xyz(path, charge):
    mol = Chem.MolFromXYZFile(str(path))
    if mol is None or mol.GetNumAtoms() == 0:
        raise InputError(f"{path}: not a readable XYZ file (atom count line, comment line, 'El x y z' lines)")
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


def _read_source(source, charge, record):
    """(RDKit molecule, 3D coordinates or None, default name, description for messages)."""
    if isinstance(source, Chem.Mol):
        mol = Chem.Mol(source)
        title = mol.GetProp("_Name").strip() if mol.HasProp("_Name") else ""
        return mol, _input_coords(mol), title or Chem.MolToSmiles(Chem.RemoveHs(mol)), "the structure"
    source = str(source).strip()
    if not source:
        raise InputError("no molecule given; pass a SMILES string or a MOL/SDF/XYZ file")
    path = Path(source)
    if path.is_file():
        kind = _FILE_SUFFIXES.get(path.suffix.lower())
        if kind is None:
            raise InputError(f"{path}: unknown file type {path.suffix!r}; use .sdf, .mol or .xyz (or a SMILES string)")
        if kind == "sdf":
            mol, title = _read_sdf(path, record)
        else:
            mol, title = _read_xyz(path, charge or 0), ""
        return mol, _input_coords(mol), title or path.stem, str(path)
    mol = Chem.MolFromSmiles(source)
    if mol is None and _looks_like_path(source):
        raise InputError(f"file not found: {source}")
    if mol is None:
        raise InputError(f"could not read {source!r} as SMILES (nor is it an existing file); check the string")
    return mol, None, source, "the SMILES"


def load_molecule(source, *, name=None, charge=None, unpaired_electrons=0, record=1):
    """Read a molecule from a SMILES string, a MOL/SDF/XYZ file path or an RDKit molecule.

    charge: total charge; default is the sum of formal charges (SMILES/SDF/RDKit) or 0 (XYZ).
    record: 1-based record number in a multi-record SDF.
    """
    mol, coords, default_name, what = _read_source(source, charge, record)
    _check_single_molecule(mol, what)
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


def _pi_partners(atom, exclude):
    return [
        bond.GetOtherAtom(atom)
        for bond in atom.GetBonds()
        if bond.GetOtherAtomIdx(atom.GetIdx()) != exclude
        and (bond.GetBondType() in _PI_BOND_TYPES or bond.GetIsAromatic())
    ]


def _rank(atom):
    heavy = sum(1 for n in atom.GetNeighbors() if n.GetAtomicNum() > 1)
    return (-atom.GetAtomicNum(), -heavy, atom.GetIdx())


def _outer_atom(atom, exclude):
    """The dihedral's outer atom on `atom`'s side (see the module docstring), or None."""
    partners = _pi_partners(atom, exclude)
    if not partners:
        partners = [n for n in atom.GetNeighbors() if n.GetIdx() != exclude]
    if not partners:
        return None
    return min(partners, key=_rank).GetIdx()


def _is_conjugated_single(bond):
    if bond.GetBondType() != Chem.BondType.SINGLE or bond.IsInRing() or bond.GetIsAromatic():
        return False
    j, k = bond.GetBeginAtom(), bond.GetEndAtom()
    return bool(_pi_partners(j, k.GetIdx())) and bool(_pi_partners(k, j.GetIdx()))


def is_diene_bond(mol, atoms):
    """True if dihedral i-j-k-l is the central bond of a 1,3-diene: C=C-C=C, not aromatic."""
    i, j, k, l = atoms
    double = [mol.GetBondBetweenAtoms(a, b) for a, b in ((i, j), (k, l))]
    return all(b is not None and b.GetBondType() == Chem.BondType.DOUBLE and not b.GetIsAromatic() for b in double) \
        and all(mol.GetAtomWithIdx(a).GetAtomicNum() == 6 for a in atoms)


def _torsion_bond(mol, j, k):
    i = _outer_atom(mol.GetAtomWithIdx(j), k)
    l = _outer_atom(mol.GetAtomWithIdx(k), j)
    if i is None or l is None:
        return None
    return TorsionBond((i, j, k, l), _is_conjugated_single(mol.GetBondBetweenAtoms(j, k)))


def find_conjugated_bonds(molecule):
    """Every acyclic single bond whose two atoms each carry a double or aromatic bond."""
    mol = molecule.mol
    found = []
    for bond in mol.GetBonds():
        if _is_conjugated_single(bond):
            j, k = sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
            found.append(_torsion_bond(mol, j, k))
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
    if len(atoms) == 4:
        i, l = atoms[0], atoms[3]
        if mol.GetBondBetweenAtoms(i, j) is None or mol.GetBondBetweenAtoms(k, l) is None:
            raise InputError(f"--bond {spec}: atoms must form a bonded chain i-j-k-l")
        return TorsionBond((i, j, k, l), _is_conjugated_single(bond))
    torsion = _torsion_bond(mol, j, k)
    if torsion is None:
        raise InputError(f"--bond {spec}: a terminal atom has no other neighbour, so no dihedral is defined")
    return torsion


def side_atoms(molecule, j, k):
    """Indices of the atoms on k's side of bond j-k (including k)."""
    mol = molecule.mol
    fragmented = Chem.FragmentOnBonds(mol, [mol.GetBondBetweenAtoms(j, k).GetIdx()], addDummies=False)
    for fragment in Chem.GetMolFrags(fragmented):
        if k in fragment:
            return np.array(sorted(fragment))
    raise InputError(f"bond {j + 1}-{k + 1} does not split the molecule")


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
