"""Reading compound lists for batch scans: CSV/TSV tables, .smi files and multi-record SDF.

Every compound in the list becomes a CompoundEntry, even one that cannot be scanned: such an
entry carries a one-line `problem` instead of stopping the whole batch. Only problems with the
file as a whole (missing, unreadable, unknown format, no compounds, no SMILES column) raise InputError.

A table's `smiles` cell is only ever read as SMILES, never as a file name. A structure from a
file comes through the `structure_file` column: a MOL/SDF (first record) or XYZ file, relative to
the list's folder, and refused when it lies outside that folder (symbolic links followed) unless
allowed. Molecules above molecule.MAX_ATOMS atoms are refused unless allowed. Both permissions are
keyword arguments of read_compound_list (default: neither allowed).

Each entry gets a `name` that is unique within the list and whose folder name (safe_name,
compared ignoring letter case) is unique too. Locations are 1-based: physical line numbers for
text files (the header is line 1), record numbers for SDF.
"""

import csv
import hashlib
import io
import re
from dataclasses import dataclass, field
from itertools import chain, count
from pathlib import Path

from rdkit import Chem

from .errors import InputError
from .molecule import check_size, load_molecule, safe_name

_FORMATS = {
    ".csv": "csv", ".tsv": "tsv", ".smi": "smi", ".smiles": "smi", ".sdf": "sdf", ".sd": "sdf",
}
# list column / SDF data field -> the _Row attribute it fills
_KNOWN_FIELDS = {"smiles": "smiles", "name": "name", "bond": "bond", "charge": "charge",
                 "unpaired_electrons": "unpaired", "structure_file": "structure_file"}
_STRUCTURE_COLUMNS = ("smiles", "structure_file")  # SDF records: the record itself is the structure


_INTEGER = re.compile(r"[+-]?[0-9]+(?:\.0*)?")


@dataclass(frozen=True)
class CompoundEntry:
    """One compound of a list.

    name: unique key within the run. where: "line 7" or "record 3". smiles: as given (SDF: the
    record's canonical SMILES, "" if unreadable). molblock: SDF only, MOL block with explicit
    hydrogens. bond: "j-k" or "i-j-k-l" (1-based atom numbers) or "". charge: total charge,
    None = from the structure. unpaired_electrons: number of unpaired electrons (0 = singlet).
    extra: other columns / data fields in file order, as strings. problem: non-empty if the
    entry cannot be scanned (what to fix). note: non-empty if something was fixed automatically.
    atoms: atoms with hydrogens, 0 when the structure could not be read.
    """

    name: str
    where: str
    smiles: str
    molblock: str = ""
    bond: str = ""
    charge: int | None = None
    unpaired_electrons: int = 0
    extra: dict = field(default_factory=dict)
    problem: str = ""
    note: str = ""
    atoms: int = 0


def entry_input(entry):
    """The fields that define an entry's calculation, as a plain dict (to detect changed input)."""
    return {
        "smiles": entry.smiles,
        "molblock": entry.molblock,
        "bond": entry.bond,
        "charge": entry.charge,
        "unpaired_electrons": entry.unpaired_electrons,
    }


@dataclass
class _Row:
    """A compound as read from the file, before names and numbers are checked."""

    number: int  # line or record number, 1-based
    unit: str  # "line" or "record"
    name: str = ""
    smiles: str = ""
    molblock: str = ""
    bond: str = ""
    charge: str = ""
    unpaired: str = ""
    structure_file: str = ""
    extra: dict = field(default_factory=dict)
    problems: list = field(default_factory=list)

    @property
    def where(self):
        return f"{self.unit} {self.number}"

    @property
    def at(self):
        return f"on line {self.number}" if self.unit == "line" else f"in record {self.number}"

    @property
    def tag(self):
        return f"{self.unit}-{self.number}"


def read_compound_list(path, *, allow_outside_files=False, allow_large=False):
    """Read a compound list: CSV with a header, .smi (SMILES then name), or multi-record SDF.

    The format follows the suffix: .csv (comma), .tsv (tab), .smi/.smiles, .sdf/.sd. Returns the
    entries in file order; entries that cannot be scanned have `problem` set.
    allow_outside_files: read structure_file entries outside the list's folder; allow_large:
    accept molecules above molecule.MAX_ATOMS atoms.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"compound list {path} not found; check the path")
    if not path.is_file():
        raise InputError(f"compound list {path} is not a file; give the path of a .csv, .smi or .sdf file")
    kind = _FORMATS.get(path.suffix.lower())
    if kind is None:
        suffix = path.suffix or "(no suffix)"
        raise InputError(
            f"compound list {path} has an unsupported suffix {suffix}; "
            f"use one of {', '.join(_FORMATS)}"
        )
    if kind == "sdf":
        rows = _read_sdf(path)
    elif kind == "smi":
        rows = _read_smi(_read_text(path))
    else:
        rows = _read_table(_read_text(path), "," if kind == "csv" else "\t", path)
    if not rows:
        raise InputError(f"compound list {path} has no compounds; add at least one")
    return _finish(rows, path.resolve().parent, allow_outside_files, allow_large)


def _read_bytes(path):
    try:
        return path.read_bytes()
    except OSError as error:
        raise InputError(f"compound list {path} cannot be read ({error.strerror}); check its permissions") from None


def _read_text(path):
    data = _read_bytes(path)
    if b"\0" in data:
        raise InputError(f"compound list {path} is a binary file, not UTF-8 text; save it as CSV, .smi or SDF text")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise InputError(
            f"compound list {path} is not UTF-8 text (line {line}); save it as UTF-8 "
            f"(in Excel: 'CSV UTF-8')"
        ) from None


def _normalise(header):
    return re.sub(r"[\s-]+", "_", header.strip().lower())


def _is_skipped(cells):
    """Blank rows and comment rows (first non-empty cell starts with '#')."""
    filled = [c.strip() for c in cells if c.strip()]
    return not filled or filled[0].startswith("#")


def _csv_rows(text, delimiter):
    """(first line, last line, cells or None, csv error text) for every row of the table."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    rows, last = [], 0
    while True:
        try:
            cells = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            if reader.line_num == last:
                break
            rows.append((last + 1, reader.line_num, None, str(exc)))
        else:
            rows.append((last + 1, reader.line_num, cells, ""))
        last = reader.line_num
    return rows


def _read_table(text, delimiter, path):
    rows = _csv_rows(text, delimiter)
    body = iter(rows)
    header = None
    for first, _, cells, error in body:
        if error:
            raise InputError(
                f"compound list {path}: the header on line {first} could not be read ({error}); fix its quotes"
            )
        if not _is_skipped(cells):
            header = [c.strip() for c in cells]
            break
    if header is None:
        return []
    keys = [_normalise(h) for h in header]
    if not any(key in keys for key in _STRUCTURE_COLUMNS):
        found = ", ".join(repr(h) for h in header)
        hint = ""
        if delimiter == "," and any(";" in h or "\t" in h for h in header):
            hint = " (the file seems to use ';' or tabs between columns; save it comma-separated)"
        raise InputError(
            f"compound list {path} has no 'smiles' column (nor 'structure_file'){hint}; columns found: {found}; "
            f"add a header line such as 'name,smiles'"
        )
    for key in dict.fromkeys(k for k in keys if k):
        if keys.count(key) > 1:
            raise InputError(
                f"compound list {path} has the column '{key}' more than once in its header; "
                f"rename or remove the extra one"
            )
    data = [r for r in body if r[2] is None or not _is_skipped(r[2])]
    # columns without a header are kept only if some row fills them
    used = [bool(k) or any(cells and i < len(cells) and cells[i].strip() for _, _, cells, _ in data)
            for i, k in enumerate(keys)]
    separator = "commas" if delimiter == "," else "tabs"
    result = []
    for first, last, cells, error in data:
        row = _Row(first, "line")
        result.append(row)
        if error:
            row.problems.append(f"line {first} could not be read as a table row ({error}); check its quotes")
            continue
        if any(c.strip() for c in cells[len(header):]):
            row.problems.append(
                f"line {first} has {len(cells)} cells but the header has {len(header)}; "
                f"check for unquoted {separator}"
            )
        if any("\n" in c or "\r" in c for c in cells):
            row.problems.append(
                f"line {first} has a line break inside a quoted cell (lines {first}-{last}); "
                f"check for an unmatched double quote"
            )
        for i, (key, title) in enumerate(zip(keys, header)):
            value = cells[i].strip() if i < len(cells) else ""
            if key in _KNOWN_FIELDS:
                setattr(row, _KNOWN_FIELDS[key], value)
            elif used[i]:
                row.extra[title or f"column {i + 1}"] = value
        if row.smiles and row.structure_file:
            row.problems.append(f"line {first} gives both a SMILES and a structure_file; give one of them")
        elif not row.smiles and not row.structure_file:
            row.problems.append(f"no SMILES on line {first}" + (" (nor a structure_file)" if "structure_file" in keys
                                                                else ""))
    return result


def _read_smi(text):
    result = []
    header_checked = False
    for number, line in enumerate(io.StringIO(text, newline=None), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        parts = stripped.split(None, 1)
        if not header_checked:
            header_checked = True
            if parts[0].lower() == "smiles":
                continue
        name = parts[1].strip() if len(parts) > 1 else ""
        result.append(_Row(number, "line", name=name, smiles=parts[0]))
    return result


def _read_sdf(path):
    data = _read_bytes(path)
    if not data.strip():
        return []
    if b"\0" in data:
        raise InputError(f"compound list {path} is a binary file, not an SD text file; give a text .sdf file")
    try:
        supplier = Chem.SDMolSupplier()
        supplier.SetData(data.decode("utf-8-sig"), removeHs=False, sanitize=True)
    except UnicodeDecodeError:  # the file's own bytes, so a data field in another encoding is reported by name
        supplier = Chem.SDMolSupplier(str(path), removeHs=False, sanitize=True)
    result = []
    for index in range(len(supplier)):
        number = index + 1
        mol = supplier[index]
        row = _Row(number, "record")
        result.append(row)
        if mol is None:
            try:
                text = supplier.GetItemText(index)
            except (RuntimeError, UnicodeDecodeError):
                text = ""
            title, fields = _parse_record_text(text)
            row.problems.append(
                f"record {number} could not be read ({_unreadable_reason(text)}); fix or remove it"
            )
        else:
            title = mol.GetProp("_Name") if mol.HasProp("_Name") else ""
            fields = {}
            for key in mol.GetPropNames():
                try:
                    fields[key] = mol.GetProp(key)
                except UnicodeDecodeError:
                    fields[key] = ""
                    row.problems.append(
                        f"data field '{key}' in record {number} is not UTF-8 text; save the file as UTF-8"
                    )
            if mol.GetNumAtoms() == 0:
                row.problems.append(f"record {number} has no atoms; fix or remove it")
            else:
                row.molblock = Chem.MolToMolBlock(mol)
                row.smiles = _canonical_smiles(mol)
        _apply_fields(row, title.strip(), fields)
    return result


def _apply_fields(row, title, fields):
    """Distribute SDF data fields: name, bond, charge, unpaired_electrons; the rest to extra."""
    taken = set()
    for key, value in fields.items():
        value = value.strip()
        known = _normalise(key)
        # the structure comes from the record, never from a SMILES or file field
        if known in _KNOWN_FIELDS and known not in _STRUCTURE_COLUMNS and known not in taken:
            taken.add(known)
            setattr(row, _KNOWN_FIELDS[known], value)
        else:
            row.extra[key] = value
    if not row.name:
        row.name = title


def _parse_record_text(text):
    """Title line and data fields of a raw SDF record, for records RDKit cannot read."""
    lines = text.splitlines()
    title = lines[0] if lines else ""
    fields, current = {}, None
    for line in lines[1:]:
        match = re.match(r">.*?<([^>]*)>", line)
        if match:
            current = match.group(1)
            fields[current] = []
        elif current is not None:
            if not line.strip():
                current = None
            else:
                fields[current].append(line)
    return title, {k: "\n".join(v) for k, v in fields.items()}


def _unreadable_reason(text):
    mol = Chem.MolFromMolBlock(text, sanitize=False, removeHs=False) if text else None
    if mol is None:
        return "bad structure block"
    for issue in Chem.DetectChemistryProblems(mol):
        if issue.GetType() == "AtomValenceException":
            atom = issue.GetAtomIdx()
            symbol = mol.GetAtomWithIdx(atom).GetSymbol()
            return f"atom {atom + 1} ({symbol}) has more bonds than its charge allows"
        if "Kekulize" in issue.GetType():
            return "an aromatic ring cannot be written with alternating single and double bonds"
        return "the structure is not chemically valid"
    return "bad structure block"


def _canonical_smiles(mol):
    try:
        return Chem.MolToSmiles(Chem.RemoveHs(mol))
    except Exception:  # RemoveHs can fail on unusual hydrogens; keep them then
        return Chem.MolToSmiles(mol)


def _parse_integer(text, column, row, problems):
    """Integer value of a charge / unpaired-electron cell; None if empty or invalid."""
    if not text:
        return None
    if not _INTEGER.fullmatch(text):
        problems.append(
            f"{column} '{text}' {row.at} is not a whole number; write an integer such as 0, 1 or -1"
        )
        return None
    return int(text.split(".")[0])


def input_tag(smiles, molblock, fallback):
    """The automatic name of an unnamed compound: "unnamed-" and 8 hex digits of a hash of its
    structure (stable when lines are added or removed elsewhere in the list, so a rerun resumes it);
    fallback (e.g. "line-7") when there is no structure."""
    text = molblock or smiles
    return f"unnamed-{hashlib.sha256(text.encode()).hexdigest()[:8]}" if text else fallback


def _auto_names(tag):
    """tag, tag-2, tag-3, ..."""
    yield tag
    for k in count(2):
        yield f"{tag}-{k}"


def _first_free(candidates, names, folders):
    for candidate in candidates:
        if candidate not in names and safe_name(candidate).lower() not in folders:
            return candidate


def _atom_count(mol):
    """Atoms of an RDKit molecule with its hydrogens, implicit ones included."""
    return mol.GetNumAtoms() + sum(atom.GetTotalNumHs() for atom in mol.GetAtoms())


def _check_smiles(row, problems):
    """A table or .smi row's SMILES cell: only ever SMILES (never a file name); the parsed molecule or None."""
    mol = Chem.MolFromSmiles(row.smiles)
    if mol is None:
        looks_like_file = "/" in row.smiles or "\\" in row.smiles or Path(row.smiles).suffix.lower() in (
            ".sdf", ".sd", ".mol", ".xyz")
        hint = ("; the smiles column holds SMILES only: name structure files in a structure_file column"
                if looks_like_file else "; check the string")
        problems.append(f"could not read {row.smiles!r} as SMILES {row.at}{hint}")
    return mol


def _structure_file(row, charge, base, allow_outside_files, problems):
    """(MOL block with hydrogens, canonical SMILES) of a row's structure_file, or ("", "") with a problem."""
    cell = row.structure_file
    target = (base / cell).resolve()
    if not allow_outside_files and not target.is_relative_to(base):
        problems.append(f"structure_file {cell!r} {row.at} is outside the list's folder {base}; put the file "
                        "beside the list or pass --allow-outside-files")
        return "", ""
    try:
        molecule = load_molecule(target, charge=charge)
    except InputError as error:
        problems.append(f"structure_file {cell!r} {row.at}: {error}")
        return "", ""
    return Chem.MolToMolBlock(molecule.mol), molecule.smiles


def _finish(rows, base, allow_outside_files=False, allow_large=False):
    """Turn rows into entries: defaults, integer checks, SMILES and structure files, sizes, unique names.

    base: the list's folder (absolute), which structure_file entries are relative to."""
    names = {}  # name -> row of its first use
    folders = {}  # lower-case folder name -> (name, row)
    entries = []
    for row in rows:
        problems = list(row.problems)
        note = ""
        charge = _parse_integer(row.charge, "charge", row, problems)
        mol = None
        if row.structure_file and not row.smiles:
            row.molblock, row.smiles = _structure_file(row, charge, base, allow_outside_files, problems)
            mol = Chem.MolFromMolBlock(row.molblock, removeHs=False) if row.molblock else None
        elif row.molblock:
            mol = Chem.MolFromMolBlock(row.molblock, removeHs=False)
        elif row.smiles:
            mol = _check_smiles(row, problems)
        atoms = 0 if mol is None else _atom_count(mol)
        if mol is not None:
            try:
                check_size(atoms, allow_large)
            except InputError as error:
                problems.append(f"{row.where}: {error}")
        unpaired = _parse_integer(row.unpaired, "unpaired_electrons", row, problems)
        if unpaired is None:
            unpaired = 0
        elif unpaired < 0:
            problems.append(
                f"unpaired_electrons '{row.unpaired}' {row.at} is negative; "
                f"write 0 for a closed-shell molecule or the number of unpaired electrons"
            )
            unpaired = 0
        name = row.name.strip()
        if not name:
            name = _first_free(_auto_names(input_tag(row.smiles, row.molblock, row.tag)), names, folders)
            note = f"no name given; called it {name}"
        else:
            folder = safe_name(name)
            clash = None
            if name in names:
                clash = (
                    f"name '{name}' is already used {names[name].at}; give each compound its own name"
                )
            elif folder.lower() in folders:
                other, other_row = folders[folder.lower()]
                clash = (
                    f"name '{name}' gives the same folder name '{folder}' as '{other}' {other_row.at} "
                    f"(folder names keep only letters, digits, '.', '_', '-', at most 60 characters, "
                    f"and ignore case); give each compound a clearly different name"
                )
            if clash:
                problems.append(clash)
                name = _first_free(chain([f"{name}@{row.tag}"], _auto_names(row.tag)), names, folders)
        names.setdefault(name, row)
        folders.setdefault(safe_name(name).lower(), (name, row))
        entries.append(CompoundEntry(
            name=name,
            where=row.where,
            smiles=row.smiles,
            molblock=row.molblock,
            bond=row.bond.strip(),
            charge=charge,
            unpaired_electrons=unpaired,
            extra=dict(row.extra),
            problem="; ".join(problems),
            note=note,
            atoms=atoms,
        ))
    return entries
