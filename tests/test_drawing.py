"""The molecule drawing and the numbered SMILES show the atom numbers the reports use."""

import io
import re
import struct
import xml.etree.ElementTree as ElementTree

import numpy as np
from matplotlib import image as mpimg
from rdkit import Chem

from torsionscan.molecule import find_conjugated_bonds, load_molecule, numbered_smiles, select_bond
from torsionscan.output.drawing import OUTER_COLOUR, SCANNED_BOND_COLOUR, molecule_drawing

SVG = "{http://www.w3.org/2000/svg}"


def _notes(svg):
    """The atom-number notes of an RDKit SVG drawn without FreeType: one <text> per character,
    so characters on one line and next to each other are joined back into numbers."""
    chars = []
    for element in ElementTree.fromstring(svg).iter(f"{SVG}text"):
        if element.get("class") == "note":
            size = float(re.search(r"font-size:([\d.]+)px", element.get("style")).group(1))
            chars.append((round(float(element.get("y")), 1), float(element.get("x")), element.text, size))
    notes, last = [], None
    for y, x, text, size in sorted(chars):
        if last is not None and last[0] == y and x - last[1] < size:
            notes[-1] += text
        else:
            notes.append(text)
        last = (y, x)
    return notes


def _svg_colour(colour):
    """An RGB triple (0-1) as RDKit writes it into SVG styles (each channel truncated to 0-255)."""
    return "#" + "".join(f"{int(255 * c):02X}" for c in colour)


def _filled(svg, tag, colour):
    """Elements of `tag` whose style fills them with `colour`, by their class attribute."""
    wanted = f"fill:{_svg_colour(colour)}"
    return [e.get("class") for e in ElementTree.fromstring(svg).iter(f"{SVG}{tag}") if wanted in (e.get("style") or "")]


def test_svg_numbers_every_heavy_atom_and_highlights_the_dihedral():
    molecule = load_molecule("C=Cc1ccc2ccccc2c1")  # 2-vinylnaphthalene: 12 heavy atoms, 10 H
    (bond,) = find_conjugated_bonds(molecule)
    svg = molecule_drawing(molecule.mol, bond.atoms)["svg"]
    assert sorted(_notes(svg), key=int) == [str(n) for n in range(1, 13)]  # no hydrogen numbers
    # the four dihedral atoms are highlighted: j, k in one colour, i, l in the other (ellipses by
    # atom class; the drawn copy has no hydrogens, and here heavy atoms keep their indices)
    i, j, k, l = bond.atoms
    assert sorted(_filled(svg, "ellipse", SCANNED_BOND_COLOUR)) == sorted([f"atom-{j}", f"atom-{k}"])
    assert sorted(_filled(svg, "ellipse", OUTER_COLOUR)) == sorted([f"atom-{i}", f"atom-{l}"])
    assert len(_filled(svg, "path", SCANNED_BOND_COLOUR)) >= 1  # the scanned bond
    assert len(_filled(svg, "path", OUTER_COLOUR)) >= 2  # bonds i-j and k-l


def test_a_hydrogen_dihedral_atom_is_drawn_with_its_number():
    molecule = load_molecule("CCC=C")  # hydrogens are atoms 5-12
    bond = select_bond(molecule, "5-1-2-3")
    assert molecule.symbols[bond.atoms[0]] == "H"
    svg = molecule_drawing(molecule.mol, bond.atoms)["svg"]
    assert sorted(_notes(svg), key=int) == ["1", "2", "3", "4", "5"]
    assert len(_filled(svg, "ellipse", OUTER_COLOUR)) == 2
    assert len(_filled(svg, "ellipse", SCANNED_BOND_COLOUR)) == 2


def test_drawing_without_a_dihedral_has_no_highlight():
    svg = molecule_drawing(load_molecule("C=CC=O").mol)["svg"]
    assert sorted(_notes(svg)) == ["1", "2", "3", "4"]
    assert not _filled(svg, "ellipse", OUTER_COLOUR) and not _filled(svg, "ellipse", SCANNED_BOND_COLOUR)


def test_png_is_a_valid_image_of_the_requested_size():
    molecule = load_molecule("C=C(C)C=C")
    (bond,) = find_conjugated_bonds(molecule)
    png = molecule_drawing(molecule.mol, bond.atoms, size=(300, 220))["png"]
    assert isinstance(png, bytes)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, ISO/IEC 15948)
    assert png[12:16] == b"IHDR" and struct.unpack(">II", png[16:24]) == (300, 220)
    pixels = mpimg.imread(io.BytesIO(png), format="png")  # decoded by Pillow
    assert pixels.shape[:2] == (220, 300)
    assert np.ptp(pixels[..., :3]) > 0.5  # not a blank image


def test_numbered_smiles_of_isoprene_carries_the_input_numbers():
    molecule = load_molecule("C=C(C)C=C")
    text = numbered_smiles(molecule.mol)
    assert [int(n) for n in re.findall(r":(\d+)\]", text)] == [1, 2, 3, 4, 5]
    parsed = Chem.MolFromSmiles(text)
    assert parsed.GetNumAtoms() == 5  # no hydrogen atoms written
    for atom in parsed.GetAtoms():
        assert atom.GetSymbol() == molecule.symbols[atom.GetAtomMapNum() - 1]
        atom.SetAtomMapNum(0)
    assert Chem.MolToSmiles(parsed) == Chem.CanonSmiles("C=C(C)C=C")
    # the scanned bond 2-4 can be read off the string: mapped atoms 2 and 4 are bonded
    (bond,) = find_conjugated_bonds(molecule)
    assert bond.label == "2-4"
    by_number = {a.GetAtomMapNum(): a.GetIdx() for a in Chem.MolFromSmiles(text).GetAtoms()}
    assert Chem.MolFromSmiles(text).GetBondBetweenAtoms(by_number[2], by_number[4]) is not None


def test_numbered_smiles_keeps_the_numbering_of_interleaved_hydrogens():
    mol = Chem.AddHs(Chem.MolFromSmiles("C=CC=O"))
    order = [4, 0, 5, 1, 6, 2, 3, 7]  # old index of each new position: hydrogens among the heavy atoms
    renumbered = Chem.RenumberAtoms(mol, order)
    text = numbered_smiles(renumbered)
    parsed = Chem.MolFromSmiles(text)
    assert sorted(a.GetAtomMapNum() for a in parsed.GetAtoms()) == [2, 4, 6, 7]
    for atom in parsed.GetAtoms():
        assert atom.GetSymbol() == renumbered.GetAtomWithIdx(atom.GetAtomMapNum() - 1).GetSymbol()
