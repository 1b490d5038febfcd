"""Computed records in the catalogue: storing, loading and finding stale ones.

A record is stale when its engine version or parameter hash differs from what
would be computed now, or when the material's structure changed since (its
InChIKey differs from the one the record was computed for). Stale records are
recomputed, never silently mixed with fresh ones.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from dataclasses import dataclass
from typing import TYPE_CHECKING

from sqlalchemy import delete, insert, select
from sqlalchemy.orm import Session, selectinload

from library.catalogue.models import ComputedArray, ComputedRecord, Material

if TYPE_CHECKING:
    import numpy as np

ARRAY_DTYPE = "<f4"


def parameter_hash(parameters: dict) -> str:
    """SHA-256 of the parameters as canonical JSON (sorted keys, no spaces)."""
    text = json.dumps(parameters, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


@dataclass(frozen=True)
class EngineStamp:
    """What a record must carry to count as up to date."""

    kind: str
    engine_name: str
    engine_version: str
    parameters: dict

    @property
    def parameter_hash(self) -> str:
        return parameter_hash(self.parameters)


@dataclass(frozen=True)
class LoadedRecord:
    material_id: int
    kind: str
    engine_name: str
    engine_version: str
    parameter_hash: str
    summary: dict
    arrays: dict[str, np.ndarray]


def encode_array(values) -> tuple[str, bytes]:
    import numpy as np  # here, not at module level: reading a catalogue without its arrays needs no NumPy

    array = np.ascontiguousarray(np.asarray(values, dtype=ARRAY_DTYPE))
    return ",".join(str(n) for n in array.shape), array.tobytes()


def decode_array(shape: str, data: bytes, dtype: str = ARRAY_DTYPE) -> np.ndarray:
    import numpy as np

    dims = tuple(int(n) for n in shape.split(",") if n != "")
    return np.frombuffer(data, dtype=dtype).reshape(dims)


def save_record(session: Session, material: Material, stamp: EngineStamp, arrays: dict,
                summary: dict, *, elapsed_s: float | None = None) -> int:
    """Replace the material's record of this kind and engine with a new one (inside the caller's
    transaction); the new record's id."""
    return save_records(session, [(material, stamp, arrays, summary, elapsed_s)])[0]


def save_records(session: Session, entries) -> list[int]:
    """Replace many records at once, (material, stamp, arrays, summary, elapsed_s) each, inside the caller's
    transaction; the new records' ids, in order. The driver's fast path, not the ORM's unit of work: one
    DELETE per (kind, engine) for the records replaced, one multi-row INSERT ... RETURNING for the records
    (SQLAlchemy's insertmanyvalues, in batches) and one executemany for their arrays."""
    from library.catalogue.database import bump_revision

    if not entries:
        return []
    by_stamp: dict[tuple[str, str], set[int]] = {}
    for material, stamp, *_ in entries:
        by_stamp.setdefault((stamp.kind, stamp.engine_name), set()).add(material.id)
    for (kind, engine_name), material_ids in by_stamp.items():
        session.execute(delete(ComputedRecord).where(
            ComputedRecord.material_id.in_(sorted(material_ids)), ComputedRecord.kind == kind,
            ComputedRecord.engine_name == engine_name))
    computed_at = dt.datetime.now(dt.timezone.utc)
    ids = list(session.scalars(
        insert(ComputedRecord).returning(ComputedRecord.id, sort_by_parameter_order=True),
        [{"material_id": material.id, "kind": stamp.kind, "engine_name": stamp.engine_name,
          "engine_version": stamp.engine_version, "parameter_hash": stamp.parameter_hash,
          "structure_inchikey": material.inchikey, "elapsed_s": elapsed_s, "computed_at": computed_at,
          "summary_json": json.dumps(summary, sort_keys=True, default=float)}
         for material, stamp, _, summary, elapsed_s in entries]))
    rows = []
    for record_id, (_, _, arrays, _, _) in zip(ids, entries):
        for name, values in arrays.items():
            shape, data = encode_array(values)
            rows.append({"record_id": record_id, "name": name, "dtype": ARRAY_DTYPE, "shape": shape, "data": data})
    if rows:
        session.execute(insert(ComputedArray), rows)
    bump_revision(session)
    return ids


def is_current(record: ComputedRecord | None, stamp: EngineStamp, inchikey: str) -> bool:
    return (record is not None and record.engine_version == stamp.engine_version
            and record.parameter_hash == stamp.parameter_hash and record.structure_inchikey == inchikey)


def record_state(session: Session, stamp: EngineStamp, *, include_retired: bool = False) -> dict[int, str]:
    """For each material id: 'current', 'stale' or 'missing' under this engine stamp."""
    query = select(Material.id, Material.inchikey)
    if not include_retired:
        query = query.where(Material.status == "active")
    materials = dict(session.execute(query).all())
    # the columns staleness needs, as plain rows (no ORM objects, no summaries): cheap for large catalogues
    records = {r.material_id: r for r in session.execute(select(
        ComputedRecord.material_id, ComputedRecord.engine_version, ComputedRecord.parameter_hash,
        ComputedRecord.structure_inchikey).where(
        ComputedRecord.kind == stamp.kind, ComputedRecord.engine_name == stamp.engine_name))}
    state = {}
    for material_id, inchikey in materials.items():
        record = records.get(material_id)
        state[material_id] = ("missing" if record is None
                              else "current" if is_current(record, stamp, inchikey) else "stale")
    return state


def load_records(session: Session, kind: str, engine_name: str, *, material_ids=None,
                 names: tuple[str, ...] | None = None) -> dict[int, LoadedRecord]:
    """Records of one kind and engine, keyed by material id (optionally only some arrays)."""
    query = select(ComputedRecord).options(selectinload(ComputedRecord.arrays)).where(
        ComputedRecord.kind == kind, ComputedRecord.engine_name == engine_name)
    if material_ids is not None:
        query = query.where(ComputedRecord.material_id.in_(list(material_ids)))
    loaded = {}
    for record in session.scalars(query):
        arrays = {a.name: decode_array(a.shape, a.data, a.dtype) for a in record.arrays
                  if names is None or a.name in names}
        loaded[record.material_id] = LoadedRecord(
            record.material_id, record.kind, record.engine_name, record.engine_version,
            record.parameter_hash, json.loads(record.summary_json or "{}"), arrays)
    return loaded


READ_CHUNK = 500  # materials per query when streaming arrays (also keeps under SQL parameter limits)


def iter_arrays(session: Session, kind: str, engine_name: str, material_ids, names: tuple[str, ...], *,
                chunk: int = READ_CHUNK):
    """(material id, {array name: array}) for the given materials' records of one kind and engine, in
    the order of `material_ids`, reading `chunk` materials per query as plain rows (no ORM objects):
    memory stays at one chunk of the named arrays whatever the catalogue's size. Materials without
    such a record are skipped."""
    material_ids = list(material_ids)
    for start in range(0, len(material_ids), chunk):
        part = material_ids[start:start + chunk]
        query = (select(ComputedRecord.material_id, ComputedArray.name, ComputedArray.shape, ComputedArray.data,
                        ComputedArray.dtype)
                 .join(ComputedArray, ComputedArray.record_id == ComputedRecord.id)
                 .where(ComputedRecord.kind == kind, ComputedRecord.engine_name == engine_name,
                        ComputedRecord.material_id.in_(part), ComputedArray.name.in_(list(names))))
        found: dict[int, dict[str, np.ndarray]] = {}
        for material_id, name, shape, data, dtype in session.execute(query):
            found.setdefault(material_id, {})[name] = decode_array(shape, data, dtype)
        for material_id in part:
            if material_id in found:
                yield material_id, found.pop(material_id)


def summary_items(summary: dict, *, list_limit: int = 12) -> list[tuple[str, str]]:
    """A record's summary as (label, text) pairs for display: numbers to 4 significant digits."""
    items = []
    for key, value in summary.items():
        if isinstance(value, float):
            text = f"{value:.4g}"
        elif isinstance(value, list):
            shown = [f"{v:.4g}" if isinstance(v, float) else str(v) for v in value[:list_limit]]
            text = ", ".join(shown) + (" ..." if len(value) > list_limit else "")
        else:
            text = str(value)
        items.append((key.replace("_", " "), text))
    return items
