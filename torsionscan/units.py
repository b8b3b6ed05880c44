"""Physical constants and unit conversions: the only place numbers like these live.

Inside the package everything numerical is in atomic units (Hartree, Bohr) and radians;
conversions to Angstrom, degrees, kcal/mol and kJ/mol happen only at input and output.
Values are CODATA 2018.
"""

import math

# SI (h, c, k_B and N_A are exact by definition)
PLANCK_J_S = 6.62607015e-34
SPEED_OF_LIGHT_M_S = 299792458.0
BOLTZMANN_J_K = 1.380649e-23
AVOGADRO_PER_MOL = 6.02214076e23
AMU_KG = 1.66053906660e-27
HARTREE_J = 4.3597447222071e-18
CAL_J = 4.184  # thermochemical calorie
GAS_CONSTANT_J_MOL_K = BOLTZMANN_J_K * AVOGADRO_PER_MOL

BOHR_ANGSTROM = 0.529177210903  # Angstrom per Bohr
ANGSTROM_BOHR = 1.0 / BOHR_ANGSTROM
HARTREE_KCAL_MOL = 627.5094740631  # kcal/mol per Hartree
HARTREE_EV = 27.211386245988  # eV per Hartree
BOHR_M = BOHR_ANGSTROM * 1e-10
KCAL_KJ = CAL_J  # kJ per kcal (thermochemical calorie)
GAS_CONSTANT_KCAL_MOL_K = GAS_CONSTANT_J_MOL_K / CAL_J / 1000.0  # kcal/(mol K)


def rt_kcal_mol(temperature_k):
    """RT in kcal/mol at a temperature in kelvin."""
    return GAS_CONSTANT_KCAL_MOL_K * temperature_k


def wrap_deg(angle_deg):
    """Map an angle in degrees to the interval [-180, 180)."""
    return (angle_deg + 180.0) % 360.0 - 180.0


def wrap_rad(angle_rad):
    """Map an angle in radians to the interval [-pi, pi)."""
    return (angle_rad + math.pi) % (2.0 * math.pi) - math.pi
