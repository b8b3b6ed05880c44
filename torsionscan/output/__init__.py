"""Writers for scan results: summary JSON, profile CSV, XYZ/SDF structures, figures, drawings.

A result folder is written from a ScanResult alone (write_results), so a stored run can
rebuild it. Every file is written to a temporary name in the folder and moved into place,
so a crash never leaves a half-written file behind; a new result folder is written whole under
a temporary sibling name and renamed, so it is either complete or absent. A file that cannot be
written (disk full, read-only location) raises StorageError.
"""

import errno
import glob
import io
import os
import re
import shutil
import tempfile
import time
from pathlib import Path

import matplotlib
import matplotlib.pyplot as plt

from ..errors import InputError, StorageError
from .drawing import molecule_drawing
from .plot import populations_figure, profile_figure
from .structures import minima_sdf_text, scan_xyz_text
from .summary import write_profile_table, write_summary
from .viewer import viewer_page

_UMASK = os.umask(0o022)
os.umask(_UMASK)
# a temporary folder of write_results older than this was left by a writer that was killed (writing
# one takes about a second): it is removed when the same folder is written again
STALE_PARTIAL_S = 3600.0


def storage_error(path, error):
    """StorageError for an OSError met writing `path`: what failed, why, and what to do."""
    why = error.strerror or str(error)
    if error.errno in (errno.ENOSPC, errno.EDQUOT):
        advice = "free space (or raise the quota) or choose another location"
    elif error.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        advice = "choose a writable location or fix its permissions"
    else:
        advice = "check the location or choose another one"
    return StorageError(f"cannot write {path} ({why}): {advice}")


def atomic_write(path, write):
    """Run write(temporary_path) and move the result to `path`. Raises StorageError when it cannot be written."""
    path = Path(path)
    temporary = None
    try:
        handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=path.suffix)
        os.close(handle)
        temporary = Path(temporary)
        write(temporary)
        os.chmod(temporary, 0o666 & ~_UMASK)  # the usual permissions of a new file, not mkstemp's 0600
        os.replace(temporary, path)
    except OSError as error:
        raise storage_error(path, error) from None
    finally:
        if temporary is not None:
            temporary.unlink(missing_ok=True)


def check_output_folder(folder):
    """Make sure results can be written into `folder` (created if missing) before anything is computed.

    Raises InputError when it (or a folder above it) is a file, StorageError when it cannot be created or
    written (read-only, no permission, disk full)."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"{folder} is a file, not a folder: choose another --out")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        handle, probe = tempfile.mkstemp(dir=folder, prefix=".write-test.")
        os.close(handle)
        os.unlink(probe)
    except (NotADirectoryError, FileExistsError):
        raise InputError(f"{folder} cannot be a folder: part of its path is a file; choose another --out") from None
    except OSError as error:
        raise storage_error(folder, error) from None


def bond_stem(label):
    """File name stem of one bond's files, e.g. "bond_2-3"."""
    return f"bond_{label}"


def figure_bytes(figure, suffix):
    """A figure saved to bytes in a format (png, svg). An SVG keeps its text as text (a sans-serif
    font stack), editable and searchable: 2.4 times smaller and 0.6 of the time of glyph outlines
    (demo-list profiles, 46 against 110 kB)."""
    buffer = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "none"}):
        figure.savefig(buffer, format=suffix)
    return buffer.getvalue()


def render_figures(result):
    """{bond label: {file name ending: bytes}} of every figure of a ScanResult: the profile as
    "profile.png" and "profile.svg", populations against temperature as "populations.png"."""
    rendered = {}
    for bond in result.bonds:
        profile = profile_figure(result, bond)
        populations = populations_figure(result, bond)
        try:
            rendered[bond.label] = {
                "profile.png": figure_bytes(profile, "png"), "profile.svg": figure_bytes(profile, "svg"),
                "populations.png": figure_bytes(populations, "png"),
            }
        finally:
            plt.close(profile)
            plt.close(populations)
    return rendered


STRUCTURE_NAME = "structure"  # the compound's drawing: structure.svg and structure.png
VIEWER_NAME = "scan_3d.html"  # the compound's 3-D view of its scans (output.viewer), one page for every bond


def render_drawings(result):
    """{file name: bytes} of the numbered 2-D drawings of a ScanResult (output.drawing): the
    compound's structure.svg/.png with the first bond's dihedral highlighted (none without a
    bond), and bond_<j-k>_structure.svg/.png per bond. No PNG where RDKit has no Cairo drawer."""
    wanted = [(STRUCTURE_NAME, result.bonds[0].dihedral_atoms if result.bonds else None)]
    wanted += [(f"{bond_stem(bond.label)}_{STRUCTURE_NAME}", bond.dihedral_atoms) for bond in result.bonds]
    files = {}
    for stem, atoms in wanted:
        drawing = molecule_drawing(result.mol, atoms)
        files[f"{stem}.svg"] = drawing["svg"].encode("utf-8")
        if drawing["png"] is not None:
            files[f"{stem}.png"] = bytes(drawing["png"])
    return files


def write_results(result, out_dir, figures=None):
    """Write every file of a ScanResult into out_dir (created if needed) and return its Path.

    Per bond: bond_<j-k>_profile.csv, _scan.xyz, _minima.sdf, _profile.png/.svg, _populations.png,
    _structure.svg/.png and, when the bond has a torsion fit, its files (output.forcefield); the
    compound's structure.svg/.png (render_drawings), its 3-D view scan_3d.html (output.viewer, opens
    offline); then summary.json.
    figures: already rendered figures (render_figures); drawn here when not given.

    A folder that is missing or empty is written under a temporary sibling name and renamed into place
    (complete or absent); files of an existing folder are replaced one by one, each atomically, and its
    other files are left alone. Temporary siblings older than STALE_PARTIAL_S, left by a writer that
    was killed, are removed. Raises InputError when out_dir is a file, StorageError when it cannot be
    written.
    """
    out_dir = Path(out_dir)
    figures = render_figures(result) if figures is None else figures
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{out_dir} is a file, not a folder: choose another --out")
    _remove_stale_partials(out_dir)
    if out_dir.is_dir() and any(out_dir.iterdir()):
        _write_files(result, out_dir, figures)
        return out_dir
    temporary = None
    try:
        out_dir.parent.mkdir(parents=True, exist_ok=True)
        temporary = Path(tempfile.mkdtemp(dir=out_dir.parent, prefix=_partial_prefix(out_dir), suffix=".partial"))
        _write_files(result, temporary, figures)
        os.chmod(temporary, 0o777 & ~_UMASK)  # a new folder's usual permissions, not mkdtemp's 0700
        try:
            os.replace(temporary, out_dir)  # also replaces an empty folder of that name
            temporary = None
        except OSError as error:
            if error.errno not in (errno.ENOTEMPTY, errno.EEXIST) or not out_dir.is_dir():
                raise
            _write_files(result, out_dir, figures)  # written meanwhile by another process: update it in place
    except OSError as error:
        raise storage_error(out_dir, error) from None
    except StorageError as error:  # name the folder asked for, not its temporary sibling
        raise StorageError(str(error).replace(str(temporary), str(out_dir))) from None
    finally:
        if temporary is not None:
            shutil.rmtree(temporary, ignore_errors=True)
    return out_dir


def _partial_prefix(out_dir):
    return f".{out_dir.name}."


def _remove_stale_partials(out_dir):
    """Remove the temporary siblings of out_dir that a killed writer left behind (older than STALE_PARTIAL_S)."""
    if not out_dir.parent.is_dir():
        return
    now = time.time()
    # tempfile.mkdtemp's random part: 8 characters of [a-z0-9_], so another folder's "name.x" never matches
    own = re.compile(re.escape(_partial_prefix(out_dir)) + r"[a-z0-9_]{8}\.partial")
    for sibling in out_dir.parent.glob(f"{glob.escape(_partial_prefix(out_dir))}*.partial"):
        try:
            if own.fullmatch(sibling.name) and sibling.is_dir() and now - sibling.stat().st_mtime > STALE_PARTIAL_S:
                shutil.rmtree(sibling, ignore_errors=True)
        except OSError:
            pass  # gone meanwhile, or not ours to read: leave it


def _write_files(result, out_dir, figures):
    """Every file of write_results into an existing folder."""
    for name, data in render_drawings(result).items():
        atomic_write(out_dir / name, lambda p, d=data: p.write_bytes(d))
    for bond in result.bonds:
        stem = out_dir / bond_stem(bond.label)
        atomic_write(f"{stem}_profile.csv", lambda p, b=bond: write_profile_table(b, p))
        atomic_write(f"{stem}_scan.xyz", lambda p, b=bond: p.write_text(scan_xyz_text(result, b)))
        atomic_write(f"{stem}_minima.sdf", lambda p, b=bond: p.write_text(minima_sdf_text(result, b)))
        for ending, data in figures[bond.label].items():
            atomic_write(f"{stem}_{ending}", lambda p, d=data: p.write_bytes(d))
        if bond.torsion_fit is not None:
            from .forcefield import write_torsion_fit

            write_torsion_fit(result, bond, out_dir)
    page = viewer_page(result)
    if page is not None:
        atomic_write(out_dir / VIEWER_NAME, lambda p: p.write_text(page, encoding="utf-8"))
    atomic_write(out_dir / "summary.json", lambda p: write_summary(result, p))
