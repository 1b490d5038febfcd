"""Conformer-averaged harmonic spectra, EVA fingerprints and band matching.

A material's spectrum is the set of harmonic wavenumbers (cm^-1) of each
conformer of its ensemble, with Boltzmann weights recomputed from the
vibration engine's own energies. The fingerprint is the EVA descriptor
(J. Comput.-Aided Mol. Des. 11, 143 (1997)): every mode becomes a normalized
Gaussian of width sigma_cm1 on a fixed wavenumber grid, weighted by its
conformer's population (and optionally its infrared intensity).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rdkit import Chem

from library.vibration import engines, groups
from library.vibration.errors import VibrationInputError

FINGERPRINT_DEFAULTS = {
    "sigma_cm1": 10.0,
    "min_cm1": 0.0,
    "max_cm1": 4000.0,
    "step_cm1": 5.0,
    "intensity_weighting": "none",
    "normalization": "unit",
}
_INTENSITY_WEIGHTINGS = ("none", "ir")
_NORMALIZATIONS = ("unit", "none", "area", "max")


def record_parameters(engine: str = "mmff", *, temperature_k: float = 298.15, **ensemble_knobs) -> dict:
    """JSON-able description of everything a vibration record depends on (hashed for staleness).

    Includes the conformer-ensemble settings (`ensemble_knobs`, passed to
    library.conformers.parameters), the engine's settings and the default
    fingerprint settings.
    """
    from library import conformers

    return {
        "ensemble": conformers.parameters(**ensemble_knobs),
        "engine": engines.engine_module(engine).parameters(),
        "temperature_k": float(temperature_k),
        "fingerprint": dict(FINGERPRINT_DEFAULTS),
        "fingerprint_ir": dict(FINGERPRINT_DEFAULTS, intensity_weighting="ir"),
        "modes": {"soft modes": "small negative curvatures counted at their magnitude",
                  "same minimum": [SAME_MINIMUM_RMSD_A, SAME_MINIMUM_ENERGY_KCAL],
                  "groups": [[label, smarts, low, high] for label, smarts, _, low, high in groups.GROUPS],
                  "group participation": groups.MIN_PARTICIPATION},
    }


def parameters(*, engine: str = "mmff", **knobs) -> dict:
    """Same as :func:`record_parameters` (contract name)."""
    return record_parameters(engine, **knobs)


@dataclass(frozen=True, eq=False)
class ConformerSpectrum:
    """Harmonic wavenumbers of one conformer.

    frequencies_cm1: ascending wavenumbers (cm^-1); a real imaginary mode would be negative (the
        engines refuse such a geometry, so none is stored).
    ir_intensities_km_mol: same length, or None when the engine gives no dipoles.
    energy_kcal: engine energy relative to the lowest conformer of the same stereoisomer (kcal/mol).
    weight: population within the material (all weights sum to 1).
    residual_gradient_kcal_mol_a: gradient norm where the Hessian was taken (kcal/mol/A).
    mode_groups: per mode, the index into library.vibration.groups.LABELS of the diagnostic group it
        belongs to, or -1 (None for records computed before groups were assigned).
    soft_mode_count: modes whose small negative curvature (noise) is counted at its magnitude.
    """

    frequencies_cm1: np.ndarray
    ir_intensities_km_mol: np.ndarray | None
    energy_kcal: float
    weight: float
    stereoisomer: int
    residual_gradient_kcal_mol_a: float
    mode_groups: np.ndarray | None = None
    soft_mode_count: int = 0

    @property
    def n_imaginary(self) -> int:
        """Number of imaginary (negative) modes."""
        return int((self.frequencies_cm1 < 0).sum())


@dataclass(frozen=True, eq=False)
class VibrationSpectrum:
    """Harmonic spectrum of a material: its conformers' modes and Boltzmann weights."""

    engine: str
    engine_version: str
    temperature_k: float
    conformers: tuple[ConformerSpectrum, ...]
    notes: tuple[str, ...] = ()

    @property
    def has_ir(self) -> bool:
        """True when every conformer carries infrared intensities."""
        return all(c.ir_intensities_km_mol is not None for c in self.conformers)

    @property
    def max_residual_gradient_kcal_mol_a(self) -> float:
        """Largest residual gradient norm over the conformers (kcal/mol/A)."""
        return max(c.residual_gradient_kcal_mol_a for c in self.conformers)

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Flat float32 arrays for storage; modes of all conformers concatenated."""
        arrays = {
            "frequencies_cm1": np.concatenate([c.frequencies_cm1 for c in self.conformers]).astype(np.float32),
            "mode_counts": np.array([len(c.frequencies_cm1) for c in self.conformers], dtype=np.float32),
            "weights": np.array([c.weight for c in self.conformers], dtype=np.float32),
            "energies_kcal": np.array([c.energy_kcal for c in self.conformers], dtype=np.float32),
            "stereoisomers": np.array([c.stereoisomer for c in self.conformers], dtype=np.float32),
            "residual_gradients_kcal_mol_a": np.array(
                [c.residual_gradient_kcal_mol_a for c in self.conformers], dtype=np.float32),
        }
        if self.has_ir:
            arrays["ir_intensities_km_mol"] = np.concatenate(
                [c.ir_intensities_km_mol for c in self.conformers]).astype(np.float32)
        if all(c.mode_groups is not None for c in self.conformers):
            arrays["mode_groups"] = np.concatenate([c.mode_groups for c in self.conformers]).astype(np.float32)
        arrays["soft_mode_counts"] = np.array([c.soft_mode_count for c in self.conformers], dtype=np.float32)
        return arrays

    def summary(self) -> dict:
        """JSON-able overview: engine, conformer count, main bands, worst residual gradient, notes."""
        bands = main_bands(self, n=8)
        return {
            "engine": self.engine,
            "engine_version": self.engine_version,
            "temperature_k": self.temperature_k,
            "conformer_count": len(self.conformers),
            "stereoisomer_count": len({c.stereoisomer for c in self.conformers}),
            "mode_count": int(len(self.conformers[0].frequencies_cm1)),
            "has_ir": self.has_ir,
            "main_bands_cm1": [round(b.position_cm1, 1) for b in bands],
            "main_band_heights": [round(b.relative_height, 3) for b in bands],
            "main_band_groups": [b.label or "" for b in bands],
            "imaginary_mode_count": sum(c.n_imaginary for c in self.conformers),
            "soft_mode_count": sum(c.soft_mode_count for c in self.conformers),
            "max_residual_gradient_kcal_mol_a": float(self.max_residual_gradient_kcal_mol_a),
            "notes": list(self.notes),
        }

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], summary: dict) -> "VibrationSpectrum":
        """Rebuild a spectrum from :meth:`to_arrays` output and :meth:`summary`."""
        try:
            counts = np.asarray(arrays["mode_counts"]).astype(int)
            frequencies = np.asarray(arrays["frequencies_cm1"], dtype=float)
            intensities = arrays.get("ir_intensities_km_mol")
            groups = arrays.get("mode_groups")
            soft = arrays.get("soft_mode_counts")
            offsets = np.concatenate([[0], np.cumsum(counts)])
            if offsets[-1] != len(frequencies):
                raise VibrationInputError("stored mode counts do not add up to the stored frequencies")
            members = []
            for i in range(len(counts)):
                part = slice(offsets[i], offsets[i + 1])
                members.append(ConformerSpectrum(
                    frequencies_cm1=frequencies[part],
                    ir_intensities_km_mol=None if intensities is None else np.asarray(intensities[part], dtype=float),
                    energy_kcal=float(arrays["energies_kcal"][i]),
                    weight=float(arrays["weights"][i]),
                    stereoisomer=int(arrays["stereoisomers"][i]),
                    residual_gradient_kcal_mol_a=float(arrays["residual_gradients_kcal_mol_a"][i]),
                    mode_groups=None if groups is None else np.asarray(groups[part]).astype(int),
                    soft_mode_count=0 if soft is None else int(soft[i]),
                ))
            return cls(engine=summary["engine"], engine_version=summary["engine_version"],
                       temperature_k=float(summary["temperature_k"]), conformers=tuple(members),
                       notes=tuple(summary.get("notes", ())))
        except KeyError as missing:
            raise VibrationInputError(f"stored vibration record lacks {missing}; recompute it") from missing


def _engine_results(module, ens, knobs: dict) -> list:
    """The engine's vibrations of every member; members whose engine input is the same molecule at the
    same coordinates (the two halves of a racemate, an isotope-free racemic pair) are computed once."""
    results, done = [], {}
    for member in ens.members:
        mol = member.engine_mol
        key = (Chem.MolToSmiles(mol), mol.GetConformer().GetPositions().tobytes())
        if key not in done:
            done[key] = engines.vibrations(module, mol, **knobs)
        results.append(done[key])
    return results


# Two re-optimized conformers of one stereoisomer closer than this (heavy-atom RMSD after the best
# superposition, angstrom) and this close in energy (kcal/mol) are one minimum.
SAME_MINIMUM_RMSD_A = 0.05
SAME_MINIMUM_ENERGY_KCAL = 0.05


def _distinct_minima(ens, results) -> list[int]:
    """Indices of the members to keep: a member whose engine minimum repeats that of a lower-energy member
    of the same stereoisomer (two force-field conformers that collapse into one minimum on re-optimization)
    would count that minimum twice."""
    from rdkit.Chem import rdMolAlign

    from library.conformers import heavy_atom_mol

    order = sorted(range(len(results)), key=lambda i: (ens.members[i].stereoisomer, results[i].energy_kcal, i))
    kept: list[int] = []
    heavy: dict[int, Chem.Mol] = {}

    def minimum(i):
        if i not in heavy:
            mol = Chem.Mol(ens.members[i].engine_mol)
            conformer = mol.GetConformer()
            for atom, xyz in enumerate(results[i].positions_a):
                conformer.SetAtomPosition(atom, xyz.tolist())
            heavy[i] = heavy_atom_mol(mol)
        return heavy[i]

    for i in order:
        duplicate = False
        for j in kept:
            if ens.members[j].stereoisomer != ens.members[i].stereoisomer:
                continue
            if abs(results[i].energy_kcal - results[j].energy_kcal) > SAME_MINIMUM_ENERGY_KCAL:
                continue
            if results[i] is results[j] or (minimum(i).GetNumAtoms() >= 2 and rdMolAlign.GetBestRMS(
                    minimum(j), minimum(i), maxMatches=64) < SAME_MINIMUM_RMSD_A):
                duplicate = True
                break
        if not duplicate:
            kept.append(i)
    return sorted(kept)


def spectrum(ens, *, engine: str = "mmff", temperature_k: float = 298.15, processes: int | None = 1,
             **engine_knobs) -> VibrationSpectrum:
    """Harmonic spectrum of every conformer of `ens` (a ConformerEnsemble, a Mol or a SMILES).

    Each conformer is re-optimized and analyzed by `engine` ('mmff' default,
    or 'gfn2' which adds IR intensities). Boltzmann weights at `temperature_k`
    (kelvin) come from the same engine's energies, with stereoisomers weighted
    equally. `processes` is passed to the gfn2 Hessian (workers per Hessian).
    """
    from library import conformers as conformer_module

    if isinstance(ens, (str, Chem.Mol)):
        ens = conformer_module.ensemble(ens)
    if not hasattr(ens, "members") or not ens.members:
        raise VibrationInputError("expected a ConformerEnsemble with at least one conformer "
                                  "(library.conformers.ensemble(smiles))")
    module = engines.engine_module(engine)
    check = getattr(module, "check_ensemble", None)
    if check is not None:
        check(ens)
    if "processes" in module.RUNTIME_KNOBS:
        engine_knobs.setdefault("processes", processes)
    results = _engine_results(module, ens, engine_knobs)
    kept = _distinct_minima(ens, results)
    merged = len(results) - len(kept)
    members_in, results = [ens.members[i] for i in kept], [results[i] for i in kept]
    stereoisomers = np.array([member.stereoisomer for member in members_in])
    energies = np.array([r.energy_kcal for r in results])
    weights = conformer_module.boltzmann_weights(energies, stereoisomers, temperature_k=temperature_k)
    relative = energies.copy()
    for label in np.unique(stereoisomers):
        relative[stereoisomers == label] -= energies[stereoisomers == label].min()
    notes = []
    for index, r in zip(kept, results):
        notes.extend(f"conformer {index}: {note}" for note in r.notes)
    if merged:
        notes.append(f"{merged} conformer(s) reached the same {module.DISPLAY_NAME} minimum as another of their "
                     "stereoisomer and were merged into it")
    members = tuple(
        ConformerSpectrum(
            frequencies_cm1=r.frequencies_cm1,
            ir_intensities_km_mol=r.ir_intensities_km_mol,
            energy_kcal=float(e),
            weight=float(w),
            stereoisomer=int(s),
            residual_gradient_kcal_mol_a=r.residual_gradient_kcal_mol_a,
            mode_groups=groups.mode_groups(m.engine_mol, r.modes.mass_weighted_vectors, r.frequencies_cm1),
            soft_mode_count=r.soft_modes,
        )
        for m, r, e, w, s in zip(members_in, results, relative, weights, stereoisomers)
    )
    return VibrationSpectrum(engine=module.ENGINE_NAME, engine_version=module.ENGINE_VERSION,
                             temperature_k=float(temperature_k), conformers=members, notes=tuple(notes))


def grid_cm1(*, min_cm1: float = 0.0, max_cm1: float = 4000.0, step_cm1: float = 5.0) -> np.ndarray:
    """The fingerprint grid in cm^-1: min_cm1, min_cm1 + step_cm1, ..., max_cm1 (801 points by default)."""
    if step_cm1 <= 0 or max_cm1 <= min_cm1:
        raise VibrationInputError(
            f"fingerprint grid needs step_cm1 > 0 and max_cm1 > min_cm1, got {min_cm1}, {max_cm1}, {step_cm1}")
    count = int(math.floor((max_cm1 - min_cm1) / step_cm1 + 1e-9)) + 1
    return min_cm1 + step_cm1 * np.arange(count)


def _modes_and_amplitudes(spec: VibrationSpectrum, intensity_weighting: str) -> tuple[np.ndarray, np.ndarray]:
    if intensity_weighting == "auto":
        intensity_weighting = "ir" if spec.has_ir else "none"
    if intensity_weighting not in _INTENSITY_WEIGHTINGS:
        raise VibrationInputError(
            f"intensity_weighting must be one of {_INTENSITY_WEIGHTINGS}, got {intensity_weighting!r}")
    if intensity_weighting == "ir" and not spec.has_ir:
        raise VibrationInputError(
            f"this spectrum ({spec.engine}) has no infrared intensities (it was read from a record made "
            "before intensities were stored); use intensity_weighting='none' or recompute its records")
    positions, amplitudes = [], []
    for c in spec.conformers:
        real = c.frequencies_cm1 > 0  # imaginary modes carry no band
        positions.append(c.frequencies_cm1[real])
        if intensity_weighting == "ir":
            amplitudes.append(c.weight * c.ir_intensities_km_mol[real])
        else:
            amplitudes.append(np.full(int(real.sum()), c.weight))
    return np.concatenate(positions), np.concatenate(amplitudes)


def band_densities(positions_cm1: np.ndarray, amplitudes: np.ndarray, grid: np.ndarray, sigma_cm1: float, *,
                   reach_sigma: float | None = None) -> np.ndarray:
    """Rows of smoothed spectra: (R, G) from (R, M) mode positions in cm^-1 (NaN: no mode) and amplitudes.

    Each mode adds its amplitude times an area-normalized Gaussian of standard deviation
    `sigma_cm1` centered on it, evaluated on `grid` (values in 1/cm^-1 per unit amplitude). The
    EVA descriptor of J. Comput.-Aided Mol. Des. 11, 143 (1997). With `reach_sigma` only grid points
    within that many sigma of each mode are touched (an evenly spaced grid is required): the same
    curve to exp(-reach^2/2) of each band's peak, at a cost independent of the grid length, for
    building many synthetic spectra at once. Records use the exact form (reach None).
    """
    positions = np.atleast_2d(np.asarray(positions_cm1, dtype=float))
    weights = np.atleast_2d(np.asarray(amplitudes, dtype=float))
    if positions.shape != weights.shape:
        raise VibrationInputError(f"positions and amplitudes differ in shape: {positions.shape} and {weights.shape}")
    rows = positions.shape[0]
    norm = 1.0 / (sigma_cm1 * math.sqrt(2.0 * math.pi))
    out = np.zeros((rows, grid.size))
    if reach_sigma is None:
        for r in range(rows):
            present = np.isfinite(positions[r])
            p_row, a_row = positions[r][present], weights[r][present]
            for start in range(0, len(p_row), 512):
                p = p_row[start:start + 512, None]
                a = a_row[start:start + 512, None]
                out[r] += (a * norm * np.exp(-0.5 * ((grid[None, :] - p) / sigma_cm1) ** 2)).sum(axis=0)
        return out
    step = float(grid[1] - grid[0])
    reach = int(math.ceil(reach_sigma * sigma_cm1 / step))
    present = np.isfinite(positions)
    row_index = np.broadcast_to(np.arange(rows)[:, None], positions.shape)[present]
    position, amplitude = positions[present], weights[present]
    centre = np.rint((position - grid[0]) / step).astype(np.int64)
    flat = out.reshape(-1)
    for offset in range(-reach, reach + 1):
        column = centre + offset
        ok = (column >= 0) & (column < grid.size)
        value = amplitude[ok] * norm * np.exp(-0.5 * ((grid[column[ok]] - position[ok]) / sigma_cm1) ** 2)
        flat += np.bincount(row_index[ok] * grid.size + column[ok], weights=value, minlength=flat.size)
    return out


def _smoothed(positions_cm1, amplitudes, grid, sigma_cm1) -> np.ndarray:
    """Sum of area-normalized Gaussians (width sigma_cm1) on `grid`, in 1/cm^-1 per unit amplitude."""
    return band_densities(np.asarray(positions_cm1)[None, :], np.asarray(amplitudes)[None, :], grid, sigma_cm1)[0]


def fingerprint(spec: VibrationSpectrum, *, sigma_cm1: float = 10.0, min_cm1: float = 0.0, max_cm1: float = 4000.0,
                step_cm1: float = 5.0, intensity_weighting: str = "none", normalization: str = "unit") -> np.ndarray:
    """EVA fingerprint (float32, one value per grid point) of a spectrum.

    Each real mode adds a Gaussian of standard deviation `sigma_cm1` and unit
    area times its conformer weight (times its IR intensity in km/mol when
    `intensity_weighting` is 'ir'). With normalization 'none' the values are
    a band density in modes per cm^-1 (they sum, times step_cm1, to the
    number of modes inside the grid); 'unit' scales to Euclidean norm 1, 'area'
    to sum * step_cm1 = 1, 'max' to a largest value of 1. The default grid is
    0-4000 cm^-1 in 5 cm^-1 steps (801 points).
    """
    if not isinstance(spec, VibrationSpectrum):
        raise VibrationInputError(f"expected a VibrationSpectrum, got {type(spec).__name__}")
    if sigma_cm1 <= 0:
        raise VibrationInputError(f"sigma_cm1 must be positive, got {sigma_cm1}")
    if normalization not in _NORMALIZATIONS:
        raise VibrationInputError(f"normalization must be one of {_NORMALIZATIONS}, got {normalization!r}")
    grid = grid_cm1(min_cm1=min_cm1, max_cm1=max_cm1, step_cm1=step_cm1)
    positions, amplitudes = _modes_and_amplitudes(spec, intensity_weighting)
    curve = _smoothed(positions, amplitudes, grid, sigma_cm1)
    if normalization != "none":
        scale = {"unit": np.linalg.norm(curve), "area": curve.sum() * step_cm1, "max": curve.max(initial=0.0)}[
            normalization]
        if scale > 0:
            curve = curve / scale
    return curve.astype(np.float32)


def cosine_similarity(fp_a: np.ndarray, fp_b: np.ndarray) -> float:
    """The vibration metric's similarity of two fingerprints on the same grid: their cosine, in [0, 1]
    (fingerprints are non-negative)."""
    from library.search import metrics

    a = np.asarray(fp_a, dtype=np.float64)
    b = np.asarray(fp_b, dtype=np.float64)
    if a.ndim != 1 or a.shape != b.shape:
        raise VibrationInputError(
            f"fingerprints must be 1-D and on the same grid; got shapes {a.shape} and {b.shape}")
    try:
        blocks = [metrics.Block(metrics.prepare_feature("fingerprint", x)) for x in (a, b)]
    except ValueError:
        raise VibrationInputError("a fingerprint is empty (all zeros), negative or not finite; recompute it") from None
    return float(metrics.get("vibration").similarity(*blocks, aligned=True)[0])


@dataclass(frozen=True)
class Band:
    """A band of the smoothed spectrum: peak position (cm^-1), height relative to the tallest (0-1], and
    the diagnostic group whose modes make it (library.vibration.groups.LABELS), if any."""

    position_cm1: float
    relative_height: float
    label: str | None = None


GROUP_BAND_TOLERANCE_CM1 = 10.0  # a group's own peak this close to a main band labels that band


def main_bands(spec: VibrationSpectrum, n: int | None = 8, *, sigma_cm1: float = 10.0,
               intensity_weighting: str = "auto", min_cm1: float = 200.0, max_cm1: float = 4000.0,
               min_relative_height: float = 0.05) -> tuple[Band, ...]:
    """The `n` tallest peaks of the smoothed spectrum (1 cm^-1 grid), tallest first, plus a band for
    every diagnostic group the molecule has (C=O, C≡N, O-H, N-H, C=C, C-D ...), labelled with it.

    Peaks are local maxima of the Boltzmann-averaged curve (IR-weighted when
    the spectrum has intensities and `intensity_weighting` is 'auto'), at
    least `min_relative_height` of the tallest; the far-infrared below
    `min_cm1` (torsions, least reliable) is left out. `n=None` keeps all.
    A group's band is the peak of the curve of its own modes (see library.vibration.groups); it
    labels the main band within 10 cm^-1 of it, or joins the list however small it is, so the bands a
    substitution is about (an aldehyde's C=O, a nitrile's C≡N) are never left out.
    """
    grid = grid_cm1(min_cm1=min_cm1, max_cm1=max_cm1, step_cm1=1.0)
    positions, amplitudes = _modes_and_amplitudes(spec, intensity_weighting)
    curve = _smoothed(positions, amplitudes, grid, sigma_cm1)
    top = curve.max(initial=0.0)
    if top <= 0:
        return ()
    import scipy.signal  # on use: importing it takes about 0.3 s, too long for every `olibra` start

    peaks, _ = scipy.signal.find_peaks(curve, height=min_relative_height * top)
    order = peaks[np.argsort(-curve[peaks], kind="stable")]
    if n is not None:
        order = order[:n]
    bands = [Band(float(grid[i]), float(curve[i] / top)) for i in order]
    mode_groups = _mode_groups(spec)
    if mode_groups is not None:
        from library.vibration.groups import LABELS

        for index in sorted(set(mode_groups[mode_groups >= 0].tolist())):
            own = _smoothed(positions[mode_groups == index], amplitudes[mode_groups == index], grid, sigma_cm1)
            if own.max(initial=0.0) <= 0:
                continue
            peak = int(np.argmax(own))
            near = [k for k, b in enumerate(bands) if abs(b.position_cm1 - grid[peak]) <= GROUP_BAND_TOLERANCE_CM1
                    and b.label is None]
            if near:
                k = min(near, key=lambda k: abs(bands[k].position_cm1 - grid[peak]))
                bands[k] = Band(bands[k].position_cm1, bands[k].relative_height, LABELS[index])
            else:
                bands.append(Band(float(grid[peak]), float(max(curve[peak], 0.0) / top), LABELS[index]))
    return tuple(sorted(bands, key=lambda b: -b.relative_height))


def _mode_groups(spec: VibrationSpectrum) -> np.ndarray | None:
    """The group index of every real mode, in the order of _modes_and_amplitudes (None without groups)."""
    if any(c.mode_groups is None for c in spec.conformers):
        return None
    return np.concatenate([c.mode_groups[c.frequencies_cm1 > 0] for c in spec.conformers])


@dataclass(frozen=True)
class BandMatch:
    """Result of :func:`match_bands`.

    pairs: (band of A, band of B) matched one-to-one within tolerance_cm1.
    unmatched_a / unmatched_b: bands with no partner.
    score: 2 * len(pairs) / (bands of A + bands of B), the Dice overlap of the
        two band lists: 1 when every band has a partner, 0 when none has.
    """

    pairs: tuple[tuple[Band, Band], ...]
    unmatched_a: tuple[Band, ...]
    unmatched_b: tuple[Band, ...]
    score: float
    tolerance_cm1: float

    def to_dict(self) -> dict:
        """JSON-ready: positions in cm^-1 (0.1 cm^-1), matched as [a, b], and the diagnostic group
        labels of the bands that have one ({"a": {position: label}, "b": {...}})."""
        def labels(bands):
            return {f"{b.position_cm1:.1f}": b.label for b in bands if b.label}
        bands_a = [a for a, _ in self.pairs] + list(self.unmatched_a)
        bands_b = [b for _, b in self.pairs] + list(self.unmatched_b)
        return {"tolerance_cm1": self.tolerance_cm1, "score": round(self.score, 6),
                "matched": [[round(a.position_cm1, 1), round(b.position_cm1, 1)] for a, b in self.pairs],
                "only_a": [round(a.position_cm1, 1) for a in self.unmatched_a],
                "only_b": [round(b.position_cm1, 1) for b in self.unmatched_b],
                "groups": {"a": labels(bands_a), "b": labels(bands_b)}}


def match_bands(spec_a: VibrationSpectrum, spec_b: VibrationSpectrum, *, tolerance_cm1: float = 15.0,
                n: int | None = 12, sigma_cm1: float = 10.0, intensity_weighting: str = "auto",
                min_cm1: float = 200.0) -> BandMatch:
    """Pair the main bands of two spectra one-to-one when they lie within `tolerance_cm1`.

    Bands come from :func:`main_bands` (same `n`, `sigma_cm1`, `min_cm1`);
    the pairing minimizes the total wavenumber difference (optimal
    assignment). The 0-1 score is the Dice overlap 2 * pairs / (n_a + n_b).
    """
    if tolerance_cm1 <= 0:
        raise VibrationInputError(f"tolerance_cm1 must be positive, got {tolerance_cm1}")
    bands_a = main_bands(spec_a, n, sigma_cm1=sigma_cm1, intensity_weighting=intensity_weighting, min_cm1=min_cm1)
    bands_b = main_bands(spec_b, n, sigma_cm1=sigma_cm1, intensity_weighting=intensity_weighting, min_cm1=min_cm1)
    pairs: list[tuple[Band, Band]] = []
    used_a, used_b = set(), set()
    if bands_a and bands_b:
        a = np.array([b.position_cm1 for b in bands_a])
        b = np.array([b.position_cm1 for b in bands_b])
        distance = np.abs(a[:, None] - b[None, :])
        cost = np.where(distance <= tolerance_cm1, distance, 1e6)
        import scipy.optimize  # on use, like scipy.signal above

        rows, cols = scipy.optimize.linear_sum_assignment(cost)
        for i, j in zip(rows, cols):
            if distance[i, j] <= tolerance_cm1:
                pairs.append((bands_a[i], bands_b[j]))
                used_a.add(i)
                used_b.add(j)
    total = len(bands_a) + len(bands_b)
    return BandMatch(
        pairs=tuple(sorted(pairs, key=lambda p: p[0].position_cm1)),
        unmatched_a=tuple(x for i, x in enumerate(bands_a) if i not in used_a),
        unmatched_b=tuple(x for j, x in enumerate(bands_b) if j not in used_b),
        score=2.0 * len(pairs) / total if total else 0.0,
        tolerance_cm1=float(tolerance_cm1),
    )
