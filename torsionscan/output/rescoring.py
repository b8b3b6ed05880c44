"""Re-scoring a finished scan folder with DFT single points and rewriting its files."""

from pathlib import Path

from ..batch import usable_cores
from ..rescore import check_level, parse_level, rescore_summary
from . import write_compound_folder
from .forcefield import read_scan_bond, read_summary


def rescore_folder(folder, level_text, threads=None):
    """Re-score every bond of a scan folder at a DFT level; rewrites summary.json, tables and figures.

    Returns the updated summary.
    """
    folder = Path(folder)
    level = parse_level(level_text)
    summary = read_summary(folder)
    frames, symbols = {}, None
    for entry in summary["bonds"]:
        _, mol, bond_frames = read_scan_bond(folder, summary, entry["bond"])
        frames[entry["bond"]] = bond_frames
        symbols = [atom.GetSymbol() for atom in mol.GetAtoms()]
    check_level(level, symbols, summary["charge"], summary["unpaired_electrons"])
    summary = rescore_summary(summary, frames, symbols, level, threads or usable_cores())
    write_compound_folder(summary, {}, folder)  # summary.json, profile tables and figures; structures stay
    return summary
