"""The fixed benchmark set: seed-catalogue materials with at most 25 heavy atoms."""

from __future__ import annotations

import csv

from library.seed_catalog import MATERIALS_FILE
from library.structures import standardize


def benchmark_materials(*, max_heavy_atoms: int = 25) -> list[tuple[str, str]]:
    """(name, standardized SMILES) of every seed material within the size limit, in file order."""
    out = []
    with MATERIALS_FILE.open(encoding="utf-8", newline="") as handle:
        for row in csv.DictReader(handle):
            structure = standardize(row["smiles"])
            if structure.heavy_atom_count <= max_heavy_atoms:
                out.append((row["name"], structure.smiles))
    return out
