"""Benchmark of the shape engine: prints materials per second and overlay time.

Run: olibra bench shape (on the fixed benchmark set, see library.benchmark_set)
"""

from __future__ import annotations

import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor

from library.conformers import ensemble
from library.shape import _align_pair, describe

def _describe_one(smiles: str) -> tuple[str, int, str, float]:
    start = time.process_time()
    try:
        ens = ensemble(smiles)
        describe(ens)
        return smiles, len(ens.members), "", time.process_time() - start
    except ValueError as exc:
        return smiles, 0, str(exc), time.process_time() - start


def _single_conformers(smiles_list, count: int):
    mols = []
    for smiles in smiles_list:
        if len(mols) >= count:
            break
        try:
            mols.append(ensemble(smiles, max_conformers=1).members[0].mol)
        except ValueError:
            continue
    return mols


def run(smiles_list: list[str], *, processes: int | None = None, out=sys.stdout,
        overlay_pairs: int = 300) -> dict:
    """Time ensembles + descriptors over all cores and single-conformer overlays.

    Prints and returns materials_per_second (wall clock), cpu_ms_per_material
    (unaffected by other load on the machine), seconds (wall), failures, and
    overlay_ms (mean time per single-conformer Gaussian overlay, ms).
    """
    smiles_list = list(smiles_list)
    if not smiles_list:
        raise ValueError("run() needs at least one SMILES")
    processes = processes or os.cpu_count() or 1
    start = time.perf_counter()
    with ProcessPoolExecutor(max_workers=processes) as pool:
        results = list(pool.map(_describe_one, smiles_list, chunksize=1))
    wall_s = time.perf_counter() - start
    failures = [(smi, err) for smi, _, err, _ in results if err]
    conformers = sum(row[1] for row in results)
    cpu_ms = 1000.0 * sum(row[3] for row in results) / len(results)
    rate = len(smiles_list) / wall_s

    mols = _single_conformers(smiles_list, 40)
    pairs = [(mols[i % len(mols)], mols[(i * 7 + 3) % len(mols)]) for i in range(overlay_pairs)]
    start = time.perf_counter()
    for mol_a, mol_b in pairs:
        _align_pair(mol_a, mol_b, False)
    overlay_ms = (time.perf_counter() - start) / len(pairs) * 1000.0

    print(f"materials: {len(smiles_list)} on {processes} processes in {wall_s:.2f} s "
          f"-> {rate:.1f} materials/s ({conformers} conformers, {len(failures)} failures)",
          file=out)
    print(f"CPU time per material (ensemble + descriptors): {cpu_ms:.0f} ms "
          f"-> {processes * 1000.0 / cpu_ms:.1f} materials/s on {processes} idle cores",
          file=out)
    print(f"single-conformer overlay: {overlay_ms:.3f} ms per pair over {len(pairs)} pairs",
          file=out)
    for smi, err in failures:
        print(f"  failed {smi}: {err}", file=out)
    return {
        "materials": len(smiles_list),
        "processes": processes,
        "seconds": wall_s,
        "materials_per_second": rate,
        "cpu_ms_per_material": cpu_ms,
        "conformers": conformers,
        "failures": failures,
        "overlay_ms": overlay_ms,
        "overlay_pairs": len(pairs),
    }

