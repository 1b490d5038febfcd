"""Benchmark of building the similarity index from the database: time and peak memory.

Run: olibra bench index [--copies N]   (against the catalogue olibra is pointed at, e.g. the demo)

The catalogue is replicated N times into a throwaway SQLite file: every material and its current
shape and vibration records (only the arrays the index reads) are copied under new ids, names and
InChIKey-like keys. This is a synthetic catalogue with the real record layout, for measuring only;
it never touches the source. A fresh Python process then builds the index with the cache off, and
the benchmark prints the materials indexed, the seconds taken, the peak resident memory of that
process above its resident memory once the libraries were imported, and the index's own array
bytes: bounded-memory loading keeps the first close to the second. Then, as a user would, it runs
`olibra search` twice in fresh processes against a fresh cache folder: the first builds and caches
the index (with its per-material information), the second starts from that cache, and the wall
time of each is printed.
"""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

_CHILD = r"""
import json, resource, sys, time
from library.catalogue.database import Catalogue
from library.search.catalogue_index import load_index
import rdkit.Chem, sqlalchemy, numpy, sklearn.decomposition  # the libraries the build imports, in the baseline
catalogue = Catalogue(sys.argv[1])
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
started = time.perf_counter()
built = load_index(catalogue, use_cache=False)
elapsed = time.perf_counter() - started
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
index = built.index
def array_bytes(value, seen):
    if id(value) in seen:
        return 0
    seen.add(id(value))
    if hasattr(value, "nbytes"):
        return value.nbytes
    if isinstance(value, dict):
        return sum(array_bytes(v, seen) for v in value.values())
    if isinstance(value, (list, tuple)):
        return sum(array_bytes(v, seen) for v in value)
    if hasattr(value, "__dict__"):
        return sum(array_bytes(v, seen) for v in vars(value).values())
    return 0
array_bytes = array_bytes(index, set())
print(json.dumps({"materials": len(built.materials), "seconds": elapsed, "baseline_kib": before,
                  "peak_kib": peak, "array_bytes": array_bytes}))
"""


def replicate(source: Path, target: Path, copies: int) -> int:
    """Copy `source` (an olibra SQLite catalogue) to `target` with every material and its index
    arrays repeated `copies` times in all; returns the number of materials written."""
    from library.search import metrics
    from library.search.catalogue_index import needed_kinds

    shutil.copyfile(source, target)
    kinds = needed_kinds()
    arrays = sorted({name for kind in kinds for name in metrics.record_arrays(kind)})
    kind_marks = ",".join("?" * len(kinds))
    with sqlite3.connect(target) as db:
        material_stride = db.execute("SELECT max(id) + 1 FROM material").fetchone()[0]
        record_stride = db.execute("SELECT max(id) + 1 FROM computed_record").fetchone()[0]
        columns = [row[1] for row in db.execute("PRAGMA table_info(material)")]
        record_columns = [row[1] for row in db.execute("PRAGMA table_info(computed_record)")]
        marks = ",".join("?" * len(arrays))
        for k in range(1, copies):
            key = f"substr(inchikey, 1, 14) || '-' || printf('%010d', id + {k * material_stride})"
            chosen = {"id": f"id + {k * material_stride}", "preferred_name": f"preferred_name || ' ~{k}'",
                      "cas_rn": "NULL", "inchikey": key}
            db.execute(f"INSERT INTO material ({','.join(columns)}) SELECT "
                       f"{','.join(chosen.get(c, c) for c in columns)} FROM material WHERE id < {material_stride}")
            record_key = (f"substr(structure_inchikey, 1, 14) || '-' || "
                          f"printf('%010d', material_id + {k * material_stride})")
            chosen = {"id": f"id + {k * record_stride}", "material_id": f"material_id + {k * material_stride}",
                      "structure_inchikey": record_key}
            db.execute(f"INSERT INTO computed_record ({','.join(record_columns)}) SELECT "
                       f"{','.join(chosen.get(c, c) for c in record_columns)} FROM computed_record "
                       f"WHERE kind IN ({kind_marks}) AND id < {record_stride}", kinds)
            db.execute(f"INSERT INTO computed_array (record_id, name, dtype, shape, data) SELECT "
                       f"record_id + {k * record_stride}, name, dtype, shape, data FROM computed_array "
                       f"WHERE record_id < {record_stride} AND name IN ({marks})", arrays)
        return db.execute("SELECT count(*) FROM material").fetchone()[0]


def _timed_searches(target: Path, cache: Path, out) -> tuple[float, float]:
    """Wall seconds of `olibra search` on the synthetic catalogue: first with an empty cache folder
    (it builds and stores the index), then again (it starts from the stored index)."""
    with sqlite3.connect(target) as db:
        name = db.execute("SELECT preferred_name FROM material ORDER BY id LIMIT 1").fetchone()[0]
    command = [sys.executable, "-m", "library.cli", "--db", f"sqlite:///{target}", "search", name, "-k", "10"]
    environment = {**os.environ, "OLIBRA_CACHE": str(cache)}
    seconds = []
    for label in ("empty cache: builds and stores the index", "from the stored index"):
        started = time.perf_counter()
        done = subprocess.run(command, capture_output=True, text=True, check=False, env=environment)
        seconds.append(time.perf_counter() - started)
        if done.returncode != 0:
            raise RuntimeError(f"olibra search failed: {done.stderr.strip()[-400:]}")
        print(f"olibra search {name!r} ({label}): {seconds[-1]:.1f} s", file=out)
    return seconds[0], seconds[1]


def run(source_url: str, *, copies: int = 50, out=sys.stdout) -> dict:
    """Replicate the catalogue at `source_url` (SQLite) and measure one index build (see module doc)."""
    from sqlalchemy.engine import make_url

    url = make_url(source_url)
    if url.get_backend_name() != "sqlite" or not url.database:
        raise ValueError("olibra bench index replicates a SQLite catalogue file; point olibra at one "
                         "(e.g. the demo catalogue)")
    if not Path(url.database).is_file():
        raise ValueError(f"no catalogue file at {url.database}; point olibra at one (--db or $OLIBRA_DB), "
                         "e.g. the demo catalogue")
    if copies < 1:
        raise ValueError(f"copies must be at least 1, got {copies}")
    with tempfile.TemporaryDirectory(prefix="olibra-bench-index-") as folder:
        target = Path(folder) / "catalogue.sqlite"
        started = time.perf_counter()
        materials = replicate(Path(url.database), target, copies)
        print(f"synthetic catalogue: {materials} materials ({copies} copies of {url.database}) "
              f"in {time.perf_counter() - started:.1f} s", file=out)
        child = subprocess.run([sys.executable, "-c", _CHILD, f"sqlite:///{target}"], capture_output=True,
                               text=True, check=False)
        if child.returncode != 0:
            raise RuntimeError(f"the index build failed: {child.stderr.strip()[-400:]}")
        result = json.loads(child.stdout.strip().splitlines()[-1])
        growth_mb = (result["peak_kib"] - result["baseline_kib"]) / 1024
        arrays_mb = result["array_bytes"] / 2**20
        print(f"index from the database: {result['materials']} materials in {result['seconds']:.1f} s "
              f"({result['materials'] / max(result['seconds'], 1e-9):.0f} materials/s); peak memory "
              f"{growth_mb:.0f} MB above the imported libraries, index arrays {arrays_mb:.0f} MB "
              f"({growth_mb / max(arrays_mb, 1e-9):.2f}x)", file=out)
        result["search_seconds"] = _timed_searches(target, Path(folder) / "cache", out)
    return {**result, "growth_mb": growth_mb}
