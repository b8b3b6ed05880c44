"""Reading compound lists: CSV/TSV, .smi and SDF; names, locations and per-entry problems."""

import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from torsionscan.compounds import CompoundEntry, entry_input, input_tag, read_compound_list
from torsionscan.errors import InputError


def _write(tmp_path, filename, text, encoding="utf-8"):
    path = tmp_path / filename
    path.write_text(text, encoding=encoding)
    return path


def test_csv_columns_and_extra_columns_in_file_order(tmp_path):
    path = _write(tmp_path, "list.csv",
                  "name,zeta,smiles,bond,alpha,charge,unpaired_electrons\n"
                  "butadiene,z1,C=CC=C, 2-3 ,a1,,\n"
                  "allyl,z2,C=C[CH2],,a2,0,1\n"
                  "anion,z3,C=CC=C[O-],,a3,-1,\n")
    entries = read_compound_list(path)
    assert [e.name for e in entries] == ["butadiene", "allyl", "anion"]
    first = entries[0]
    assert first.where == "line 2" and first.smiles == "C=CC=C" and first.bond == "2-3"
    assert first.charge is None and first.unpaired_electrons == 0
    assert list(first.extra.items()) == [("zeta", "z1"), ("alpha", "a1")]
    assert first.problem == "" and first.note == "" and first.molblock == ""
    assert entries[1].charge == 0 and entries[1].unpaired_electrons == 1
    assert entries[2].charge == -1


def test_bom_uppercase_headers_and_tsv(tmp_path):
    path = _write(tmp_path, "list.csv", "Name , SMILES,Charge,Unpaired Electrons,Note\nethene,C=C,+1,2,hi\n",
                  encoding="utf-8-sig")
    (entry,) = read_compound_list(path)
    assert (entry.name, entry.smiles, entry.charge, entry.unpaired_electrons) == ("ethene", "C=C", 1, 2)
    assert entry.extra == {"Note": "hi"}
    tsv = _write(tmp_path, "list.TSV", "SMILES\tname\nC=CC=O\tacrolein, s-trans\n")
    (entry,) = read_compound_list(tsv)
    assert (entry.name, entry.smiles) == ("acrolein, s-trans", "C=CC=O")


def test_blank_and_comment_rows_are_skipped_with_physical_line_numbers(tmp_path):
    path = _write(tmp_path, "list.csv",
                  "# made by hand\n"
                  "smiles,name,remark\n"
                  "\n"
                  "C=CC=C,a,\"two\nlines\"\n"
                  "# a comment\n"
                  " , ,\n"
                  ",#also a comment,\n"
                  "C=CC=O,b,x\n")
    entries = read_compound_list(path)
    assert [(e.name, e.where) for e in entries] == [("a", "line 4"), ("b", "line 9")]
    assert "line break inside a quoted cell" in entries[0].problem
    assert entries[1].problem == ""


def test_missing_smiles_column_lists_the_columns(tmp_path):
    path = _write(tmp_path, "list.csv", "name,structure\na,C=C\n")
    with pytest.raises(InputError, match="no 'smiles' column.*'name', 'structure'"):
        read_compound_list(path)
    semicolons = _write(tmp_path, "semi.csv", "name;smiles\na;C=C\n")
    with pytest.raises(InputError, match="';'"):
        read_compound_list(semicolons)


def test_duplicate_names_and_folder_clashes_get_unique_keys_and_problems(tmp_path):
    path = _write(tmp_path, "list.csv",
                  "name,smiles\n"
                  "dimer,C=CC=C\n"      # line 2
                  "dimer,C=CC=O\n"      # line 3: exact duplicate
                  "di mer,C=CC=N\n"     # line 4: folder 'di_mer'
                  "di/mer,C=CC=S\n"     # line 5: same folder 'di_mer'
                  "DIMER,C=CC=C\n"      # line 6: folder differs only by case
                  "dimer@line-3,CC\n")  # line 7: collides with the generated key
    entries = read_compound_list(path)
    keys = [e.name for e in entries]
    assert len(set(keys)) == len(keys)
    assert keys[:3] == ["dimer", "dimer@line-3", "di mer"]
    assert entries[0].problem == "" and entries[2].problem == ""
    assert entries[1].problem == "name 'dimer' is already used on line 2; give each compound its own name"
    assert keys[3] == "di/mer@line-5"
    assert "same folder name 'di_mer' as 'di mer' on line 4" in entries[3].problem
    assert "same folder name 'DIMER' as 'dimer' on line 2" in entries[4].problem
    assert "already used on line 3" in entries[5].problem


def test_empty_name_gets_an_automatic_name_and_a_note(tmp_path):
    path = _write(tmp_path, "list.csv", "smiles,name\nC=C,line-3\nC=CC=C,\nC=CC=O, \n")
    entries = read_compound_list(path)
    # named after a hash of the structure, so the name survives lines added or removed above it
    diene, enal = input_tag("C=CC=C", "", "x"), input_tag("C=CC=O", "", "x")
    assert [e.name for e in entries] == ["line-3", diene, enal]
    assert diene.startswith("unnamed-") and len(diene) == len("unnamed-") + 8
    assert entries[0].note == ""
    assert entries[1].note == f"no name given; called it {diene}"
    assert entries[2].note == f"no name given; called it {enal}"
    moved = read_compound_list(_write(tmp_path, "moved.csv", "smiles,name\n\n# new comment\nC=C,line-3\nC=CC=O,\n"))
    assert moved[1].name == enal
    assert all(e.problem == "" for e in entries)


def test_bad_numbers_and_missing_smiles_are_problems(tmp_path):
    path = _write(tmp_path, "list.csv",
                  "name,smiles,charge,unpaired_electrons\n"
                  "a,C=C,1.5,\n"
                  "b,C=C,x,\n"
                  "c,C=C,,-2\n"
                  "d,,0,\n"
                  "e,C=C,2.0,\n")
    a, b, c, d, e = read_compound_list(path)
    assert a.problem == "charge '1.5' on line 2 is not a whole number; write an integer such as 0, 1 or -1"
    assert a.charge is None
    assert "charge 'x' on line 3" in b.problem
    assert "unpaired_electrons '-2' on line 4 is negative" in c.problem
    assert d.problem == "no SMILES on line 5"
    assert e.problem == "" and e.charge == 2


def test_row_with_too_many_cells_is_a_problem_others_are_fine(tmp_path):
    path = _write(tmp_path, "list.csv",
                  "name,smiles,remark\n"
                  "a,C=CC=C,ok\n"
                  "b,C=CC=O,1,2\n"
                  "c,C=CC=N\n"
                  "d,C=CC=S,x,,\n")
    a, b, c, d = read_compound_list(path)
    assert b.problem == "line 3 has 4 cells but the header has 3; check for unquoted commas"
    assert a.problem == c.problem == d.problem == ""
    assert c.extra == {"remark": ""}


def test_smi_with_header_names_with_spaces_and_missing_names(tmp_path):
    path = _write(tmp_path, "list.smi",
                  "SMILES Name\n"
                  "\n"
                  "C=CC=C   1,3-butadiene (s-trans)  \n"
                  "# skipped\n"
                  "C=CC=O\n"
                  "c1ccccc1-c1ccccc1\tbiphenyl\n")
    entries = read_compound_list(path)
    assert [(e.name, e.where, e.smiles) for e in entries] == [
        ("1,3-butadiene (s-trans)", "line 3", "C=CC=C"),
        (input_tag("C=CC=O", "", ""), "line 5", "C=CC=O"),
        ("biphenyl", "line 6", "c1ccccc1-c1ccccc1"),
    ]
    assert entries[1].note == f"no name given; called it {input_tag('C=CC=O', '', '')}"
    assert all(e.extra == {} and e.problem == "" for e in entries)


def _record(smiles, title, **fields):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=1) == 0
    mol.SetProp("_Name", title)
    for key, value in fields.items():
        mol.SetProp(key, value)
    return mol


def test_sdf_good_records_and_a_corrupted_one(tmp_path):
    path = tmp_path / "set.sdf"
    writer = Chem.SDWriter(str(path))
    writer.write(_record("C=CC=C", "butadiene", zeta="1", Charge="0", alpha="2"))
    writer.close()
    bad = ("broken\n  junk\n\n  3  2  0  0  0  0  0  0  0  0999 V2000\nnot an atom line\n"
           "M  END\n> <source>\nlab\n\n$$$$\n")
    with open(path, "a") as handle:
        handle.write(bad)
    writer = Chem.SDWriter(str(tmp_path / "tail.sdf"))
    writer.write(_record("C=CC=O", "ignored title", name="acrolein", bond="2-3", unpaired_electrons="0"))
    writer.close()
    with open(path, "a") as handle:
        handle.write((tmp_path / "tail.sdf").read_text())

    first, broken, last = read_compound_list(path)
    assert (first.name, first.where, first.charge) == ("butadiene", "record 1", 0)
    assert list(first.extra) == ["zeta", "alpha"]
    assert first.smiles == "C=CC=C"
    reread = Chem.MolFromMolBlock(first.molblock, removeHs=False)
    assert sum(atom.GetSymbol() == "H" for atom in reread.GetAtoms()) == 6
    assert reread.GetConformer().Is3D()

    assert broken.where == "record 2" and broken.name == "broken"
    assert broken.problem == "record 2 could not be read (bad structure block); fix or remove it"
    assert broken.smiles == "" and broken.molblock == ""
    assert broken.extra == {"source": "lab"}

    assert (last.name, last.where, last.bond, last.charge) == ("acrolein", "record 3", "2-3", None)
    assert last.extra == {} and last.problem == ""
    assert Chem.MolToSmiles(Chem.MolFromSmiles(last.smiles)) == Chem.MolToSmiles(Chem.MolFromSmiles("C=CC=O"))


def test_sdf_record_with_impossible_valence_names_the_atom(tmp_path):
    block = Chem.MolToMolBlock(Chem.MolFromSmiles("CC(C)(C)(C)C", sanitize=False))
    path = _write(tmp_path, "v.sd", block + "$$$$\n")
    (entry,) = read_compound_list(path)
    assert entry.name == "record-1" and entry.note == "no name given; called it record-1"
    assert entry.problem == (
        "record 1 could not be read (atom 2 (C) has more bonds than its charge allows); fix or remove it"
    )


def test_file_level_errors(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_compound_list(tmp_path / "missing.csv")
    with pytest.raises(InputError, match=r"unsupported suffix \.xlsx.*\.csv"):
        read_compound_list(_write(tmp_path, "list.xlsx", "smiles\nC=C\n"))
    for filename, text in [("e.csv", ""), ("h.csv", "name,smiles\n# only a comment\n\n"),
                           ("e.smi", "\n# nothing\n"), ("e.sdf", ""), ("b.sdf", "\n\n")]:
        with pytest.raises(InputError, match="has no compounds"):
            read_compound_list(_write(tmp_path, filename, text))
    with pytest.raises(InputError, match="not UTF-8"):
        read_compound_list(_write(tmp_path, "latin.csv", "name,smiles\ncaf\u00e9,C=C\n", encoding="latin-1"))


def test_entry_input_changes_with_the_charge():
    entry = CompoundEntry(name="a", where="line 2", smiles="C=CC=O", bond="2-3")
    assert entry_input(entry) == {
        "smiles": "C=CC=O", "molblock": "", "bond": "2-3", "charge": None, "unpaired_electrons": 0,
    }
    charged = CompoundEntry(name="a", where="line 2", smiles="C=CC=O", bond="2-3", charge=1)
    assert entry_input(charged) != entry_input(entry)


# -- SMILES cells are only SMILES; structures from files come through structure_file ----------------

def _acrolein_files(folder):
    """acrolein.sdf (3D, hydrogens) and acrolein.xyz in folder; returns the RDKit molecule."""
    mol = Chem.AddHs(Chem.MolFromSmiles("C=CC=O"))
    AllChem.EmbedMolecule(mol, randomSeed=11)
    mol.SetProp("_Name", "acrolein")
    folder.mkdir(parents=True, exist_ok=True)
    Chem.MolToMolFile(mol, str(folder / "acrolein.sdf"))
    (folder / "acrolein.xyz").write_text(Chem.MolToXYZBlock(mol))
    return mol


def test_structure_file_column_reads_files_beside_the_list(tmp_path):
    mol = _acrolein_files(tmp_path / "structures")
    path = _write(tmp_path, "list.csv", "name,smiles,structure_file,charge\n"
                                        "from-sdf,,structures/acrolein.sdf,\n"
                                        f"from-xyz,,{tmp_path / 'structures' / 'acrolein.xyz'},0\n"
                                        "from-smiles,C=CC=C,,\n")
    sdf, xyz, smiles = read_compound_list(path)
    for entry in (sdf, xyz):
        assert entry.problem == "" and entry.smiles == "C=CC=O" and entry.molblock
        read_back = Chem.MolFromMolBlock(entry.molblock, removeHs=False)
        assert read_back.GetNumAtoms() == mol.GetNumAtoms()  # hydrogens kept, coordinates from the file
        assert abs(read_back.GetConformer().GetPositions() - mol.GetConformer().GetPositions()).max() < 1e-3
    assert "structure_file" not in sdf.extra
    assert smiles.molblock == "" and smiles.smiles == "C=CC=C" and smiles.problem == ""


def test_structure_file_outside_the_list_folder_is_refused_unless_allowed(tmp_path):
    _acrolein_files(tmp_path)
    folder = tmp_path / "lists"
    folder.mkdir()
    (folder / "link.sdf").symlink_to(tmp_path / "acrolein.sdf")  # inside by name, outside in fact
    path = _write(folder, "list.csv", "name,structure_file\nup,../acrolein.sdf\n"
                                      f"absolute,{tmp_path / 'acrolein.sdf'}\nlinked,link.sdf\n")
    for entry in read_compound_list(path):
        assert "outside the list's folder" in entry.problem and "--allow-outside-files" in entry.problem
        assert entry.molblock == ""
    assert all(not e.problem and e.molblock for e in read_compound_list(path, allow_outside_files=True))


def test_smiles_cells_are_never_read_as_files(tmp_path):
    _acrolein_files(tmp_path)
    (tmp_path / "CCO").write_text("a file named like a SMILES\n")
    path = _write(tmp_path, "list.csv", "name,smiles\nsdf,acrolein.sdf\npasswd,/etc/passwd\nethanol,CCO\n")
    sdf, passwd, ethanol = read_compound_list(path)
    for entry, text in ((sdf, "acrolein.sdf"), (passwd, "/etc/passwd")):
        assert entry.problem.startswith(f"could not read {text!r} as SMILES on line ")
        assert "structure_file column" in entry.problem and entry.molblock == ""
    assert ethanol.problem == "" and ethanol.molblock == "" and ethanol.smiles == "CCO"
    smi = _write(tmp_path, "list.smi", "acrolein.sdf first\nC=CC=O second\n")
    first, second = read_compound_list(smi)
    assert "as SMILES" in first.problem and second.problem == ""


def test_structure_file_row_problems(tmp_path):
    _acrolein_files(tmp_path)
    (tmp_path / "empty.sdf").write_text("")
    path = _write(tmp_path, "list.csv", "name,smiles,structure_file\nboth,C=CC=O,acrolein.sdf\n"
                                        "missing,,nowhere.sdf\nempty,,empty.sdf\nneither,,\n")
    both, missing, empty, neither = read_compound_list(path)
    assert both.problem == "line 2 gives both a SMILES and a structure_file; give one of them"
    assert "structure_file 'nowhere.sdf' on line 3: file not found" in missing.problem
    assert "structure_file 'empty.sdf' on line 4" in empty.problem and "is empty" in empty.problem
    assert neither.problem == "no SMILES on line 5 (nor a structure_file)"


def test_molecules_above_the_size_limit_are_refused_unless_allowed(tmp_path):
    path = _write(tmp_path, "list.csv", "name,smiles\nlarge,C=CC=C" + "C" * 100 + "\nsmall,C=CC=O\n")
    large, small = read_compound_list(path)
    assert "310 atoms" in large.problem and "300-atom limit" in large.problem and small.problem == ""
    assert not read_compound_list(path, allow_large=True)[0].problem


def test_unreadable_and_binary_lists_are_refused(tmp_path, monkeypatch):
    from pathlib import Path

    binary = tmp_path / "binary.sdf"
    binary.write_bytes(bytes(range(256)))
    with pytest.raises(InputError, match="binary file"):
        read_compound_list(binary)
    locked = _write(tmp_path, "locked.csv", "name,smiles\na,C=CC=O\n")
    real = Path.read_bytes

    def read_bytes(self):
        if self.name == "locked.csv":
            raise PermissionError(13, "Permission denied")
        return real(self)

    monkeypatch.setattr(Path, "read_bytes", read_bytes)
    with pytest.raises(InputError, match=r"cannot be read \(Permission denied\); check its permissions"):
        read_compound_list(locked)
