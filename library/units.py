"""Unit conversions used across olibra, in one place.

The constants are the CODATA 2022 recommended values (Rev. Mod. Phys. 97,
025002 (2025), from memory); those the 2019 SI defines are exact. They are
written out here rather than read from :mod:`scipy.constants` because importing
SciPy costs about 0.2 s, too long for every `olibra` start; the tests check
each one against :mod:`scipy.constants`. Names carry both units:
``HARTREE_TO_KCAL_PER_MOL`` multiplies a value in hartree and gives kcal/mol.
The kilocalorie is the thermochemical one (4.184 kJ exactly).
"""

from __future__ import annotations

import math

import numpy as np

# exact in the 2019 SI
AVOGADRO_PER_MOL = 6.02214076e23
SPEED_OF_LIGHT_M_PER_S = 299792458.0
BOLTZMANN_J_PER_K = 1.380649e-23
ELEMENTARY_CHARGE_C = 1.602176634e-19
PLANCK_J_S = 6.62607015e-34
HBAR_J_S = PLANCK_J_S / (2.0 * math.pi)
ELECTRON_VOLT_J = ELEMENTARY_CHARGE_C
CALORIE_J = 4.184  # thermochemical calorie, exact by definition
ANGSTROM_M = 1.0e-10
# measured (CODATA 2022)
ATOMIC_MASS_UNIT_KG = 1.66053906892e-27
BOHR_M = 5.29177210544e-11
HARTREE_J = 4.3597447222060e-18
VACUUM_PERMITTIVITY_F_PER_M = 8.8541878188e-12

GAS_CONSTANT_J_PER_MOL_K = AVOGADRO_PER_MOL * BOLTZMANN_J_PER_K
GAS_CONSTANT_KCAL_PER_MOL_K = GAS_CONSTANT_J_PER_MOL_K / (1000.0 * CALORIE_J)
KCAL_PER_MOL_J = CALORIE_J * 1.0e3 / AVOGADRO_PER_MOL  # energy of one molecule, J
BOLTZMANN_KCAL_PER_MOL_K = BOLTZMANN_J_PER_K / KCAL_PER_MOL_J
DEBYE_C_M = 1.0e-21 / SPEED_OF_LIGHT_M_PER_S  # 1 D = 1e-21 / c  C m (definition)

BOHR_TO_ANGSTROM = BOHR_M / ANGSTROM_M
ANGSTROM_TO_BOHR = 1.0 / BOHR_TO_ANGSTROM
HARTREE_TO_KCAL_PER_MOL = HARTREE_J / KCAL_PER_MOL_J
HARTREE_PER_BOHR_TO_KCAL_PER_MOL_A = HARTREE_TO_KCAL_PER_MOL / BOHR_TO_ANGSTROM
HARTREE_PER_BOHR2_TO_KCAL_PER_MOL_A2 = HARTREE_TO_KCAL_PER_MOL / BOHR_TO_ANGSTROM**2
E_BOHR_TO_E_ANGSTROM = BOHR_TO_ANGSTROM

# A mass-weighted force constant in kcal/mol/A^2/amu is an angular frequency
# squared once expressed in SI: omega^2 [s^-2] = lambda * this factor.
_KCAL_MOL_A2_AMU_TO_S2 = KCAL_PER_MOL_J / (ANGSTROM_M**2 * ATOMIC_MASS_UNIT_KG)

# Integrated infrared absorption of a fundamental (double-harmonic
# approximation): A = N_A / (12 eps0 c^2) * |d mu / d Q|^2 in m/mol, with mu in
# C m and the mass-weighted normal coordinate Q in kg^(1/2) m. Expressed for
# dipole derivatives in elementary charges per amu^(1/2) (e amu^-1/2,
# i.e. (e A)/(A amu^1/2)) and results in km/mol this is about 974.9.
IR_E2_PER_AMU_TO_KM_PER_MOL = (
    AVOGADRO_PER_MOL * ELEMENTARY_CHARGE_C**2
    / (12.0 * VACUUM_PERMITTIVITY_F_PER_M * SPEED_OF_LIGHT_M_PER_S**2 * ATOMIC_MASS_UNIT_KG) / 1.0e3
)


def kcal_per_mol_a2_amu_to_cm1(eigenvalue: np.ndarray | float) -> np.ndarray:
    """Wavenumber in cm^-1 of a mass-weighted Hessian eigenvalue in kcal/mol/A^2/amu.

    Negative eigenvalues (imaginary frequencies) come back as negative
    wavenumbers: sign(lambda) * sqrt(|lambda|) converted to cm^-1.
    """
    value = np.asarray(eigenvalue, dtype=float)
    omega_rad_s = np.sqrt(np.abs(value) * _KCAL_MOL_A2_AMU_TO_S2)
    wavenumber_cm1 = omega_rad_s / (2.0 * np.pi * SPEED_OF_LIGHT_M_PER_S) / 100.0
    return np.sign(value) * wavenumber_cm1

