"""Writers for scan results: summary JSON, profile CSV, XYZ/SDF structures, plots.

Every file is written to a temporary name in the result folder and moved into place, so a
crash never leaves a half-written file behind.
"""

import os
import tempfile
from pathlib import Path

import matplotlib.pyplot as plt

from .plot import profile_figure
from .structures import write_minima_sdf, write_scan_xyz
from .summary import bond_label, summary_dict, write_profile_table, write_summary


def _atomic(path, write):
    """Run write(temporary_path) and move the result to `path`."""
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=path.suffix)
    os.close(handle)
    temporary = Path(temporary)
    try:
        write(temporary)
        os.replace(temporary, path)
    finally:
        temporary.unlink(missing_ok=True)


def write_results(result, out_dir):
    """Write all files of a ScanResult into out_dir; returns its summary (see summary_dict)."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    summary = summary_dict(result)
    for bond, entry in zip(result.bonds, summary["bonds"]):
        stem = f"bond_{bond_label(bond.dihedral_atoms)}"
        for name, write in (
            (f"{stem}_profile.csv", lambda p, e=entry: write_profile_table(e, p)),
            (f"{stem}_scan.xyz", lambda p, b=bond: write_scan_xyz(result, b, p)),
            (f"{stem}_minima.sdf", lambda p, b=bond: write_minima_sdf(result, b, p)),
        ):
            _atomic(out_dir / name, write)
        figure = profile_figure(result, bond)
        for suffix in ("png", "svg"):
            path = out_dir / f"{stem}_profile.{suffix}"
            _atomic(path, lambda p, s=suffix: figure.savefig(p, format=s))
        plt.close(figure)
    _atomic(out_dir / "summary.json", lambda p: write_summary(summary, p))
    return summary
