"""The package's exceptions: problems with what the user gave vs calculations that failed.

The command line maps them to one-line messages and exit codes (2 input, 3 calculation, 5 storage).
"""


class TorsionScanError(Exception):
    """Base class for every error this package raises on purpose."""

    exit_code = 1


class InputError(TorsionScanError):
    """The input (molecule, file, option) cannot be used; the message says how to fix it."""

    exit_code = 2


class CalculationError(TorsionScanError):
    """A quantum-chemical calculation or an optimisation failed."""

    exit_code = 3


class TimeLimitExceeded(TorsionScanError):
    """A compound's calculations ran past the time allowed for it (checked between gradients)."""

    exit_code = 3


class StorageError(TorsionScanError):
    """Results cannot be written or read back: disk full, read-only location, corrupt database."""

    exit_code = 5
