"""Normal-mode analysis against the textbook and against ASE, on given Hessians."""

import math

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from scipy import constants

from library import units
from library.vibration.errors import VibrationInputError
from library.vibration.normal_modes import analyze, atomic_masses_amu, rigid_body_basis


def _spring_hessian(positions, pairs):
    """Cartesian Hessian (kcal/mol/A^2) of harmonic springs {(i, j): k} at their rest lengths."""
    n = len(positions)
    hessian = np.zeros((3 * n, 3 * n))
    for (i, j), k in pairs.items():
        u = positions[j] - positions[i]
        u = u / np.linalg.norm(u)
        block = k * np.outer(u, u)
        for a, b, sign in ((i, i, 1), (j, j, 1), (i, j, -1), (j, i, -1)):
            hessian[3 * a:3 * a + 3, 3 * b:3 * b + 3] += sign * block
    return hessian


def test_diatomic_matches_textbook_harmonic_formula():
    # H-35Cl with k = 516 N/m; the reference is nu = (1 / 2 pi c) sqrt(k / mu)
    # written out here with scipy.constants (CODATA), independent of library.units.
    k_n_per_m = 516.0  # a typical HCl force constant; any positive k tests the same formula
    masses = np.array([1.00782503207, 34.96885268])  # from memory: 1H and 35Cl isotope masses (amu)
    mu_kg = masses.prod() / masses.sum() * constants.physical_constants["atomic mass constant"][0]
    expected_cm1 = math.sqrt(k_n_per_m / mu_kg) / (2 * math.pi * constants.c) / 100.0
    k_kcal_mol_a2 = k_n_per_m * 1e-20 / (constants.calorie * 1e3 / constants.N_A)
    positions = np.array([[0.0, 0.0, 0.0], [0.3, 0.4, 1.2]])
    modes = analyze(_spring_hessian(positions, {(0, 1): k_kcal_mol_a2}), positions, masses)
    assert modes.is_linear
    assert modes.frequencies_cm1.shape == (1,)
    # only floating-point rounding separates the two routes
    assert modes.frequencies_cm1[0] == pytest.approx(expected_cm1, rel=1e-9)
    assert 2900 < expected_cm1 < 3000  # sanity: HCl's harmonic wavenumber is ~2990 cm^-1 (from memory)


def test_linear_triatomic_keeps_3n_minus_5_modes():
    # A linear symmetric spring chain: the stretches are analytic,
    # symmetric sqrt(k/m_end) and antisymmetric sqrt(k (1/m_end + 2/m_center)).
    k = 1000.0
    masses = np.array([15.99491462, 12.0, 15.99491462])  # from memory: 16O and 12C (amu)
    positions = np.array([[0.0, 0.0, -1.16], [0.0, 0.0, 0.0], [0.0, 0.0, 1.16]])
    modes = analyze(_spring_hessian(positions, {(0, 1): k, (1, 2): k}), positions, masses)
    assert modes.is_linear
    assert modes.frequencies_cm1.shape == (4,)  # 3N-5
    bends, stretches = np.sort(modes.frequencies_cm1)[:2], np.sort(modes.frequencies_cm1)[2:]
    # springs along the axis give no bending stiffness: two zero bends (rounding only)
    assert np.allclose(bends, 0.0, atol=1e-3)
    symmetric = units.kcal_per_mol_a2_amu_to_cm1(k / masses[0])
    antisymmetric = units.kcal_per_mol_a2_amu_to_cm1(k * (1 / masses[0] + 2 / masses[1]))
    assert stretches == pytest.approx([symmetric, antisymmetric], rel=1e-9)  # rounding only


def test_rigid_body_basis_is_six_for_nonlinear_and_orthonormal():
    positions = np.array([[0.0, 0.0, 0.0], [0.96, 0.0, 0.0], [-0.24, 0.93, 0.0]])
    basis, linear = rigid_body_basis(positions, np.array([16.0, 1.0, 1.0]))
    assert not linear
    assert basis.shape == (9, 6)
    assert np.allclose(basis.T @ basis, np.eye(6), atol=1e-12)  # orthonormal up to rounding


def test_projection_removes_rotation_contamination():
    """A Hessian with a spurious rotational stiffness gives the same vibrations once projected."""
    positions = np.array([[0.0, 0.0, 0.0], [0.96, 0.0, 0.0], [-0.24, 0.93, 0.0]])
    masses = np.array([15.99491462, 1.00782503207, 1.00782503207])  # from memory (amu)
    springs = {(0, 1): 1100.0, (0, 2): 1100.0, (1, 2): 150.0}
    clean = analyze(_spring_hessian(positions, springs), positions, masses)
    basis, _ = rigid_body_basis(positions, masses)
    sqrt_m = np.repeat(np.sqrt(masses), 3)
    # add stiffness along the rigid-body directions (mass-weighted), as noisy numerical Hessians do
    contamination = (basis * 37.0) @ basis.T * sqrt_m[:, None] * sqrt_m[None, :]
    dirty = analyze(_spring_hessian(positions, springs) + contamination, positions, masses)
    assert dirty.frequencies_cm1 == pytest.approx(clean.frequencies_cm1, rel=1e-9)  # rounding only


def test_isotope_exact_masses():
    mol = Chem.AddHs(Chem.MolFromSmiles("[2H]C([2H])([2H])[13CH2]O"))
    masses = atomic_masses_amu(mol)
    by_label = {(a.GetSymbol(), a.GetIsotope()): m for a, m in zip(mol.GetAtoms(), masses)}
    # NIST atomic weights and isotopic compositions (relative atomic masses), from memory
    assert by_label[("H", 2)] == pytest.approx(2.01410177812, abs=1e-6)
    assert by_label[("C", 13)] == pytest.approx(13.00335483507, abs=1e-6)
    assert by_label[("H", 0)] == pytest.approx(1.00782503223, abs=1e-6)
    assert by_label[("C", 0)] == pytest.approx(12.0, abs=1e-9)
    assert by_label[("O", 0)] == pytest.approx(15.99491461957, abs=1e-6)


def test_ir_conversion_factor_matches_the_common_value():
    # (D/A)^2/amu -> km/mol is commonly quoted as 42.255 (also ASE's ase.vibrations.infrared);
    # our factor is per (e^2/amu); 1 D/A = 1e-11/(c e) elementary charges.
    debye_per_angstrom_in_e = 1e-21 / constants.c / 1e-10 / constants.e
    assert units.IR_E2_PER_AMU_TO_KM_PER_MOL * debye_per_angstrom_in_e**2 == pytest.approx(42.255, rel=2e-4)
    # 2e-4: the quoted 42.255 has five significant figures


def test_against_ase_vibrations_data_on_the_same_hessian():
    """Our projected analysis vs ASE's (unprojected) VibrationsData on one MMFF Hessian."""
    from ase import Atoms
    from ase.vibrations import VibrationsData

    from library.vibration.mmff import ForceFieldModel

    mol = Chem.AddHs(Chem.MolFromSmiles("CC=O"))
    AllChem.EmbedMolecule(mol, randomSeed=42)
    model = ForceFieldModel(mol)
    model.minimize()
    x = model.positions_a()
    hessian = model.hessian(x)
    masses = atomic_masses_amu(model.mol)
    ours = analyze(hessian, x.reshape(-1, 3), masses).frequencies_cm1
    atoms = Atoms(numbers=[a.GetAtomicNum() for a in mol.GetAtoms()], positions=x.reshape(-1, 3))
    atoms.set_masses(masses)
    ev_per_kcal_mol = units.KCAL_PER_MOL_J / constants.e
    data = VibrationsData.from_2d(atoms, hessian * ev_per_kcal_mol)
    reference = data.get_frequencies()
    reference = np.sort(np.where(np.abs(reference.imag) > 0, -np.abs(reference.imag), reference.real))[6:]
    # ASE does not project: its six near-zero rigid-body roots mix slightly into real modes.
    assert ours == pytest.approx(reference, abs=1.0)  # brief: within 1 cm^-1


def _eckart_projector(positions, masses):
    """I - (projector on the translations and infinitesimal rotations) in mass-weighted coordinates,
    built by hand from the Eckart conditions (Phys. Rev. 47, 552 (1935)), independent of
    library.vibration.normal_modes."""
    sqrt_m = np.sqrt(masses)
    centred = positions - (masses[:, None] * positions).sum(axis=0) / masses.sum()
    vectors = []
    for axis in np.eye(3):
        vectors.append((sqrt_m[:, None] * axis[None, :]).ravel())  # translation along the axis
        vectors.append((sqrt_m[:, None] * np.cross(axis[None, :], centred)).ravel())  # rotation about it
    q, _ = np.linalg.qr(np.array(vectors).T)
    return np.eye(3 * len(masses)) - q @ q.T


def test_projection_agrees_with_a_hand_built_eckart_projector_on_an_mmff_hessian():
    """Same real molecule and Hessian as the ASE check, but projected both ways: only rounding may differ."""
    from library.vibration.mmff import ForceFieldModel

    mol = Chem.AddHs(Chem.MolFromSmiles("CC=O"))
    AllChem.EmbedMolecule(mol, randomSeed=42)
    model = ForceFieldModel(mol)
    model.minimize()
    x = model.positions_a().reshape(-1, 3)
    hessian = model.hessian(x.ravel())
    masses = atomic_masses_amu(model.mol)
    projector = _eckart_projector(x, masses)
    basis, _ = rigid_body_basis(x, masses)
    assert np.allclose(np.eye(len(projector)) - basis @ basis.T, projector, atol=1e-10)
    inv_sqrt_m = np.repeat(1 / np.sqrt(masses), 3)
    mass_weighted = hessian * inv_sqrt_m[:, None] * inv_sqrt_m[None, :]
    eigenvalues = np.linalg.eigvalsh(projector @ mass_weighted @ projector)
    eigenvalues = np.sort(eigenvalues[np.argsort(np.abs(eigenvalues))[6:]])  # drop the six rigid-body zeros
    # kcal/mol/A^2/amu -> s^-2 -> cm^-1, with scipy.constants (CODATA) only
    per_s2 = constants.calorie * 1e3 / constants.N_A / 1e-20 / constants.atomic_mass
    expected = np.sign(eigenvalues) * np.sqrt(np.abs(eigenvalues) * per_s2) / (2 * math.pi * constants.c) / 100
    ours = analyze(hessian, x, masses).frequencies_cm1
    assert ours == pytest.approx(expected, rel=1e-7, abs=1e-4)  # rounding only (float64 eigensolvers)


@pytest.mark.parametrize(
    "hessian, positions, masses, fragment",
    [
        (np.zeros((6, 6)), np.zeros((3, 3)), np.ones(3), "shape (N, 3)"),
        (np.zeros((9, 9)), np.zeros((3, 3)), np.ones(2), "one mass per atom"),
        (np.zeros((8, 8)), np.zeros((3, 3)), np.ones(3), "(3N, 3N)"),
        (np.full((9, 9), np.nan), np.zeros((3, 3)), np.ones(3), "NaN"),
        (np.zeros((9, 9)), np.zeros((3, 3)), -np.ones(3), "positive"),
    ],
)
def test_bad_arrays_raise_clear_errors(hessian, positions, masses, fragment):
    if fragment == "shape (N, 3)":
        positions = np.zeros((3, 2))
    with pytest.raises(VibrationInputError, match=fragment.replace("(", r"\(").replace(")", r"\)")):
        analyze(hessian, positions, masses)
