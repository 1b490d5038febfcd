"""Vibration engines: one protocol, one registry, one driver.

An engine is a module that provides the :class:`VibrationEngine` protocol: its stored name and
version, its default settings, ``parameters(**knobs)`` (what a record's parameter hash covers)
and ``model(mol, **settings)``, which returns an :class:`EngineModel` for one conformer that can
minimize the energy and give the Cartesian Hessian and, when the engine has them, dipole
derivatives. :func:`vibrations` drives any engine the same way: minimize, take the Hessian,
analyze the normal modes, re-optimize a saddle point along its imaginary mode, attach IR
intensities and quality notes.

The registry (:data:`ENGINES`) is what the command line's choices, the computed-record stamps,
``olibra compute`` and the web's recompute form derive from. It imports no engine until one is
used, so listing the engines costs nothing.

Adding an engine: write a module with the protocol's names (see ``mmff`` and ``gfn2``), add one
:class:`EngineEntry` below, and test its frequencies against experimental fundamentals.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from types import ModuleType
from typing import Protocol

import numpy as np

from library.vibration.errors import NotAMinimumError, VibrationInputError


class EngineModel(Protocol):
    """One conformer under one engine. Positions are flat (3N,) arrays in angstrom."""

    def minimize(self, positions_a: np.ndarray) -> tuple[np.ndarray, float, np.ndarray]:
        """Minimized positions (flat, angstrom), energy (kcal/mol) and gradient (flat, kcal/mol/A)."""

    def hessian(self, positions_a: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Cartesian Hessian (kcal/mol/A^2) and dipole derivatives ((3N, 3), elementary charges) or None."""


class VibrationEngine(Protocol):
    """What an engine module provides (module-level names)."""

    ENGINE_NAME: str  # stored in every record it computes
    ENGINE_VERSION: str
    DISPLAY_NAME: str  # for messages: "MMFF94", "GFN2-xTB"
    DEFAULTS: dict  # every setting with its default; a record's parameters cover all of them
    RUNTIME_KNOBS: tuple[str, ...]  # settings that change speed only (left out of the parameters)

    def parameters(self, **knobs) -> dict:
        """JSON-able settings (defaults overridden by `knobs`), hashed for staleness."""

    def model(self, mol, **settings) -> EngineModel:
        """An engine model for `mol` (explicit hydrogens, one 3D conformer)."""


@dataclass(frozen=True)
class EngineEntry:
    """A registered engine: the key users type, the module implementing it, a one-line summary and
    what to install when it is missing."""

    key: str
    module: str
    summary: str
    install: str | None = None

    def load(self) -> ModuleType:
        """The engine module (ImportError when its optional dependency is missing)."""
        return importlib.import_module(self.module)

    def available(self) -> bool:
        """True when the engine can run in this installation."""
        try:
            module = self.load()
        except ImportError:
            return False
        check = getattr(module, "available", None)
        return bool(check()) if check else True


ENGINES: dict[str, EngineEntry] = {entry.key: entry for entry in (
    EngineEntry("mmff", "library.vibration.mmff", "MMFF94 force field: fast, no intensities of its own"),
    EngineEntry("gfn2", "library.vibration.gfn2",
                "GFN2-xTB tight binding through tblite: slower, IR intensities from the wavefunction",
                install="olibra[xtb]"),
)}
DEFAULT_ENGINE = "mmff"


def keys() -> tuple[str, ...]:
    """Engine keys in registry order (the choices of --engine)."""
    return tuple(ENGINES)


def get(key: str) -> EngineEntry:
    """The registered engine `key` (VibrationInputError naming the choices otherwise)."""
    try:
        return ENGINES[key]
    except (KeyError, TypeError):
        choices = "; ".join(f"'{e.key}' ({e.summary})" for e in ENGINES.values())
        raise VibrationInputError(f"unknown vibration engine {key!r}; choose {choices}") from None


def engine_module(key: str) -> ModuleType:
    """The module implementing engine `key`; VibrationInputError when it is not installed."""
    entry = get(key)
    hint = f"; install it with pip install '{entry.install}'" if entry.install else ""
    try:
        module = entry.load()
    except ImportError as error:
        raise VibrationInputError(f"engine {key!r} is not installed ({error}){hint}") from None
    check = getattr(module, "available", None)
    if check is not None and not check():
        raise VibrationInputError(f"engine {key!r} is not installed{hint}")
    return module


def help_text() -> str:
    """One line per engine, for command-line help."""
    return "; ".join(f"{e.key}: {e.summary}" for e in ENGINES.values())


def settings(engine: ModuleType, knobs: dict) -> dict:
    """The engine's defaults overridden by `knobs`; unknown knobs are refused with the known ones."""
    unknown = set(knobs) - set(engine.DEFAULTS) - set(engine.RUNTIME_KNOBS)
    if unknown:
        raise VibrationInputError(f"unknown {engine.DISPLAY_NAME} engine option(s) {sorted(unknown)}; "
                                  f"known: {sorted(set(engine.DEFAULTS) | set(engine.RUNTIME_KNOBS))}")
    return {**engine.DEFAULTS, **knobs}


def engine_parameters(engine: ModuleType, knobs: dict) -> dict:
    """What a record computed with `knobs` depends on: the engine, its version and every result-changing
    setting (runtime settings such as worker counts are left out)."""
    merged = settings(engine, knobs)
    return {"engine": engine.ENGINE_NAME, "engine_version": engine.ENGINE_VERSION,
            **{k: v for k, v in merged.items() if k not in engine.RUNTIME_KNOBS}}


def single_conformer_copy(mol, conf_id: int = -1):
    """A copy of `mol` holding only conformer `conf_id` (default: the first), renumbered 0.

    Raises :class:`VibrationInputError` for a molecule without 3D coordinates or with hydrogens
    that are not explicit atoms.
    """
    from rdkit import Chem

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


def _soft_modes_at_magnitude(modes):
    """The modes with their few small negative curvatures (above the engine's imaginary tolerance: the
    numerical noise of a flat torsion at a minimum) counted at their magnitude, and how many there were.

    A true imaginary mode never gets here (the driver re-optimizes or refuses the geometry), so every
    mode of a returned result is a real vibration: none is dropped from spectra or fingerprints, and
    `n_imaginary` counts real imaginary modes only (zero).
    """
    import dataclasses

    negative = modes.frequencies_cm1 < 0
    if not negative.any():
        return modes, 0
    order = np.argsort(np.abs(modes.frequencies_cm1), kind="stable")
    return dataclasses.replace(
        modes, frequencies_cm1=np.abs(modes.frequencies_cm1)[order], displacements=modes.displacements[order],
        mass_weighted_vectors=modes.mass_weighted_vectors[:, order], imaginary=np.zeros(order.size, bool),
        soft=negative[order]), int(negative.sum())


def vibrations(engine: ModuleType | str, mol, *, conf_id: int = -1, **knobs):
    """Harmonic vibrations of one conformer (explicit hydrogens, 3D) under `engine`: a ConformerVibrations.

    The conformer is minimized with the engine, its Hessian taken and analyzed (isotope-exact masses).
    If a mode below -``imaginary_tolerance_cm1`` remains (a saddle point), the geometry is pushed
    0.1 angstrom (largest atom displacement) downhill along that mode and minimized again, up to
    ``max_reoptimizations`` times; then :class:`NotAMinimumError`. IR intensities (km/mol) come
    from the engine's dipole derivatives when it gives them.
    """
    from library._threads import one_blas_thread
    from library.vibration.normal_modes import analyze, atomic_masses_amu, ir_intensities_km_mol
    from library.vibration.result import ConformerVibrations, quality_notes

    engine = engine_module(engine) if isinstance(engine, str) else engine
    chosen = settings(engine, knobs)
    work = single_conformer_copy(mol, conf_id)
    masses = atomic_masses_amu(work)
    with one_blas_thread():
        model = engine.model(work, **chosen)
        positions = work.GetConformer().GetPositions().ravel()
        reoptimizations = 0
        while True:
            x, energy, gradient = model.minimize(positions)
            hessian, dipole_derivatives = model.hessian(x)
            modes = analyze(hessian, x.reshape(-1, 3), masses)
            most_negative = float(modes.frequencies_cm1.min()) if len(modes.frequencies_cm1) else 0.0
            if most_negative >= -chosen["imaginary_tolerance_cm1"]:
                break
            if reoptimizations >= chosen["max_reoptimizations"]:
                raise NotAMinimumError(
                    f"{engine.DISPLAY_NAME} geometry keeps an imaginary mode at {most_negative:.1f} cm^-1 after "
                    f"{reoptimizations} displaced re-optimizations; check the structure"
                    + (" or try another vibration engine" if len(ENGINES) > 1 else ""))
            reoptimizations += 1
            direction = modes.displacements[int(np.argmin(modes.frequencies_cm1))]
            positions = x + 0.1 * (direction / np.abs(direction).max()).ravel()
    modes, soft = _soft_modes_at_magnitude(modes)
    intensities = None if dipole_derivatives is None else ir_intensities_km_mol(dipole_derivatives, modes)
    residual = float(np.linalg.norm(gradient))
    notes = quality_notes(reoptimizations=reoptimizations, soft_modes=soft,
                          imaginary_tolerance_cm1=chosen["imaginary_tolerance_cm1"], residual_kcal_mol_a=residual,
                          gradient_tolerance_kcal_mol_a=chosen["gradient_tolerance_kcal_mol_a"])
    return ConformerVibrations(
        engine=engine.ENGINE_NAME,
        positions_a=x.reshape(-1, 3),
        energy_kcal=float(energy),
        residual_gradient_kcal_mol_a=residual,
        modes=modes,
        ir_intensities_km_mol=intensities,
        reoptimizations=reoptimizations,
        notes=tuple(notes),
        soft_modes=soft,
    )
