"""Thread settings of the numerical libraries (OpenMP, OpenBLAS, MKL).

Small-molecule GFN-xTB runs slower when OpenMP and BLAS threads compete for few cores, and
parallel work goes to Python threads with an engine each (parallel.py) or to processes, so importing torsionscan sets each of these
variables the user has not set to TORSIONSCAN_THREADS (1 when that is not set either;
TORSIONSCAN_THREADS=keep leaves them all alone). It happens before numpy or an engine library is
loaded, because those read the variables when they load. set_threads changes them later: for the
libraries loaded after the call and for processes started after it (batch workers, refinement).
"""

import logging
import os

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
THREADS_VARIABLE = "TORSIONSCAN_THREADS"  # the package's own default; "keep": do not touch the others

log = logging.getLogger(__name__)


def _default_count():
    """The count from TORSIONSCAN_THREADS (1 when unset or unusable), None for "keep"."""
    text = os.environ.get(THREADS_VARIABLE, "").strip().lower()
    if text == "keep":
        return None
    if text.isdigit() and int(text) >= 1:
        return int(text)
    return 1


def limit_threads(count=None):
    """Set every thread variable the user has not set to `count` (default: TORSIONSCAN_THREADS, else 1)."""
    count = _default_count() if count is None else count
    if count is None:
        return
    for variable in THREAD_VARIABLES:
        os.environ.setdefault(variable, str(count))


def set_threads(count):
    """Set OMP_NUM_THREADS, OPENBLAS_NUM_THREADS and MKL_NUM_THREADS to `count` (a whole number >= 1),
    also where the user had set them. Takes effect for libraries loaded afterwards and for new
    processes; a BLAS already loaded (numpy's) keeps its thread count."""
    if isinstance(count, bool) or not isinstance(count, int) or count < 1:
        from .errors import InputError

        raise InputError(f"set_threads({count!r}): give a whole number of threads, 1 or more")
    for variable in THREAD_VARIABLES:
        os.environ[variable] = str(count)
    log.debug("thread variables set to %d", count)


def thread_settings():
    """{variable: value or None} of the thread variables as they are now."""
    return {variable: os.environ.get(variable) for variable in THREAD_VARIABLES}


def usable_cores():
    """CPU cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1
