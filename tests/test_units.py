"""olibra's written-out physical constants against scipy.constants (CODATA) as the reference."""

import math

import pytest
from scipy import constants

from library import units

# (olibra constant, scipy.constants reference value)
REFERENCES = [
    (units.AVOGADRO_PER_MOL, constants.N_A),
    (units.SPEED_OF_LIGHT_M_PER_S, constants.c),
    (units.BOLTZMANN_J_PER_K, constants.k),
    (units.ELEMENTARY_CHARGE_C, constants.e),
    (units.PLANCK_J_S, constants.h),
    (units.HBAR_J_S, constants.hbar),
    (units.ELECTRON_VOLT_J, constants.electron_volt),
    (units.CALORIE_J, constants.calorie),
    (units.ANGSTROM_M, constants.angstrom),
    (units.GAS_CONSTANT_J_PER_MOL_K, constants.R),
    (units.ATOMIC_MASS_UNIT_KG, constants.physical_constants["atomic mass constant"][0]),
    (units.BOHR_M, constants.physical_constants["Bohr radius"][0]),
    (units.HARTREE_J, constants.physical_constants["Hartree energy"][0]),
    (units.VACUUM_PERMITTIVITY_F_PER_M, constants.epsilon_0),
]


@pytest.mark.parametrize("ours,reference", REFERENCES)
def test_constant_matches_scipy_codata(ours, reference):
    # 2e-9 relative covers a SciPy that still ships CODATA 2018 (the measured values moved by < 1.5e-9)
    assert ours == pytest.approx(reference, rel=2e-9)


def test_derived_conversions_match_handbook_values():
    # 1 hartree = 627.5095 kcal/mol; 1 bohr = 0.529177 angstrom (CODATA, from memory)
    assert units.HARTREE_TO_KCAL_PER_MOL == pytest.approx(627.5095, abs=1e-3)
    assert units.BOHR_TO_ANGSTROM == pytest.approx(0.529177, abs=1e-6)
    # R = 1.987204 cal/(mol K) (CODATA, from memory)
    assert units.GAS_CONSTANT_KCAL_PER_MOL_K * 1000 == pytest.approx(1.987204, abs=1e-6)
    # 1 D = 3.33564e-30 C m (definition 1e-21/c)
    assert units.DEBYE_C_M == pytest.approx(3.33564e-30, rel=1e-5)
    assert math.isclose(units.IR_E2_PER_AMU_TO_KM_PER_MOL, 974.9, rel_tol=2e-4)  # double-harmonic factor, from memory
