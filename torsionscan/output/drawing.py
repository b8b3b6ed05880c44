"""A 2-D drawing of a molecule with its atom numbers and the scanned dihedral highlighted.

The numbers are the 1-based atom numbers of the full molecule (hydrogens included in the
numbering), the same numbers as --bond, the dihedral labels and numbered_smiles. Hydrogens are
left out of the depiction except those that are dihedral atoms.
"""

import logging

from rdkit import Chem
from rdkit.Chem import rdDepictor
from rdkit.Chem.Draw import rdMolDraw2D

log = logging.getLogger(__name__)

SCANNED_BOND_COLOUR = (0.96, 0.58, 0.22)  # atoms j, k and bond j-k
OUTER_COLOUR = (0.50, 0.72, 0.95)  # atoms i, l and bonds i-j, k-l
_NUMBER_PROP = "_drawing_number"


def _drawn_copy(mol, keep):
    """A copy without hydrogens except atoms `keep`, 2-D coordinates, each atom noted with its 1-based number.

    Returns (copy, {original index: index in the copy}).
    """
    work = Chem.Mol(mol)
    work.RemoveAllConformers()
    for atom in work.GetAtoms():
        atom.SetIntProp(_NUMBER_PROP, atom.GetIdx() + 1)
        atom.SetAtomMapNum(1 if atom.GetIdx() in keep and atom.GetAtomicNum() == 1 else 0)
    params = Chem.RemoveHsParameters()
    params.removeMapped = False
    work = Chem.RemoveHs(work, params)
    index = {}
    for atom in work.GetAtoms():
        atom.SetAtomMapNum(0)
        number = atom.GetIntProp(_NUMBER_PROP)
        atom.SetProp("atomNote", str(number))
        index[number - 1] = atom.GetIdx()
    rdDepictor.Compute2DCoords(work)
    return work, index


def _highlights(mol, index, dihedral_atoms):
    """(atoms, atom colours, bonds, bond colours) of dihedral i-j-k-l in the drawn copy's indices."""
    if dihedral_atoms is None:
        return [], {}, [], {}
    i, j, k, l = (index[a] for a in dihedral_atoms)
    atom_colours = {i: OUTER_COLOUR, l: OUTER_COLOUR, j: SCANNED_BOND_COLOUR, k: SCANNED_BOND_COLOUR}
    bond_colours = {}
    for (a, b), colour in (((i, j), OUTER_COLOUR), ((k, l), OUTER_COLOUR), ((j, k), SCANNED_BOND_COLOUR)):
        bond = mol.GetBondBetweenAtoms(a, b)
        if bond is not None:
            bond_colours[bond.GetIdx()] = colour
    return list(atom_colours), atom_colours, list(bond_colours), bond_colours


def _draw(drawer, mol, highlights):
    atoms, atom_colours, bonds, bond_colours = highlights
    options = drawer.drawOptions()
    options.annotationFontScale = 0.6
    options.clearBackground = True
    drawer.DrawMolecule(mol, highlightAtoms=atoms, highlightAtomColors=atom_colours,
                        highlightBonds=bonds, highlightBondColors=bond_colours)
    drawer.FinishDrawing()
    return drawer.GetDrawingText()


def molecule_drawing(mol, dihedral_atoms=None, size=(360, 280)):
    """2-D depiction of an RDKit molecule: {"svg": str, "png": bytes or None}.

    Every drawn atom carries its 1-based number in `mol`; dihedral_atoms (0-based i, j, k, l)
    are highlighted, the scanned bond j-k in orange, the outer atoms and bonds in blue; a
    hydrogen among them is drawn too. size: (width, height) in pixels. The SVG writes its text
    as <text> elements; "png" is None when this RDKit build has no Cairo drawer.
    """
    width, height = (int(v) for v in size)
    keep = set() if dihedral_atoms is None else {int(a) for a in dihedral_atoms}
    drawn, index = _drawn_copy(mol, keep)
    highlights = _highlights(drawn, index, dihedral_atoms)
    svg = _draw(rdMolDraw2D.MolDraw2DSVG(width, height, -1, -1, True), drawn, highlights)
    png = None
    if hasattr(rdMolDraw2D, "MolDraw2DCairo"):
        png = _draw(rdMolDraw2D.MolDraw2DCairo(width, height), drawn, highlights)
    else:
        log.warning("this RDKit build has no Cairo drawer; the molecule drawing is SVG only")
    return {"svg": svg, "png": png}
