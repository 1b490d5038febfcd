"""Read-side helpers shared by the pages and the JSON API: searching, paging, one material's records.

Plain catalogue queries and dict shaping; no chemistry here.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

from sqlalchemy import func, or_, select
from sqlalchemy.orm import Session, selectinload

from library import computations, functional_groups
from library.catalogue import records as records_module
from library.catalogue.models import (
    COMPUTED_KINDS,
    AuditEntry,
    BackgroundJob,
    ComputedRecord,
    Material,
    MaterialOdor,
    OdorDescriptor,
    PairFlag,
    Synonym,
)
from library.errors import OlibraError

MAX_QUERY_CHARS = 200
MAX_PAGE_SIZE = 200
SHAPE_SUMMARY_LABELS = {
    "npr1": ("NPR1", ""),
    "npr2": ("NPR2", ""),
    "radius_of_gyration_a": ("radius of gyration", "Å"),
    "asphericity": ("asphericity", ""),
    "volume_a3": ("volume", "Å³"),
    "surface_area_a2": ("surface area", "Å²"),
    "conformer_count": ("conformers", ""),
    "stereoisomer_count": ("stereoisomers", ""),
    "force_field": ("force field", ""),
}


@dataclass(frozen=True)
class Page:
    items: list[Material]
    total: int
    page: int
    per_page: int

    @property
    def pages(self) -> int:
        return max(1, math.ceil(self.total / self.per_page))


def _like_pattern(text: str) -> str:
    escaped = text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
    return f"%{escaped}%"


SORT_COLUMNS = {"name": func.lower(Material.preferred_name), "cas": Material.cas_rn,
                "family": func.lower(Material.olfactive_family), "id": Material.id}


def _has_odor(pattern: str, *, exact: bool = False):
    """Materials with an odor descriptor whose term (or descriptor family) matches."""
    term = func.lower(OdorDescriptor.term)
    matched = (term == pattern) if exact else or_(term.like(pattern, escape="\\"),
                                                  func.lower(OdorDescriptor.family).like(pattern, escape="\\"))
    return Material.id.in_(select(MaterialOdor.material_id).join(OdorDescriptor).where(matched))


def search_materials(session: Session, query: str = "", *, page: int = 1, per_page: int = 50,
                     include_retired: bool = False, family: str = "", odor: str = "", sort: str = "name",
                     descending: bool = False) -> Page:
    """Materials whose name, synonym, CAS RN, InChIKey, olfactive family or odor descriptor contains `query`
    (case-insensitive), optionally of one olfactive `family` and with one odor descriptor `odor`, paged and
    sorted by one of SORT_COLUMNS."""
    query = (query or "").strip()
    if len(query) > MAX_QUERY_CHARS:
        raise OlibraError(f"the search text is {len(query)} characters long; use at most {MAX_QUERY_CHARS}")
    if sort not in SORT_COLUMNS:
        raise OlibraError(f"cannot sort by {sort[:20]!r}; sort by one of {', '.join(SORT_COLUMNS)}")
    per_page = max(1, min(int(per_page), MAX_PAGE_SIZE))
    page = max(1, int(page))
    conditions = []
    if query:
        pattern = _like_pattern(query.lower())
        conditions.append(or_(
            func.lower(Material.preferred_name).like(pattern, escape="\\"),
            func.lower(Material.cas_rn).like(pattern, escape="\\"),
            func.lower(Material.inchikey).like(pattern, escape="\\"),
            func.lower(Material.olfactive_family).like(pattern, escape="\\"),
            Material.id.in_(select(Synonym.material_id).where(
                func.lower(Synonym.name).like(pattern, escape="\\"))),
            _has_odor(pattern),
        ))
    if family.strip():
        conditions.append(func.lower(Material.olfactive_family) == family.strip().lower())
    if odor.strip():
        conditions.append(_has_odor(odor.strip().lower(), exact=True))
    if not include_retired:
        conditions.append(Material.status == "active")
    total = session.scalar(select(func.count()).select_from(Material).where(*conditions)) or 0
    column = SORT_COLUMNS[sort]
    items = list(session.scalars(
        select(Material).where(*conditions)
        .options(selectinload(Material.synonyms),
                 selectinload(Material.odors).selectinload(MaterialOdor.descriptor))
        .order_by(column.desc() if descending else column.asc(), Material.id)
        .offset((page - 1) * per_page).limit(per_page)))
    return Page(items, total, page, per_page)


def parse_page_arguments(args) -> tuple[str, int, bool]:
    """(query, page, include_retired) from request arguments; a bad page number is a clear error."""
    text = args.get("page", "1").strip() or "1"
    if not text.isdigit() or int(text) < 1:
        raise OlibraError(f"page {text[:20]!r} is not a page number; use 1, 2, 3 ...")
    return args.get("q", ""), int(text), args.get("retired", "") in ("1", "on", "true", "yes")


def olfactive_families(session: Session) -> list[str]:
    """The olfactive families the catalogue's materials carry, sorted."""
    return sorted(f for f in session.scalars(select(Material.olfactive_family).distinct()) if f)


def parse_catalogue_filters(args) -> dict:
    """family, odor, sort and descending from request arguments (`sort=-name` sorts descending)."""
    sort = (args.get("sort", "name").strip() or "name")
    descending = sort.startswith("-")
    return {"family": args.get("family", ""), "odor": args.get("odor", ""), "sort": sort.lstrip("-"),
            "descending": descending}


@dataclass(frozen=True)
class RecordView:
    kind: str
    engine_name: str
    engine_version: str
    computed_at: object
    elapsed_s: float | None
    state: str  # 'current' | 'stale' | 'engine not available'
    summary: dict


def record_views(session: Session, material: Material) -> list[RecordView]:
    stamps = computations.current_stamps()
    views = []
    for record in session.scalars(select(ComputedRecord).where(ComputedRecord.material_id == material.id)
                                  .order_by(ComputedRecord.kind, ComputedRecord.engine_name)):
        stamp = stamps.get((record.kind, record.engine_name))
        if stamp is None:
            state = "engine not available"
        else:
            state = "current" if records_module.is_current(record, stamp, material.inchikey) else "stale"
        views.append(RecordView(record.kind, record.engine_name, record.engine_version, record.computed_at,
                                record.elapsed_s, state, json.loads(record.summary_json or "{}")))
    return views


def missing_kinds(views: list[RecordView]) -> list[str]:
    return [kind for kind in COMPUTED_KINDS if not any(v.kind == kind for v in views)]


def shape_summary(views: list[RecordView]) -> tuple[list[tuple[str, str, str]], RecordView] | None:
    """(label, value, unit) rows of the shape record, NPR1 and NPR2 first, and the record itself."""
    shape = next((v for v in views if v.kind == "shape"), None)
    if shape is None:
        return None
    rows = []
    for key, (label, unit) in SHAPE_SUMMARY_LABELS.items():
        if key in shape.summary:
            value = shape.summary[key]
            rows.append((label, f"{value:.3f}" if isinstance(value, float) else str(value), unit))
    return rows, shape


def summary_rows(summary: dict) -> list[tuple[str, str]]:
    return records_module.summary_items(summary)


def audit_history(session: Session, material_id: int, *, limit: int = 200) -> list[AuditEntry]:
    return list(session.scalars(select(AuditEntry).where(
        AuditEntry.entity == "material", AuditEntry.entity_id == material_id)
        .order_by(AuditEntry.id.desc()).limit(limit)))


def pair_flags(session: Session, material_id: int) -> list[tuple[PairFlag, Material]]:
    flags = session.scalars(select(PairFlag).where(
        (PairFlag.material_a_id == material_id) | (PairFlag.material_b_id == material_id))
        .order_by(PairFlag.id)).all()
    return [(f, f.material_b if f.material_a_id == material_id else f.material_a) for f in flags]


def vocabulary_with_counts(session: Session) -> list[tuple[OdorDescriptor, int]]:
    counts = dict(session.execute(select(MaterialOdor.descriptor_id, func.count())
                                  .group_by(MaterialOdor.descriptor_id)).all())
    return [(d, counts.get(d.id, 0))
            for d in session.scalars(select(OdorDescriptor).order_by(OdorDescriptor.term))]


def provenance_text(kind: str, reference: str | None) -> str:
    return f"{kind}: {reference}" if reference else kind


def material_json(material: Material, *, detail: bool = False) -> dict:
    """A material for the JSON API (the list shows the main fields; `detail` adds the rest)."""
    data = {
        "id": material.id,
        "name": material.preferred_name,
        "synonyms": [s.name for s in material.synonyms],
        "cas": material.cas_rn,
        "inchikey": material.inchikey,
        "formula": material.formula,
        "family": material.olfactive_family,
        "odor": [{"term": o.descriptor.term, "strength": o.strength}
                 for o in sorted(material.odors, key=lambda o: o.descriptor.term)],
        "status": material.status,
        "restricted": material.restricted,
    }
    if detail:
        data.update(
            smiles=material.smiles, inchi=material.inchi,
            average_mass_g_per_mol=round(material.average_mass_g_per_mol, 4),
            monoisotopic_mass_da=round(material.monoisotopic_mass_da, 6),
            heavy_atom_count=material.heavy_atom_count, stereo_status=material.stereo_status,
            unassigned_stereo_count=material.unassigned_stereo_count, notes=material.notes,
            functional_groups=list(functional_groups.groups_of(material.smiles)),
            provenance={p.field: provenance_text(p.kind, p.reference) for p in material.provenance},
        )
        for item, odor in zip(data["odor"], sorted(material.odors, key=lambda o: o.descriptor.term)):
            item["source"] = provenance_text(odor.source_kind, odor.source_reference)
    return data


def latest_job_for(session: Session, material_id: int, *, look_back: int = 50) -> BackgroundJob | None:
    """The most recent of the last `look_back` jobs that computed this material alone or among others
    (a job without a material list covers the whole catalogue)."""
    for job in session.scalars(select(BackgroundJob).order_by(BackgroundJob.id.desc()).limit(look_back)):
        wanted = json.loads(job.parameters_json or "{}").get("material_ids")
        if wanted is None or material_id in wanted:
            return job
    return None


def job_json(job: BackgroundJob) -> dict:
    return {
        "id": job.id, "kind": job.kind, "description": job.description, "state": job.state,
        "total": job.total, "done": job.done, "failed": job.failed, "message": job.message,
        "created_by": job.created_by,
        "created_at": job.created_at.isoformat() if job.created_at else None,
        "started_at": job.started_at.isoformat() if job.started_at else None,
        "finished_at": job.finished_at.isoformat() if job.finished_at else None,
        "parameters": json.loads(job.parameters_json or "{}"),
    }
