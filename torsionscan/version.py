"""The package version: one place, read by the package, the run store and the records."""

__version__ = "0.2.0"
