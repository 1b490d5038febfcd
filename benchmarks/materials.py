"""The fixed benchmark set (seed-catalogue materials with at most 25 heavy atoms) and the real job
runner measured on it in a scratch catalogue."""

from __future__ import annotations

import csv
import os
import platform
import tempfile
import time
from pathlib import Path

from library.seed_catalog import MATERIALS_FILE as SEED_MATERIALS



def benchmark_materials(*, max_heavy_atoms: int = 25) -> list[tuple[str, str]]:
    """(name, standardized SMILES) of every seed material within the size limit, in file order."""
    from library.structures import standardize

    out = []
    with SEED_MATERIALS.open(encoding="utf-8", newline="") as handle:
        for row in csv.DictReader(handle):
            structure = standardize(row["smiles"])
            if structure.heavy_atom_count <= max_heavy_atoms:
                out.append((row["name"], structure.smiles))
    return out


def header(what: str, processes: int | None) -> str:
    """The first line every benchmark prints: machine, cores, processes, Python."""
    return (f"olibra bench {what}: {platform.machine()} {os.cpu_count()} core(s), "
            f"{processes or os.cpu_count()} process(es), Python {platform.python_version()}")


def runner_throughput(plan, names: list[str], *, processes: int | None = None, say=print,
                      label: str = "", cluster: str | None = None) -> dict:
    """Materials per second of `olibra compute` as users run it (library.catalogue.jobs.run with the
    worker processes, or on the Dask cluster `cluster`, writing each material's records) for the seed
    materials `names`, in a scratch SQLite catalogue; per-material compute seconds come from the stored
    records, the parent's write rate (materials per second of storing) from the job report."""
    from sqlalchemy import select

    from library import computations
    from library.catalogue import jobs, seed, transfer
    from library.catalogue.curation import load_vocabulary
    from library.catalogue.database import initialize
    from library.catalogue.models import ComputedRecord

    wanted = set(names)
    with tempfile.TemporaryDirectory(prefix="olibra-bench-") as folder:
        catalogue = initialize(f"sqlite:///{Path(folder) / 'bench.sqlite'}")
        try:
            with catalogue.transaction() as session:
                load_vocabulary(session)
            transfer.import_into(catalogue, seed.seed_rows(wanted, SEED_MATERIALS))
            stamps = computations.stamps(plan)
            chosen = [m for m in jobs.select_materials(catalogue, stamps, which="all") if m[1] in wanted]
            started = time.perf_counter()
            report = jobs.run(catalogue, stamps, computations.worker(plan), chosen, processes=processes,
                              cluster=cluster)
            wall = time.perf_counter() - started
            with catalogue.reading() as session:
                per_material = [float(s) for s in session.scalars(select(ComputedRecord.elapsed_s).where(
                    ComputedRecord.kind == stamps[0].kind)) if s is not None]
        finally:
            catalogue.dispose()
    figures = {"materials": report.done, "failed": len(report.failures), "wall_s": wall,
               "materials_per_s": report.done / wall if wall > 0 else float("nan"),
               "compute_s_per_material": sum(per_material) / len(per_material) if per_material else float("nan"),
               "write_materials_per_s": report.done / report.write_s if report.write_s > 0 else float("nan"),
               "setup_s": report.setup_s}
    if cluster:  # the rate once the cluster is up (starting a LocalCluster takes seconds)
        running = wall - report.setup_s
        figures["materials_per_s"] = report.done / running if running > 0 else float("nan")
    where = f"on the Dask cluster {cluster}" if cluster else f"on {processes or os.cpu_count()} processes"
    if cluster:
        where += f" (of which {report.setup_s:.2f} s connecting or starting it, left out of the rate)"
    say(f"{label}{report.done} materials ({len(report.failures)} failed) through the job runner in {wall:.2f} s "
        f"{where}: {figures['materials_per_s']:.2f} materials/s; "
        f"compute time per material in the workers {figures['compute_s_per_material'] * 1000:.0f} ms; "
        f"the parent wrote {figures['write_materials_per_s']:.0f} materials/s")
    for material_id, name, reason in report.failures[:5]:
        say(f"    failed #{material_id} {name}: {reason}")
    return figures
