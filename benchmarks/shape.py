"""Benchmark of the shape engine: materials per second through the real job runner, and overlay time.

Run: olibra bench shape (on the fixed benchmark set, see benchmarks.materials)
"""

from __future__ import annotations

import sys
import time

from benchmarks.materials import benchmark_materials, runner_throughput


def _single_conformers(smiles_list, count: int):
    from library.conformers import ensemble

    ensembles = []
    for smiles in smiles_list:
        if len(ensembles) >= count:
            break
        try:
            ensembles.append(ensemble(smiles, max_conformers=1))
        except ValueError:
            continue
    return ensembles


def run(*, processes: int | None = None, out=sys.stdout, overlay_pairs: int = 300) -> dict:
    """Shape records computed by the job runner over the benchmark set, and single-conformer overlays.

    Prints and returns materials_per_s (wall clock, records written), compute_s_per_material (in the
    workers, unaffected by the writing) and overlay_ms (mean time per single-conformer Gaussian
    overlay through the overlay metric, ms).
    """
    from library import computations
    from library.search import metrics

    def say(text: str) -> None:
        print(text, file=out, flush=True)

    materials = benchmark_materials()
    say(f"benchmark set: {len(materials)} seed materials with at most 25 heavy atoms")
    figures = runner_throughput(computations.Plan(kinds=("shape",)), [name for name, _ in materials],
                                processes=processes, say=say, label="shape records: ")
    ensembles = _single_conformers([smiles for _, smiles in materials], 40)
    overlay = metrics.get("overlay")
    pairs = [(ensembles[i % len(ensembles)], ensembles[(i * 7 + 3) % len(ensembles)]) for i in range(overlay_pairs)]
    start = time.perf_counter()
    for a, b in pairs:
        overlay.pair_similarity(a, b)
    figures["overlay_ms"] = (time.perf_counter() - start) / len(pairs) * 1000.0
    figures["overlay_pairs"] = len(pairs)
    say(f"single-conformer overlay: {figures['overlay_ms']:.3f} ms per pair over {len(pairs)} pairs")
    return figures
