"""Shared fixtures: real GFN2-xTB scans of small reference molecules, computed once per session."""

import pytest

import torsionscan
from torsionscan.settings import ScanSettings


@pytest.fixture(scope="session")
def butadiene_scan():
    """Relaxed 15-degree scan of 1,3-butadiene (real GFN2-xTB)."""
    return torsionscan.scan("C=CC=C", name="butadiene")


@pytest.fixture(scope="session")
def biphenyl_scan():
    """Relaxed 15-degree scan of biphenyl (real GFN2-xTB)."""
    return torsionscan.scan("c1ccccc1-c1ccccc1", name="biphenyl", settings=ScanSettings(conformers=2))
