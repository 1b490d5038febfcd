"""The per-geometry result every vibration engine returns."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from library.vibration.normal_modes import NormalModes


@dataclass(frozen=True, eq=False)
class ConformerVibrations:
    """Harmonic vibrations of one conformer at the engine's own minimum.

    positions_a: (N, 3) optimized geometry in angstrom.
    energy_kcal: engine energy at that geometry, kcal/mol (absolute scale of the
        engine; only differences between conformers of one material matter).
    residual_gradient_kcal_mol_a: Euclidean norm of the Cartesian gradient at
        `positions_a`, kcal/mol/A: how far from a stationary point the modes were taken.
    modes: the normal-mode analysis (frequencies in cm^-1, imaginary flagged).
    ir_intensities_km_mol: (n_modes,) or None when the engine gives no dipoles.
    reoptimizations: how many times an imaginary mode forced a displaced re-optimization.
    soft_modes: modes whose small negative curvature (noise above the engine's tolerance) is
        counted at its magnitude.
    notes: human-readable remarks (for example a remaining imaginary mode).
    """

    engine: str
    positions_a: np.ndarray
    energy_kcal: float
    residual_gradient_kcal_mol_a: float
    modes: NormalModes
    ir_intensities_km_mol: np.ndarray | None
    reoptimizations: int = 0
    notes: tuple[str, ...] = ()
    soft_modes: int = 0  # small negative curvatures (noise) counted at their magnitude

    @property
    def frequencies_cm1(self) -> np.ndarray:
        """Harmonic wavenumbers in cm^-1 (imaginary modes negative)."""
        return self.modes.frequencies_cm1

    @property
    def n_imaginary(self) -> int:
        """Number of modes with a negative force constant."""
        return self.modes.n_imaginary


def quality_notes(*, reoptimizations: int, soft_modes: int, imaginary_tolerance_cm1: float,
                  residual_kcal_mol_a: float, gradient_tolerance_kcal_mol_a: float) -> list[str]:
    """Remarks every engine attaches to a conformer result: re-optimizations, soft modes counted at
    their magnitude, and a residual gradient above tolerance."""
    notes = []
    if reoptimizations:
        notes.append(f"saddle point re-optimized {reoptimizations} time(s) along its imaginary mode")
    if soft_modes:
        notes.append(f"{soft_modes} soft mode(s) with a small negative curvature (above -{imaginary_tolerance_cm1:g} "
                     "cm^-1: numerical noise of a flat torsion) counted at their magnitude")
    if residual_kcal_mol_a > gradient_tolerance_kcal_mol_a:
        notes.append(f"residual gradient {residual_kcal_mol_a:.2e} kcal/mol/A above tolerance "
                     f"{gradient_tolerance_kcal_mol_a:.0e}")
    return notes
