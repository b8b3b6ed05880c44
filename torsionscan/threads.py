"""Thread settings of the numerical libraries (OpenMP, OpenBLAS, MKL).

Small-molecule GFN-xTB runs slower when OpenMP and BLAS threads compete for few cores, and
parallel work is better spent on separate processes, so the package limits each process to one
thread unless the user set these variables (limit_threads, called when the package is imported,
before numpy or an engine library is loaded).
"""

import os

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def limit_threads(count=1):
    """Set every thread variable the user has not set to `count`."""
    for variable in THREAD_VARIABLES:
        os.environ.setdefault(variable, str(count))


def usable_cores():
    """CPU cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1
