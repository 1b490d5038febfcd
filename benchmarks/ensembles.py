"""Benchmark of conformer-sampling noise: re-embed every seed material with another random seed and
score it against itself.

Run: olibra bench ensembles [--ensemble-count N] [--oversampling F]

Prints, over the materials, the distribution (min, 5th percentile, median) of the shape and the
vibration (MMFF94 EVA fingerprint) self-similarity between the two embeddings, the materials below
0.99, and the cost of the ensemble settings (seconds per material for both embeddings and spectra).
"""

from __future__ import annotations

import sys
import time

import numpy as np

from benchmarks.materials import benchmark_materials

THRESHOLD = 0.99


def _records(smiles: str, seed: int):
    from library import computations, conformers, shape
    from library.vibration import spectrum as spectrum_module

    ens = conformers.ensemble(smiles, seed=seed)
    vector = shape.shape_vector(shape.describe(ens))
    fingerprint = computations.fingerprint_arrays(spectrum_module.spectrum(ens, engine="mmff"))["fingerprint"]
    return vector, fingerprint, len(ens.members)


def run(*, count: int | None = None, seeds: tuple[int, int] = (0xC0FFEE, 7), oversampling: float | None = None,
        out=sys.stdout) -> dict:
    """Self-similarity of each seed material between embeddings with two seeds (see module docstring).

    ``oversampling`` replaces the product's embeddings-per-kept-conformer factor for this run only.
    """
    from library import conformers
    from library.search import metrics

    if oversampling is not None:
        if not oversampling >= 1:
            raise ValueError(f"oversampling must be at least 1, got {oversampling}")
        conformers._EMBED_OVERSAMPLING = float(oversampling)
    print(f"ensemble settings: {conformers._EMBED_OVERSAMPLING:g} embeddings per kept conformer", file=out)

    def score(name, a, b):
        block = [metrics.Block(metrics.prepare_feature(name, x)) for x in (a, b)]
        return float(metrics.get("shape" if name == "shape" else "vibration").similarity(*block)[0, 0])

    materials = benchmark_materials()[:count] if count else benchmark_materials()
    shape_scores, vibration_scores, low, conformer_counts = [], [], [], []
    started = time.perf_counter()
    for name, smiles in materials:
        try:
            first, second = _records(smiles, seeds[0]), _records(smiles, seeds[1])
        except ValueError as exc:
            print(f"skipped {name}: {exc}", file=out)
            continue
        s, v = score("shape", first[0], second[0]), score("fingerprint", first[1], second[1])
        shape_scores.append(s)
        vibration_scores.append(v)
        conformer_counts.append(first[2])
        if min(s, v) < THRESHOLD:
            low.append((name, s, v))
    elapsed = time.perf_counter() - started
    result = {"materials": len(shape_scores), "seconds_per_material": elapsed / max(1, len(shape_scores)),
              "median_conformers": float(np.median(conformer_counts)) if conformer_counts else 0.0}
    for label, values in (("shape", shape_scores), ("vibration", vibration_scores)):
        values = np.asarray(values)
        result[label] = {"min": float(values.min()), "p5": float(np.percentile(values, 5)),
                         "median": float(np.median(values)), "below_0.99": int((values < THRESHOLD).sum())}
        print(f"{label:<9} self-similarity over {len(values)} materials, seeds {seeds[0]} vs {seeds[1]}: "
              f"min {values.min():.4f}, 5th percentile {np.percentile(values, 5):.4f}, "
              f"median {np.median(values):.4f}, below {THRESHOLD}: {(values < THRESHOLD).sum()}", file=out)
    print(f"cost: {result['seconds_per_material']:.2f} s per material for two embeddings and two MMFF94 spectra "
          f"(median {result['median_conformers']:g} conformers)", file=out)
    for name, s, v in sorted(low, key=lambda item: min(item[1], item[2]))[:15]:
        print(f"  below {THRESHOLD}: {name}: shape {s:.4f}, vibration {v:.4f}", file=out)
    return result
