"""Physical constants and unit conversions: the only place numbers like these live.

Inside the package everything numerical is in atomic units (Hartree, Bohr) and radians;
conversions to Angstrom, degrees, kcal/mol and kJ/mol happen only at input and output.
Values are CODATA 2018.
"""

import math

BOHR_ANGSTROM = 0.529177210903  # Angstrom per Bohr
ANGSTROM_BOHR = 1.0 / BOHR_ANGSTROM
HARTREE_KCAL_MOL = 627.5094740631  # kcal/mol per Hartree
HARTREE_EV = 27.211386245988  # eV per Hartree
KCAL_KJ = 4.184  # kJ per kcal (thermochemical calorie)
GAS_CONSTANT_KCAL_MOL_K = 8.314462618e-3 / KCAL_KJ  # kcal/(mol K)


def rt_kcal_mol(temperature_k):
    """RT in kcal/mol at a temperature in kelvin."""
    return GAS_CONSTANT_KCAL_MOL_K * temperature_k


def wrap_deg(angle_deg):
    """Map an angle in degrees to the interval [-180, 180)."""
    return (angle_deg + 180.0) % 360.0 - 180.0


def wrap_rad(angle_rad):
    """Map an angle in radians to the interval [-pi, pi)."""
    return (angle_rad + math.pi) % (2.0 * math.pi) - math.pi
