"""torsionscan: relaxed GFN-xTB torsion scans of conjugated single bonds.

Import side effect: unless the user set them, OpenMP and BLAS are limited to one thread per
process (OMP_NUM_THREADS, OPENBLAS_NUM_THREADS, MKL_NUM_THREADS). Small-molecule GFN-xTB
runs slower when OpenMP and BLAS threads compete for few cores, and parallel work is better
spent on separate processes. This must happen before numpy or an engine library is loaded.
"""

from .threads import limit_threads

limit_threads()

from .version import __version__  # noqa: E402

from .errors import CalculationError, InputError, TorsionScanError  # noqa: E402
from .molecule import find_conjugated_bonds, load_molecule  # noqa: E402
from .driver import scan  # noqa: E402
from .settings import ScanSettings  # noqa: E402

__all__ = [
    "scan", "ScanSettings", "load_molecule", "find_conjugated_bonds",
    "TorsionScanError", "InputError", "CalculationError", "__version__",
]
