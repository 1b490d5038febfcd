"""Harmonic normal-mode analysis of a Cartesian Hessian.

Standard treatment (molecular vibrations, double-harmonic approximation):
mass-weight the Hessian with isotope-exact atomic masses, remove the
translations and rotations by projecting onto the complement of the six
(five for a linear molecule) rigid-body directions that satisfy the Eckart
conditions at the reference geometry, diagonalize, and convert eigenvalues to
wavenumbers. Units: Hessian in kcal/mol/A^2, positions in angstrom, masses in
amu, wavenumbers in cm^-1.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rdkit import Chem

from library import units
from library.vibration.errors import VibrationInputError

_PERIODIC_TABLE = Chem.GetPeriodicTable()


def atomic_masses_amu(mol: Chem.Mol) -> np.ndarray:
    """Isotope-exact atomic masses (amu) of every atom of `mol`, hydrogens included.

    A labeled atom (``[2H]``, ``[13C]``) gets the exact mass of that isotope
    (RDKit's ``Atom.GetMass()`` honors the isotope label). An unlabeled atom
    gets the mass of its most abundant isotope, as spectroscopists do for the
    parent isotopologue, not the standard atomic weight that
    ``Atom.GetMass()`` returns for unlabeled atoms.
    """
    masses = []
    for atom in mol.GetAtoms():
        if atom.GetIsotope():
            masses.append(atom.GetMass())
        else:
            masses.append(_PERIODIC_TABLE.GetMostCommonIsotopeMass(atom.GetAtomicNum()))
    return np.asarray(masses, dtype=float)


@dataclass(frozen=True, eq=False)
class NormalModes:
    """Harmonic vibrations of one geometry.

    frequencies_cm1: (3N-6,) or (3N-5,) wavenumbers in cm^-1, ascending;
        imaginary modes are negative numbers.
    displacements: (3N-6 or 3N-5, N, 3) Cartesian displacement of each atom per
        mode (angstrom per unit mass-weighted coordinate, amu^-1/2), i.e.
        M^-1/2 times the orthonormal mass-weighted eigenvector.
    mass_weighted_vectors: (3N, k) orthonormal eigenvectors in mass-weighted
        Cartesian coordinates.
    is_linear: True when only two rotations exist (3N-5 vibrations).
    imaginary: boolean mask of modes with a negative force constant.
    soft: boolean mask of modes whose small negative curvature (numerical noise at a minimum) the
        vibration driver turned into its magnitude (None: not examined).
    """

    frequencies_cm1: np.ndarray
    displacements: np.ndarray
    mass_weighted_vectors: np.ndarray
    masses_amu: np.ndarray
    is_linear: bool
    imaginary: np.ndarray
    soft: np.ndarray | None = None

    @property
    def n_imaginary(self) -> int:
        """Number of modes with negative force constants."""
        return int(self.imaginary.sum())


def rigid_body_basis(positions_a: np.ndarray, masses_amu: np.ndarray, *, linear_tolerance: float = 5e-3
                     ) -> tuple[np.ndarray, bool]:
    """Orthonormal mass-weighted translation and rotation vectors, shape (3N, 5 or 6).

    Rotations about the center of mass are r x e_k scaled by sqrt(m). The
    rank is found from singular values: a linear molecule has one rotation of
    (numerically) zero length and keeps five vectors; `linear_tolerance` is the
    relative singular-value cutoff. The default 5e-3 treats atoms within about
    0.5 degree of a common line as linear, since an optimizer leaves a
    linear molecule bent by a few microradians, not exactly straight.
    """
    positions = np.asarray(positions_a, dtype=float).reshape(-1, 3)
    masses = np.asarray(masses_amu, dtype=float)
    n_atoms = len(masses)
    sqrt_m = np.sqrt(masses)
    centered = positions - (masses[:, None] * positions).sum(axis=0) / masses.sum()
    vectors = []
    for axis in range(3):
        t = np.zeros((n_atoms, 3))
        t[:, axis] = 1.0
        vectors.append((t * sqrt_m[:, None]).ravel())
    for axis in range(3):
        e = np.zeros(3)
        e[axis] = 1.0
        vectors.append((np.cross(centered, e) * sqrt_m[:, None]).ravel())
    d = np.array(vectors).T
    u, s, _ = np.linalg.svd(d, full_matrices=False)
    rank = int((s > linear_tolerance * s.max()).sum())
    if n_atoms == 1:
        rank = 3
    return u[:, :rank], rank == 5


def analyze(hessian_kcal_mol_a2: np.ndarray, positions_a: np.ndarray, masses_amu: np.ndarray
            ) -> NormalModes:
    """Normal modes of a Cartesian Hessian (kcal/mol/A^2) at `positions_a` (angstrom, (N, 3)).

    The Hessian is symmetrized, mass-weighted with `masses_amu` and expressed
    in an orthonormal basis of the internal (vibrational) subspace, i.e. the
    complement of the Eckart translation/rotation vectors, so exactly 3N-6
    (3N-5 for linear molecules) wavenumbers come back, none of them the
    near-zero rigid-body modes.
    """
    positions = np.asarray(positions_a, dtype=float)
    masses = np.asarray(masses_amu, dtype=float)
    hessian = np.asarray(hessian_kcal_mol_a2, dtype=float)
    if positions.ndim != 2 or positions.shape[1] != 3:
        raise VibrationInputError(f"positions must have shape (N, 3) in angstrom, got {positions.shape}")
    n_atoms = positions.shape[0]
    if masses.shape != (n_atoms,):
        raise VibrationInputError(f"need one mass per atom ({n_atoms}), got shape {masses.shape}")
    if np.any(masses <= 0):
        raise VibrationInputError("atomic masses must be positive (amu)")
    if hessian.shape != (3 * n_atoms, 3 * n_atoms):
        raise VibrationInputError(
            f"Hessian must be (3N, 3N) = ({3 * n_atoms}, {3 * n_atoms}) for {n_atoms} atoms, got {hessian.shape}")
    if not np.all(np.isfinite(hessian)):
        raise VibrationInputError("Hessian contains NaN or infinite entries; recompute it at a sane geometry")
    if n_atoms < 2:
        raise VibrationInputError("a single atom has no vibrations")

    inv_sqrt_m = np.repeat(1.0 / np.sqrt(masses), 3)
    hessian = 0.5 * (hessian + hessian.T)
    mass_weighted = hessian * inv_sqrt_m[:, None] * inv_sqrt_m[None, :]
    external, is_linear = rigid_body_basis(positions, masses)
    # Orthonormal complement of the rigid-body space from a complete QR.
    q, _ = np.linalg.qr(external, mode="complete")
    internal = q[:, external.shape[1]:]
    eigenvalues, vectors = np.linalg.eigh(internal.T @ mass_weighted @ internal)
    mass_weighted_vectors = internal @ vectors
    frequencies = units.kcal_per_mol_a2_amu_to_cm1(eigenvalues)
    displacements = (mass_weighted_vectors * inv_sqrt_m[:, None]).T.reshape(-1, n_atoms, 3)
    return NormalModes(
        frequencies_cm1=frequencies,
        displacements=displacements,
        mass_weighted_vectors=mass_weighted_vectors,
        masses_amu=masses,
        is_linear=is_linear,
        imaginary=eigenvalues < 0.0,
    )


def ir_intensities_km_mol(dipole_derivatives_e: np.ndarray, modes: NormalModes) -> np.ndarray:
    """Infrared intensities (km/mol) from Cartesian dipole derivatives.

    `dipole_derivatives_e` has shape (3N, 3): d(mu_xyz)/d(x_i) in
    (e angstrom)/angstrom = elementary charges. Projected on the mass-weighted
    normal coordinates this gives d mu / d Q in e amu^-1/2, and the
    double-harmonic integrated absorption A = N_A/(12 eps0 c^2) |d mu/d Q|^2
    (see :data:`library.units.IR_E2_PER_AMU_TO_KM_PER_MOL`).
    """
    derivatives = np.asarray(dipole_derivatives_e, dtype=float)
    n = modes.mass_weighted_vectors.shape[0]
    if derivatives.shape != (n, 3):
        raise VibrationInputError(f"dipole derivatives must have shape ({n}, 3), got {derivatives.shape}")
    inv_sqrt_m = np.repeat(1.0 / np.sqrt(modes.masses_amu), 3)
    d_mu_d_q = (modes.mass_weighted_vectors * inv_sqrt_m[:, None]).T @ derivatives
    return units.IR_E2_PER_AMU_TO_KM_PER_MOL * np.sum(d_mu_d_q**2, axis=1)
