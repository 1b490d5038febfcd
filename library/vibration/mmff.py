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

import numpy as np
import rdkit
from rdkit import Chem
from rdkit.Chem import rdForceFieldHelpers

from library.vibration._threads import single_threaded_blas
from library.vibration.errors import MissingParametersError, NotAMinimumError, VibrationInputError
from library.vibration.normal_modes import analyze, atomic_masses_amu
from library.vibration.result import ConformerVibrations, quality_notes

ENGINE_NAME = "mmff94"
ENGINE_VERSION = f"MMFF94 (RDKit {rdkit.__version__}); olibra vibration 1"

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
    unknown = set(knobs) - set(DEFAULTS)
    if unknown:
        raise VibrationInputError(f"unknown MMFF engine option(s) {sorted(unknown)}; known: {sorted(DEFAULTS)}")
    merged = {**DEFAULTS, **knobs}
    return {"engine": ENGINE_NAME, "engine_version": ENGINE_VERSION, **merged}


def single_conformer_copy(mol: Chem.Mol, conf_id: int = -1) -> Chem.Mol:
    """A copy of `mol` holding only conformer `conf_id` (default: the first), renumbered 0.

    Raises :class:`VibrationInputError` for a molecule without 3D coordinates
    or with hydrogens that are not explicit atoms.
    """
    if not isinstance(mol, Chem.Mol):
        raise VibrationInputError(f"expected an RDKit molecule, got {type(mol).__name__}")
    if mol.GetNumConformers() == 0:
        raise VibrationInputError("the molecule has no 3D conformer; embed one (library.conformers.ensemble) first")
    if any(atom.GetTotalNumHs(includeNeighbors=False) for atom in mol.GetAtoms()):
        raise VibrationInputError(
            "the molecule has implicit hydrogens; vibrations need them as atoms: use Chem.AddHs(mol, addCoords=True)")
    conformer = Chem.Conformer(mol.GetConformer(conf_id))
    if not conformer.Is3D() and mol.GetNumAtoms() > 2:
        raise VibrationInputError("the conformer is 2D; embed 3D coordinates first")
    work = Chem.Mol(mol)
    work.RemoveAllConformers()
    conformer.SetId(0)
    work.AddConformer(conformer, assignId=False)
    return work


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
        if properties is None or not rdForceFieldHelpers.MMFFHasAllMoleculeParams(self.mol):
            elements = sorted({a.GetSymbol() for a in self.mol.GetAtoms()})
            raise MissingParametersError(
                f"{variant} has no parameters for this material ({Chem.MolToSmiles(Chem.RemoveHs(self.mol))}; "
                f"elements {', '.join(elements)}); compute its vibrations with the gfn2 engine instead "
                "(olibra compute vibration --engine gfn2)")
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


@single_threaded_blas
def vibrations(mol: Chem.Mol, *, conf_id: int = -1, variant: str = "MMFF94", step_a: float = 1.0e-5,
               scheme: str = "forward",
               gradient_tolerance_kcal_mol_a: float = 1.0e-3, imaginary_tolerance_cm1: float = 10.0,
               max_reoptimizations: int = 3) -> ConformerVibrations:
    """MMFF94 harmonic vibrations of one conformer (explicit hydrogens, 3D).

    The conformer is re-minimized tightly with the same force field, its
    Hessian taken by finite differences of analytic gradients (`scheme`
    'forward' or 'central', step `step_a` in angstrom) and analyzed.
    If a mode below -`imaginary_tolerance_cm1` remains (a saddle point), the
    geometry is pushed along that mode and minimized again, up to
    `max_reoptimizations` times; if it still remains,
    :class:`NotAMinimumError` is raised. Imaginary modes above that tolerance
    (numerical noise) are kept, flagged, and noted. Raises
    :class:`MissingParametersError` when MMFF94 lacks parameters.
    """
    model = ForceFieldModel(mol, variant=variant, conf_id=conf_id)
    masses = atomic_masses_amu(model.mol)
    notes: list[str] = []
    reoptimizations = 0
    while True:
        model.minimize()
        x = model.positions_a()
        energy, gradient = model.energy_gradient(x)
        hessian = model.hessian(x, step_a=step_a, scheme=scheme)
        if np.linalg.norm(gradient) > gradient_tolerance_kcal_mol_a:
            # Newton steps with this Hessian finish what RDKit's minimizer leaves
            # (typically a gradient norm of ~5e-4 kcal/mol/A). The Hessian is only
            # recomputed if the geometry moved by more than 1e-3 A: over smaller
            # moves its change shifts wavenumbers by far less than 0.1 cm^-1.
            start = x
            for _ in range(5):
                polished = _newton_polish(model, x, hessian, gradient, masses)
                energy_new, gradient_new = model.energy_gradient(polished)
                if np.linalg.norm(gradient_new) >= np.linalg.norm(gradient) or energy_new > energy + 1e-6:
                    break
                x, energy, gradient = polished, energy_new, gradient_new
                if np.linalg.norm(gradient) <= gradient_tolerance_kcal_mol_a:
                    break
            if np.abs(x - start).max() > 1e-3:
                model.set_positions(x)
                hessian = model.hessian(x, step_a=step_a, scheme=scheme)
        modes = analyze(hessian, x.reshape(-1, 3), masses)
        most_negative = float(modes.frequencies_cm1.min()) if len(modes.frequencies_cm1) else 0.0
        if most_negative >= -imaginary_tolerance_cm1:
            break
        if reoptimizations >= max_reoptimizations:
            raise NotAMinimumError(
                f"MMFF94 geometry keeps an imaginary mode at {most_negative:.1f} cm^-1 after "
                f"{reoptimizations} displaced re-optimizations; check the structure or try the gfn2 engine "
                "(--engine gfn2)")
        reoptimizations += 1
        # Push 0.1 A (largest atom displacement) downhill along the imaginary mode and minimize again.
        direction = modes.displacements[int(np.argmin(modes.frequencies_cm1))]
        direction = direction / np.abs(direction).max()
        model.set_positions(x + 0.1 * direction.ravel())
    residual = float(np.linalg.norm(gradient))
    notes += quality_notes(reoptimizations=reoptimizations, modes=modes,
                           imaginary_tolerance_cm1=imaginary_tolerance_cm1, residual_kcal_mol_a=residual,
                           gradient_tolerance_kcal_mol_a=gradient_tolerance_kcal_mol_a)
    return ConformerVibrations(
        engine=ENGINE_NAME,
        positions_a=x.reshape(-1, 3),
        energy_kcal=energy,
        residual_gradient_kcal_mol_a=residual,
        modes=modes,
        ir_intensities_km_mol=None,
        reoptimizations=reoptimizations,
        notes=tuple(notes),
    )
