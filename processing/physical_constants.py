"""CODATA constants (2018 exact SI values; 2022 atomic mass constant) used by the analysis, in the units bandwatch computes in.

Kept here as numbers (checked against `scipy.constants` in the tests) so that the analysis
path does not pay for importing scipy at start-up.
"""
from __future__ import annotations

import math

SPEED_OF_LIGHT_CM_S = 2.99792458e10  # exact (SI)
PLANCK_J_S = 6.62607015e-34  # exact (SI)
BOLTZMANN_J_K = 1.380649e-23  # exact (SI)
AVOGADRO_PER_MOL = 6.02214076e23  # exact (SI)
ATOMIC_MASS_UNIT_KG = 1.66053906892e-27  # CODATA 2022 (what scipy.constants carries)
ELECTRON_VOLT_J = 1.602176634e-19  # exact (SI)

# second radiation constant c2 = h c / k in cm K (1.4387768775 cm K)
C2_CM_K = PLANCK_J_S * SPEED_OF_LIGHT_CM_S / BOLTZMANN_J_K
# h / (8 pi^2 c u) in angstrom^2 cm-1 u: r_e / angstrom = sqrt(this / (mu/u x B_e/cm-1))
ROTATIONAL_FACTOR_A2_CM1_U = PLANCK_J_S / (8.0 * math.pi**2 * SPEED_OF_LIGHT_CM_S * ATOMIC_MASS_UNIT_KG) * 1e20
# energy conversions from wavenumber
CM1_TO_EV = PLANCK_J_S * SPEED_OF_LIGHT_CM_S / ELECTRON_VOLT_J
CM1_TO_KJ_PER_MOL = PLANCK_J_S * SPEED_OF_LIGHT_CM_S * AVOGADRO_PER_MOL / 1000.0


def force_constant_n_per_m(omega_e_cm1: float, reduced_mass_u: float) -> float:
    """Harmonic force constant k = mu (2 pi c omega_e)^2, N/m."""
    angular = 2.0 * math.pi * SPEED_OF_LIGHT_CM_S * omega_e_cm1
    return reduced_mass_u * ATOMIC_MASS_UNIT_KG * angular**2


def bond_length_angstrom(B_cm1: float, reduced_mass_u: float) -> float:
    """r = sqrt(h / (8 pi^2 c mu B)), angstrom."""
    return math.sqrt(ROTATIONAL_FACTOR_A2_CM1_U / (reduced_mass_u * B_cm1))
