"""Benchmark of the coordinator's bulk writes: computed records stored per second, by batch size.

Run: olibra bench write [--materials N]              (a scratch SQLite file, removed afterwards)
     olibra --db URL bench write [--materials N]     (URL: an empty scratch catalogue, e.g. PostgreSQL)

The seed catalogue's first N materials are added to the scratch catalogue; the first few are computed
for real (MMFF, default plan), and their results are stored for all N materials by the same
`library.catalogue.jobs.store_batch` that `olibra compute` and the Dask coordinator use, in batches of
1, 10 and 50 materials (one transaction each). The records stored for materials beyond the computed
few hold another material's arrays: the scratch catalogue is for measuring only. Figures: materials,
records and rows (records plus their arrays) per second of storing.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

BATCH_SIZES = (1, 10, 50)
COMPUTED = 4  # materials computed for real; their results are stored for every material


def run(url: str | None, *, materials: int = 200, say=print) -> None:
    from sqlalchemy import delete, func, select

    from library import computations
    from library.catalogue import curation, seed, transfer
    from library.catalogue.database import describe_url, initialize
    from library.catalogue.jobs import store_batch
    from library.catalogue.models import ComputedArray, ComputedRecord, Material

    with tempfile.TemporaryDirectory(prefix="olibra-bench-write-") as folder:
        target = url or f"sqlite:///{Path(folder) / 'scratch.sqlite'}"
        catalogue = initialize(target)
        try:
            with catalogue.reading() as session:
                if session.scalar(select(func.count()).select_from(Material)):
                    raise ValueError(f"{describe_url(target)} already holds materials; bench write needs an "
                                     "empty scratch catalogue (create a new database and give its URL)")
            rows = transfer.read_rows(seed.MATERIALS_FILE)[:materials]
            names = [r.fields["name"] for r in rows]
            with catalogue.transaction() as session:
                curation.load_vocabulary(session)
                report = transfer.import_rows(session, seed.seed_rows(names), actor="bench")
                assert report.committed, report.summary()
            with catalogue.reading() as session:
                chosen = [tuple(r) for r in session.execute(
                    select(Material.id, Material.smiles).order_by(Material.id))]
            plan = computations.Plan()
            stamps = computations.stamps(plan)
            started = time.perf_counter()
            results = [computations.compute_material(plan, smiles) for _, smiles in chosen[:COMPUTED]]
            say(f"{describe_url(target)}: {len(chosen)} materials; {COMPUTED} computed for real "
                f"({time.perf_counter() - started:.1f} s), their {len(stamps)} records each stored for every "
                "material")
            say(f"{'batch':>6} {'materials/s':>12} {'records/s':>10} {'rows/s':>9}   (rows: records and their arrays)")
            for size in BATCH_SIZES:
                with catalogue.transaction() as session:
                    session.execute(delete(ComputedRecord))
                items = [(material_id, smiles, results[i % len(results)], 0.0)
                         for i, (material_id, smiles) in enumerate(chosen)]
                started = time.perf_counter()
                stored = sum(store_batch(catalogue, stamps, items[i:i + size]) for i in range(0, len(items), size))
                elapsed = time.perf_counter() - started
                with catalogue.reading() as session:
                    records = session.scalar(select(func.count()).select_from(ComputedRecord))
                    arrays = session.scalar(select(func.count()).select_from(ComputedArray))
                say(f"{size:>6} {stored / elapsed:>12.1f} {records / elapsed:>10.0f} {(records + arrays) / elapsed:>9.0f}")
        finally:
            catalogue.dispose()
