"""MMFF94 vibrations: tight minimization and a finite-difference Hessian through RDKit.

MMFF94 (J. Comput. Chem. 17, 490 (1996)) gives analytic gradients in RDKit;
the Hessian comes from central differences of those gradients.

Why the gradient must follow an energy call (RDKit ForceField internals):
``ForceField`` keeps a cache of interatomic distances (``dp_distMat``) that
the bonded and nonbonded contributions read through ``ForceField::distance``.
``calcEnergy(pos)`` resets that cache before summing terms, but
``calcGrad(pos)`` does not: the contributions then reuse the distances from
the last energy evaluation (or from setup) while taking directions from the
new positions. The minimizer always evaluates the energy first at each new
point, so minimization is unaffected, and a gradient requested at the point
of the last energy call is exact. Finite differences of ``CalcGrad(pos)``
alone, however, keep every distance frozen at the reference geometry, so the
bond-stretch curvature is lost and the Hessian comes out several times too
soft (the factor 4 to 12 seen on water and ethanol). The remedy used here is
to call ``CalcEnergy(pos)`` immediately before every ``CalcGrad(pos)``;
tests/test_vibration_mmff.py checks the result against second differences of
the energy alone.
"""

from __future__ import annotations

import sys

import numpy as np
import rdkit
from rdkit import Chem
from rdkit.Chem import rdForceFieldHelpers

from library.vibration import engines
from library.vibration.engines import single_conformer_copy
from library.vibration.errors import MissingParametersError, VibrationInputError
from library.vibration.normal_modes import analyze, atomic_masses_amu

ENGINE_NAME = "mmff94"
ENGINE_VERSION = f"MMFF94 (RDKit {rdkit.__version__}); olibra vibration 1"
DISPLAY_NAME = "MMFF94"
RUNTIME_KNOBS: tuple[str, ...] = ()

DEFAULTS = {
    "variant": "MMFF94",
    "step_a": 1.0e-5,
    "scheme": "forward",
    "gradient_tolerance_kcal_mol_a": 1.0e-3,
    "imaginary_tolerance_cm1": 10.0,
    "max_reoptimizations": 3,
}


def parameters(**knobs) -> dict:
    """JSON-able settings of this engine (defaults overridden by `knobs`), hashed for staleness."""
    return engines.engine_parameters(sys.modules[__name__], knobs)


def check_ensemble(ens) -> None:
    """Refuse an ensemble whose conformers needed another force field (MMFF94 lacks parameters)."""
    if getattr(ens, "force_field", "MMFF94") != "MMFF94":
        smiles = Chem.MolToSmiles(Chem.RemoveHs(ens.members[0].mol))
        raise MissingParametersError(
            f"MMFF94 has no parameters for {smiles} (its conformers needed {ens.force_field}); "
            "compute its vibrations with the gfn2 engine instead")


class ForceFieldModel:
    """An MMFF94 force field for one molecule with exact energy/gradient at arbitrary positions.

    Positions are flat arrays of 3N coordinates in angstrom; energies in
    kcal/mol; gradients in kcal/mol/A.
    """

    def __init__(self, mol: Chem.Mol, *, variant: str = "MMFF94", conf_id: int = -1):
        if variant not in ("MMFF94", "MMFF94s"):
            raise VibrationInputError(f"MMFF variant must be 'MMFF94' or 'MMFF94s', got {variant!r}")
        self.mol = single_conformer_copy(mol, conf_id)
        properties = rdForceFieldHelpers.MMFFGetMoleculeProperties(self.mol, mmffVariant=variant)
        self.properties = properties
        if properties is None or not rdForceFieldHelpers.MMFFHasAllMoleculeParams(self.mol):
            elements = sorted({a.GetSymbol() for a in self.mol.GetAtoms()})
            raise MissingParametersError(
                f"{variant} has no parameters for this material ({Chem.MolToSmiles(Chem.RemoveHs(self.mol))}; "
                f"elements {', '.join(elements)}); compute its vibrations with the gfn2 engine instead")
        # ignoreInterfragInteractions=False: a multi-fragment entry stays one system.
        self.field = rdForceFieldHelpers.MMFFGetMoleculeForceField(
            self.mol, properties, confId=0, ignoreInterfragInteractions=False)
        self.field.Initialize()

    def positions_a(self) -> np.ndarray:
        """Current force-field positions, flat (3N,) in angstrom."""
        return np.asarray(self.field.Positions(), dtype=float)

    def energy_gradient(self, positions_a: np.ndarray) -> tuple[float, np.ndarray]:
        """Energy (kcal/mol) and gradient (kcal/mol/A, flat) at `positions_a` (flat, angstrom).

        The energy call comes first on purpose: it refreshes RDKit's distance
        cache that the gradient terms read (see the module docstring).
        """
        coordinates = positions_a.tolist()
        energy = self.field.CalcEnergy(coordinates)
        gradient = np.asarray(self.field.CalcGrad(coordinates), dtype=float)
        return float(energy), gradient

    def minimize(self, *, max_iterations: int = 20000) -> None:
        """Minimize in place with RDKit's BFGS to tight tolerances."""
        for _ in range(10):
            if self.field.Minimize(maxIts=max_iterations, forceTol=1e-8, energyTol=1e-14) == 0:
                break

    def set_positions(self, positions_a: np.ndarray) -> None:
        """Move the force field (and its conformer) to `positions_a` (flat, angstrom)."""
        conformer = self.mol.GetConformer()
        for index, xyz in enumerate(np.asarray(positions_a, dtype=float).reshape(-1, 3)):
            conformer.SetAtomPosition(index, xyz.tolist())
        # The force field holds pointers to the conformer's points; re-initialize caches.
        self.field.Initialize()

    def hessian(self, positions_a: np.ndarray, *, step_a: float = 1.0e-5, scheme: str = "forward") -> np.ndarray:
        """Cartesian Hessian (kcal/mol/A^2) by finite differences of analytic gradients.

        'forward' (default) needs 3N + 1 gradients, 'central' 6N. MMFF94
        gradients are analytic and exact to rounding, so a tiny forward step
        (1e-5 A) is both accurate and half the cost: on a 45-atom musk it
        reproduced central differences (1e-3 A) to 0.04 cm^-1 in every mode.
        """
        x0 = np.asarray(positions_a, dtype=float)
        n = x0.size
        hessian = np.empty((n, n))
        if scheme == "forward":
            g0 = self.energy_gradient(x0)[1]
            for i in range(n):
                forward = x0.copy()
                forward[i] += step_a
                hessian[i] = (self.energy_gradient(forward)[1] - g0) / step_a
        elif scheme == "central":
            for i in range(n):
                forward = x0.copy()
                forward[i] += step_a
                backward = x0.copy()
                backward[i] -= step_a
                hessian[i] = (self.energy_gradient(forward)[1] - self.energy_gradient(backward)[1]) / (2.0 * step_a)
        else:
            raise VibrationInputError(f"finite-difference scheme must be 'forward' or 'central', got {scheme!r}")
        return 0.5 * (hessian + hessian.T)


def _newton_polish(model: ForceFieldModel, x: np.ndarray, hessian: np.ndarray, gradient: np.ndarray,
                   masses: np.ndarray) -> np.ndarray:
    """One Newton step restricted to positive-curvature internal modes (mass-weighted)."""
    modes = analyze(hessian, x.reshape(-1, 3), masses)
    inv_sqrt_m = np.repeat(1.0 / np.sqrt(masses), 3)
    vectors = modes.mass_weighted_vectors
    # Mass-weighted curvature lambda_k = v_k^T H_mw v_k.
    h_mw = hessian * inv_sqrt_m[:, None] * inv_sqrt_m[None, :]
    curvature = np.einsum("ik,ij,jk->k", vectors, h_mw, vectors)
    keep = curvature > 1e-6
    g_mw = gradient * inv_sqrt_m
    step_mw = -(vectors[:, keep] @ ((vectors[:, keep].T @ g_mw) / curvature[keep]))
    return x + step_mw * inv_sqrt_m


class ConformerModel:
    """The engine model of one conformer (see library.vibration.engines.EngineModel).

    Minimization is RDKit's BFGS to tight tolerances, finished by Newton steps with the Hessian
    when the gradient norm stays above `gradient_tolerance_kcal_mol_a` (RDKit's minimizer
    typically leaves ~5e-4 kcal/mol/A). The Hessian is recomputed only if the polish moved the
    geometry by more than 1e-3 A: over smaller moves its change shifts wavenumbers by far less
    than 0.1 cm^-1.

    Dipole derivatives come from MMFF94's fixed partial charges (bond-charge increments, J. Comput.
    Chem. 17, 490 (1996)): the dipole is sum_i q_i r_i, so d(mu_b)/d(x_ia) = q_i delta_ab. This is the
    fixed-charge (no charge flux) estimate of infrared intensities, and its limits are those of the
    model: polar stretches and bends (C=O, C≡N, O-H, C-O) come out strong as they should, but MMFF94
    gives hydrogen on carbon a charge near zero, so C-H stretches, which carry real intensity from
    the charge moving along the bond, come out far too weak; relative heights among polar bands are
    qualitative. GFN2-xTB's intensities, from the wavefunction, include charge flux.
    """

    def __init__(self, mol: Chem.Mol, *, variant: str, step_a: float, scheme: str,
                 gradient_tolerance_kcal_mol_a: float, **_loop_settings):
        self.field = ForceFieldModel(mol, variant=variant)
        self.masses = atomic_masses_amu(self.field.mol)
        self.step_a, self.scheme = step_a, scheme
        self.tolerance = gradient_tolerance_kcal_mol_a
        self._hessian_at: tuple[np.ndarray, np.ndarray] | None = None
        self._dipole_derivatives: np.ndarray | None = None

    def _hessian(self, x: np.ndarray) -> np.ndarray:
        return self.field.hessian(x, step_a=self.step_a, scheme=self.scheme)

    def minimize(self, positions_a: np.ndarray) -> tuple[np.ndarray, float, np.ndarray]:
        self.field.set_positions(positions_a)
        self.field.minimize()
        x = self.field.positions_a()
        energy, gradient = self.field.energy_gradient(x)
        hessian = self._hessian(x)
        if np.linalg.norm(gradient) > self.tolerance:
            start = x
            for _ in range(5):
                polished = _newton_polish(self.field, x, hessian, gradient, self.masses)
                energy_new, gradient_new = self.field.energy_gradient(polished)
                if np.linalg.norm(gradient_new) >= np.linalg.norm(gradient) or energy_new > energy + 1e-6:
                    break
                x, energy, gradient = polished, energy_new, gradient_new
                if np.linalg.norm(gradient) <= self.tolerance:
                    break
            if np.abs(x - start).max() > 1e-3:
                self.field.set_positions(x)
                hessian = self._hessian(x)
        self._hessian_at = (x.copy(), hessian)
        return x, float(energy), gradient

    def dipole_derivatives(self) -> np.ndarray:
        """(3N, 3) Cartesian dipole derivatives in elementary charges from the fixed partial charges
        (the same at every geometry, so computed once)."""
        if self._dipole_derivatives is None:
            charges = np.array([self.field.properties.GetMMFFPartialCharge(i)
                                for i in range(self.field.mol.GetNumAtoms())], dtype=float)
            self._dipole_derivatives = np.kron(charges[:, None], np.eye(3))
        return self._dipole_derivatives

    def hessian(self, positions_a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if self._hessian_at is not None and np.array_equal(self._hessian_at[0], positions_a):
            return self._hessian_at[1], self.dipole_derivatives()
        return self._hessian(np.asarray(positions_a, dtype=float)), self.dipole_derivatives()


def model(mol: Chem.Mol, **settings) -> ConformerModel:
    """The MMFF94 engine model of one conformer (explicit hydrogens, 3D)."""
    return ConformerModel(mol, **settings)


def vibrations(mol: Chem.Mol, *, conf_id: int = -1, **knobs):
    """MMFF94 harmonic vibrations of one conformer (explicit hydrogens, 3D): a ConformerVibrations.

    The conformer is re-minimized tightly with the same force field, its Hessian taken by finite
    differences of analytic gradients (`scheme` 'forward' or 'central', step `step_a` in angstrom)
    and analyzed; saddle points are re-optimized (see library.vibration.engines.vibrations).
    Raises :class:`MissingParametersError` when MMFF94 lacks parameters.
    """
    return engines.vibrations(sys.modules[__name__], mol, conf_id=conf_id, **knobs)
