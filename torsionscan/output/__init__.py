"""Writers for scan results: summary JSON, profile CSV, XYZ/SDF structures, plots.

A compound's folder is written from two plain-data parts, so a stored run can rebuild it:
its summary (summary_dict) and the structure texts of each bond (structure_texts).
Every file is written to a temporary name in the folder and moved into place, so a crash
never leaves a half-written file behind.
"""

import io
import os
import tempfile
from pathlib import Path

import matplotlib.pyplot as plt

from .plot import populations_figure, profile_figure
from .structures import minima_sdf_text, scan_xyz_text
from .summary import bond_label, summary_dict, write_profile_table, write_summary


_UMASK = os.umask(0o022)
os.umask(_UMASK)


def atomic_write(path, write):
    """Run write(temporary_path) and move the result to `path`."""
    path = Path(path)
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=path.suffix)
    os.close(handle)
    temporary = Path(temporary)
    try:
        write(temporary)
        os.chmod(temporary, 0o666 & ~_UMASK)  # the usual permissions of a new file, not mkstemp's 0600
        os.replace(temporary, path)
    finally:
        temporary.unlink(missing_ok=True)


def structure_texts(result):
    """{bond label: {"scan_xyz": text, "minima_sdf": text}} for every scanned bond of a ScanResult."""
    return {
        bond_label(bond.dihedral_atoms): {
            "scan_xyz": scan_xyz_text(result, bond), "minima_sdf": minima_sdf_text(result, bond),
        }
        for bond in result.bonds
    }


def bond_stem(label):
    """File name stem of one bond's files, e.g. "bond_2-3"."""
    return f"bond_{label}"


def figure_bytes(figure, suffix):
    """A figure saved to bytes in a format (png, svg)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format=suffix)
    return buffer.getvalue()


def render_figures(summary):
    """{bond label: {file name ending: bytes}} of every figure of a summary: the profile as
    "profile.png" and "profile.svg", populations against temperature as "populations.png"."""
    temperature_range = summary["settings"].get("temperature_range_k") or (200.0, 450.0)
    rendered = {}
    for entry in summary["bonds"]:
        profile = profile_figure(summary["name"], entry)
        populations = populations_figure(summary["name"], entry, temperature_range)
        rendered[entry["bond"]] = {
            "profile.png": figure_bytes(profile, "png"), "profile.svg": figure_bytes(profile, "svg"),
            "populations.png": figure_bytes(populations, "png"),
        }
        plt.close(profile)
        plt.close(populations)
    return rendered


def write_compound_folder(summary, structures, out_dir, figures=None):
    """Write a compound's files from its summary and structure texts into out_dir.

    figures: already rendered figures (render_figures); drawn here when not given.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    figures = render_figures(summary) if figures is None else figures
    for entry in summary["bonds"]:
        stem = bond_stem(entry["bond"])
        texts = structures.get(entry["bond"], {})
        atomic_write(out_dir / f"{stem}_profile.csv", lambda p, e=entry: write_profile_table(e, p))
        for key, suffix in (("scan_xyz", "_scan.xyz"), ("minima_sdf", "_minima.sdf")):
            if key in texts:
                atomic_write(out_dir / f"{stem}{suffix}", lambda p, t=texts[key]: p.write_text(t))
        for ending, data in figures[entry["bond"]].items():
            atomic_write(out_dir / f"{stem}_{ending}", lambda p, d=data: p.write_bytes(d))
    atomic_write(out_dir / "summary.json", lambda p: write_summary(summary, p))


def write_results(result, out_dir):
    """Write all files of a ScanResult into out_dir; returns its summary (see summary_dict)."""
    summary = summary_dict(result)
    write_compound_folder(summary, structure_texts(result), out_dir)
    return summary
