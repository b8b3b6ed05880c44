"""torsionscan: relaxed GFN-xTB torsion scans of conjugated single bonds.

    import torsionscan
    result = torsionscan.scan("C=CC=O", name="acrolein")
    result                      # the answer per bond: s-cis share, barrier, quality flags
    result.table()              # plain rows (result.to_dataframe() with pandas)
    torsionscan.write(result, "results/acrolein")   # the files the command line writes

Import side effect: the OpenMP and BLAS thread variables (OMP_NUM_THREADS, OPENBLAS_NUM_THREADS,
MKL_NUM_THREADS) that are not set already are set to 1, or to TORSIONSCAN_THREADS when that is set
("keep" leaves them alone): small-molecule GFN-xTB runs slower when threads compete for few cores,
and parallel work goes to threads with an engine each or to processes instead. This must happen
before numpy or an engine library is loaded; set_threads changes the count later (torsionscan.threads).
"""

from .threads import limit_threads as _limit_threads

_limit_threads()

from .version import __version__  # noqa: E402

from .errors import CalculationError, InputError, StorageError, TorsionScanError  # noqa: E402
from .molecule import find_conjugated_bonds, load_molecule  # noqa: E402
from .driver import scan  # noqa: E402
from .settings import ScanSettings  # noqa: E402
from .threads import set_threads, thread_settings  # noqa: E402


def write(result, folder):
    """Write every file the command line writes for a ScanResult into `folder` (created if needed):
    summary.json, per bond the profile table (CSV), structures (XYZ, SDF), figures (PNG, SVG), the
    numbered drawings and the 3-D page scan_3d.html. Returns the folder as a Path; StorageError when
    it cannot be written."""
    from .output import write_results

    return write_results(result, folder)


def read(folder):
    """The ScanResult stored in a result folder (its summary.json)."""
    from .workflows import read_result

    return read_result(folder)


__all__ = [
    "scan", "write", "read", "ScanSettings", "load_molecule", "find_conjugated_bonds", "set_threads",
    "thread_settings", "TorsionScanError", "InputError", "CalculationError", "StorageError", "__version__",
]


def __dir__():
    return sorted(__all__)
