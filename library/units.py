"""Unit conversions used across olibra, in one place.

Every constant comes from :mod:`scipy.constants` (CODATA). Names carry both
units: ``HARTREE_TO_KCAL_PER_MOL`` multiplies a value in hartree and gives
kcal/mol. The kilocalorie is the thermochemical one (4.184 kJ exactly).
"""

from __future__ import annotations

import numpy as np
from scipy import constants as _c

AVOGADRO_PER_MOL = _c.N_A
SPEED_OF_LIGHT_M_PER_S = _c.c
ATOMIC_MASS_UNIT_KG = _c.physical_constants["atomic mass constant"][0]
ANGSTROM_M = _c.angstrom
BOHR_M = _c.physical_constants["Bohr radius"][0]
HARTREE_J = _c.physical_constants["Hartree energy"][0]
KCAL_PER_MOL_J = _c.calorie * 1.0e3 / _c.N_A  # energy of one molecule, J
BOLTZMANN_KCAL_PER_MOL_K = _c.k / KCAL_PER_MOL_J
DEBYE_C_M = 1.0e-21 / _c.c  # 1 D = 1e-21 / c  C m (definition)

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
    _c.N_A * _c.e**2 / (12.0 * _c.epsilon_0 * _c.c**2 * ATOMIC_MASS_UNIT_KG) / 1.0e3
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

