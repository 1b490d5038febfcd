"""GFN2-xTB vibrations through tblite: tight optimization, semi-numerical Hessian, IR intensities.

GFN2-xTB: J. Chem. Theory Comput. 15, 1652 (2019). tblite works in bohr and
hartree; everything leaving this module is in angstrom, kcal/mol and cm^-1
(conversions in :mod:`library.units`).

The Hessian is built from central differences of analytic gradients. Every
displaced single point restarts from the converged wavefunction of the
reference geometry (``Calculator.singlepoint(reference, copy=True)``) and
stops its SCC at the looser `displaced_accuracy`: 7 instead of 9 SCC cycles
for a 19-heavy-atom musk, about 20 % less time, frequencies within 0.15 cm^-1
of displaced points converged at `accuracy`. Up to 1.0 tblite keeps the same
integral cutoff, so only the SCC convergence changes. The 6N displaced single
points can be shared among forked worker processes that inherit the converged
reference and run tblite single-threaded. The dipole moment of each displaced
point gives the dipole derivatives for infrared intensities in the same pass.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import importlib.metadata
import multiprocessing
import os
import sys

import numpy as np
from rdkit import Chem

from library import units
from library.vibration import engines
from library.vibration.errors import VibrationInputError

try:
    TBLITE_VERSION = importlib.metadata.version("tblite")
except importlib.metadata.PackageNotFoundError:  # pragma: no cover - optional dependency
    TBLITE_VERSION = None

ENGINE_NAME = "gfn2-xtb"
ENGINE_VERSION = f"GFN2-xTB (tblite {TBLITE_VERSION}); olibra vibration 1"
DISPLAY_NAME = "GFN2-xTB"
RUNTIME_KNOBS = ("processes",)  # worker processes per Hessian: the same result, sooner

DEFAULTS = {
    "accuracy": 0.01,
    "displaced_accuracy": 0.1,
    "electronic_temperature_k": 300.0,
    "step_a": 5.0e-3,
    "gradient_tolerance_kcal_mol_a": 0.05,
    "imaginary_tolerance_cm1": 20.0,
    "max_reoptimizations": 2,
}


def parameters(**knobs) -> dict:
    """JSON-able settings of this engine (defaults overridden by `knobs`), hashed for staleness."""
    return engines.engine_parameters(sys.modules[__name__], knobs)


def available() -> bool:
    """True when tblite is installed."""
    return TBLITE_VERSION is not None


def _require_tblite():
    try:
        from tblite.interface import Calculator
    except ImportError as error:  # pragma: no cover - depends on the installation
        raise VibrationInputError(
            "engine 'gfn2' needs the tblite package: pip install 'olibra[xtb]' (tblite>=0.4)") from error
    return Calculator


def _boltzmann_hartree_per_k() -> float:
    return units.BOLTZMANN_KCAL_PER_MOL_K / units.HARTREE_TO_KCAL_PER_MOL


class TightBindingModel:
    """A GFN2-xTB calculator for one molecule; positions are (N, 3) in angstrom.

    energy in kcal/mol, gradient in kcal/mol/A, dipole in e*angstrom.
    """

    def __init__(self, numbers: np.ndarray, positions_a: np.ndarray, *, charge: int = 0, unpaired: int = 0,
                 accuracy: float = 0.01, displaced_accuracy: float = 0.1, electronic_temperature_k: float = 300.0):
        calculator_class = _require_tblite()
        set_openmp_threads(1)
        self.numbers = np.asarray(numbers, dtype=int)
        self.charge = charge
        self.unpaired = unpaired
        self.accuracy = accuracy
        self.displaced_accuracy = displaced_accuracy
        self.electronic_temperature_k = electronic_temperature_k
        try:
            self.calculator = calculator_class(
                "GFN2-xTB", self.numbers, np.asarray(positions_a, dtype=float) * units.ANGSTROM_TO_BOHR,
                charge=float(charge), uhf=int(unpaired))
        except Exception as error:  # tblite raises its own ValueError/RuntimeError types
            raise VibrationInputError(f"GFN2-xTB cannot set up this structure: {error}") from error
        self.calculator.set("verbosity", 0)
        self.calculator.set("accuracy", accuracy)
        self.calculator.set("temperature", electronic_temperature_k * _boltzmann_hartree_per_k())
        self.reference = None
        self.reference_positions_a = None

    @classmethod
    def from_mol(cls, mol: Chem.Mol, **knobs) -> "TightBindingModel":
        """Set up from an RDKit molecule with explicit hydrogens and one 3D conformer."""
        numbers = np.array([a.GetAtomicNum() for a in mol.GetAtoms()])
        if numbers.max() > 86:
            raise VibrationInputError("GFN2-xTB is parametrized up to radon (Z = 86)")
        charge = Chem.GetFormalCharge(mol)
        unpaired = sum(a.GetNumRadicalElectrons() for a in mol.GetAtoms())
        return cls(numbers, mol.GetConformer().GetPositions(), charge=charge, unpaired=unpaired, **knobs)

    def _run(self, positions_a: np.ndarray, *, restart_from_reference: bool):
        self.calculator.update(np.asarray(positions_a, dtype=float).reshape(-1, 3) * units.ANGSTROM_TO_BOHR)
        try:
            if restart_from_reference and self.reference is not None:
                self.calculator.set("accuracy", self.displaced_accuracy)
                return self.calculator.singlepoint(self.reference, copy=True)
            self.calculator.set("accuracy", self.accuracy)
            self.reference = self.calculator.singlepoint(self.reference)
            self.reference_positions_a = np.array(positions_a, dtype=float).ravel()
            return self.reference
        except Exception as error:
            raise VibrationInputError(f"GFN2-xTB single point failed (SCC not converged?): {error}") from error

    def energy_gradient(self, positions_a: np.ndarray) -> tuple[float, np.ndarray]:
        """Energy (kcal/mol) and flat gradient (kcal/mol/A) at `positions_a` (angstrom)."""
        result = self._run(positions_a, restart_from_reference=False)
        energy = result.get("energy") * units.HARTREE_TO_KCAL_PER_MOL
        gradient = result.get("gradient").ravel() * units.HARTREE_PER_BOHR_TO_KCAL_PER_MOL_A
        return float(energy), gradient

    def converge_reference(self, positions_a: np.ndarray) -> None:
        """Converged wavefunction at `positions_a` for the displaced points to restart from (kept if present)."""
        x = np.asarray(positions_a, dtype=float).ravel()
        if self.reference is None or not np.array_equal(self.reference_positions_a, x):
            self.energy_gradient(x)

    def displaced(self, positions_a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Flat gradient (kcal/mol/A) and dipole (e*angstrom) at a point near the reference geometry."""
        result = self._run(positions_a, restart_from_reference=True)
        gradient = result.get("gradient").ravel() * units.HARTREE_PER_BOHR_TO_KCAL_PER_MOL_A
        dipole = result.get("dipole") * units.E_BOHR_TO_E_ANGSTROM
        return gradient, dipole


def set_openmp_threads(threads: int) -> None:
    """Set the OpenMP thread count tblite uses in this process (GNU OpenMP runtime).

    tblite parallelizes one single point with OpenMP. For molecules of odorant
    size the gain is small, and on a busy machine spinning OpenMP barriers
    stall badly, so olibra runs tblite single-threaded and spreads
    independent single points over processes instead.
    """
    name = ctypes.util.find_library("gomp")
    if name:
        try:
            ctypes.CDLL(name).omp_set_num_threads(int(threads))
        except (OSError, AttributeError):
            pass


_worker_model: TightBindingModel | None = None


def _adopt_model(model: TightBindingModel) -> None:
    """Pool initializer: keep the parent's model, inherited through fork (no pickling, no new setup)."""
    global _worker_model
    os.environ["OMP_NUM_THREADS"] = "1"
    set_openmp_threads(1)
    _worker_model = model


def _displacement_chunk(args) -> tuple[np.ndarray, np.ndarray]:
    x0, step_a, coordinates = args
    return _displacements(_worker_model, x0, step_a, coordinates)


def _displacements(model: TightBindingModel, x0: np.ndarray, step_a: float, coordinates) -> tuple:
    gradients = np.empty((len(coordinates), x0.size))
    dipoles = np.empty((len(coordinates), 3))
    for row, i in enumerate(coordinates):
        forward = x0.copy()
        forward[i] += step_a
        backward = x0.copy()
        backward[i] -= step_a
        g_forward, mu_forward = model.displaced(forward)
        g_backward, mu_backward = model.displaced(backward)
        gradients[row] = (g_forward - g_backward) / (2.0 * step_a)
        dipoles[row] = (mu_forward - mu_backward) / (2.0 * step_a)
    return gradients, dipoles


def hessian_and_dipole_derivatives(model: TightBindingModel, positions_a: np.ndarray, *, step_a: float = 5.0e-3,
                                   processes: int | None = 1) -> tuple[np.ndarray, np.ndarray]:
    """Cartesian Hessian (kcal/mol/A^2) and dipole derivatives (e, shape (3N, 3)).

    Central differences with displacement `step_a` (angstrom). With
    `processes` > 1 the coordinates are split among forked workers that run
    tblite single-threaded; `None` uses every core. Displaced points restart
    from the converged wavefunction at `positions_a` (computed here unless the
    model's last full single point was there) at the model's `displaced_accuracy`.
    """
    x0 = np.asarray(positions_a, dtype=float).ravel()
    n = x0.size
    if processes is None:
        processes = os.cpu_count() or 1
    processes = max(1, min(int(processes), n))
    model.converge_reference(x0)
    if processes == 1 or multiprocessing.current_process().daemon:
        gradients, dipoles = _displacements(model, x0, step_a, range(n))
    else:
        # four chunks per worker, handed out as workers free up: a core slowed by another
        # process takes fewer of them
        chunks = [list(c) for c in np.array_split(np.arange(n), 4 * processes)]
        context = multiprocessing.get_context("fork")
        with context.Pool(processes, initializer=_adopt_model, initargs=(model,)) as pool:
            parts = pool.map(_displacement_chunk, [(x0, step_a, c) for c in chunks], chunksize=1)
        gradients = np.vstack([p[0] for p in parts])
        dipoles = np.vstack([p[1] for p in parts])
    return 0.5 * (gradients + gradients.T), dipoles


def _initial_inverse_hessian(mol: Chem.Mol | None, positions_a: np.ndarray) -> np.ndarray | None:
    """Inverse of the MMFF94 Hessian at the start geometry, made positive definite, or None.

    A force-field Hessian is a far better first guess for a quasi-Newton
    search than a multiple of the identity (the GFN2 optimization of a
    19-heavy-atom musk needed about 4 times fewer gradients with it).
    Eigenvalues are floored at 50 kcal/mol/A^2 so the guess stays positive
    definite, including the six rigid-body directions.
    """
    if mol is None:
        return None
    from library.vibration.mmff import ForceFieldModel
    from library.vibration.errors import MissingParametersError

    try:
        hessian = ForceFieldModel(mol).hessian(np.asarray(positions_a, dtype=float).ravel())
    except MissingParametersError:
        return None
    eigenvalues, vectors = np.linalg.eigh(hessian)
    eigenvalues = np.maximum(np.abs(eigenvalues), 50.0)
    inverse = (vectors / eigenvalues) @ vectors.T
    return 0.5 * (inverse + inverse.T)


def optimize(model: TightBindingModel, positions_a: np.ndarray, *, gradient_tolerance_kcal_mol_a: float = 0.05,
             mol: Chem.Mol | None = None, max_iterations: int = 2000) -> tuple[np.ndarray, float, np.ndarray]:
    """Minimize the GFN2-xTB energy from `positions_a` (angstrom) with scipy's quasi-Newton methods.

    With `mol` given (same atom order) the search is scipy's BFGS seeded with
    the MMFF94 Hessian; otherwise L-BFGS-B. Stops when the largest gradient
    component is below `gradient_tolerance_kcal_mol_a` / sqrt(3N), so the
    Euclidean norm is at most the tolerance (kcal/mol/A). Returns positions
    (N, 3) in angstrom, energy (kcal/mol) and flat gradient (kcal/mol/A).
    """
    import scipy.optimize  # on use: importing it takes about 0.2 s, too long for every `olibra` start

    x0 = np.asarray(positions_a, dtype=float).ravel()
    component_tolerance = gradient_tolerance_kcal_mol_a / np.sqrt(x0.size)
    inverse_hessian = _initial_inverse_hessian(mol, x0)

    def objective(x):
        return model.energy_gradient(x)

    best = x0
    for attempt in range(3):
        if inverse_hessian is not None and attempt == 0:
            outcome = scipy.optimize.minimize(
                objective, best, jac=True, method="BFGS",
                options={"gtol": component_tolerance, "maxiter": max_iterations, "hess_inv0": inverse_hessian})
        else:
            outcome = scipy.optimize.minimize(
                objective, best, jac=True, method="L-BFGS-B",
                options={"gtol": component_tolerance, "ftol": 1e-16, "maxiter": max_iterations, "maxcor": 30})
        best = outcome.x
        energy, gradient = model.energy_gradient(best)
        if np.linalg.norm(gradient) <= gradient_tolerance_kcal_mol_a:
            break
    return best.reshape(-1, 3), energy, gradient


class ConformerModel:
    """The engine model of one conformer (see library.vibration.engines.EngineModel): GFN2-xTB
    optimization seeded with the MMFF94 Hessian, then the Hessian and dipole derivatives from
    central differences of analytic gradients (`step_a`, angstrom) at SCC `accuracy` for the
    reference and `displaced_accuracy` for the displaced points, over `processes` workers."""

    def __init__(self, mol: Chem.Mol, *, accuracy: float, displaced_accuracy: float,
                 electronic_temperature_k: float, step_a: float, gradient_tolerance_kcal_mol_a: float,
                 processes: int | None = 1, **_loop_settings):
        self.mol = mol
        self.tight_binding = TightBindingModel.from_mol(mol, accuracy=accuracy, displaced_accuracy=displaced_accuracy,
                                                        electronic_temperature_k=electronic_temperature_k)
        self.step_a, self.processes = step_a, processes
        self.tolerance = gradient_tolerance_kcal_mol_a

    def minimize(self, positions_a):
        positions, energy, gradient = optimize(self.tight_binding, np.asarray(positions_a).reshape(-1, 3),
                                               mol=self.mol, gradient_tolerance_kcal_mol_a=self.tolerance)
        return positions.ravel(), float(energy), gradient

    def hessian(self, positions_a):
        return hessian_and_dipole_derivatives(self.tight_binding, np.asarray(positions_a).reshape(-1, 3),
                                              step_a=self.step_a, processes=self.processes)


def model(mol: Chem.Mol, **settings) -> ConformerModel:
    """The GFN2-xTB engine model of one conformer (explicit hydrogens, 3D)."""
    return ConformerModel(mol, **settings)


def vibrations(mol: Chem.Mol, *, conf_id: int = -1, **knobs):
    """GFN2-xTB harmonic vibrations and IR intensities (km/mol) of one conformer: a ConformerVibrations.

    The starting geometry (usually an MMFF conformer) is optimized with GFN2-xTB until the gradient
    norm is below `gradient_tolerance_kcal_mol_a`; the Hessian comes from central differences; saddle
    points are re-optimized (see library.vibration.engines.vibrations).
    """
    return engines.vibrations(sys.modules[__name__], mol, conf_id=conf_id, **knobs)
