"""Editing a stored material's curated fields, each change audited with its old and new value.

Works inside the caller's transaction like library.catalogue.curation (which
adds materials and changes status); nothing here commits. The structure itself
is not edited: a different structure is a different material.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from library.catalogue import curation
from library.catalogue.curation import CurationError, Source, parse_odor_list
from library.catalogue.models import MATERIAL_STATUSES, Material, MaterialOdor, Provenance, Synonym, utc_now
from library.structures import check_cas


@dataclass
class MaterialChanges:
    """The edit form's values, as typed (checked by apply_changes)."""

    name: str
    synonyms: list[str]
    cas: str
    family: str
    notes: str
    odors: str  # 'citrus:0.8|green' (commas also separate terms)
    odor_source: str
    source: str  # provenance of the other changed values
    status: str
    restricted: bool


def odor_text(material: Material) -> str:
    return curation.format_odor_list(material.odors).replace("|", ", ")


def _check_name(text: str, what: str) -> str:
    text = (text or "").strip()
    if not text:
        raise CurationError(f"the {what} is empty; every material needs a name")
    if len(text) > curation.MAX_NAME_CHARS:
        raise CurationError(f"the {what} is {len(text)} characters long (limit {curation.MAX_NAME_CHARS})")
    if any(ord(c) < 32 or ord(c) == 127 for c in text):
        raise CurationError(f"the {what} {text[:40]!r} contains control characters")
    if what == "synonym" and "|" in text:
        raise CurationError(f"the synonym {text[:40]!r} contains '|', which separates synonyms; "
                            "give each synonym on its own line")
    return text


def _set_provenance(session: Session, material: Material, field_name: str, source: Source, actor: str) -> None:
    row = next((p for p in material.provenance if p.field == field_name), None)
    old = None if row is None else str(Source(row.kind, row.reference))
    if old == str(source):
        return
    if row is None:
        material.provenance.append(Provenance(field=field_name, kind=source.kind, reference=source.reference))
    else:
        row.kind, row.reference = source.kind, source.reference
    curation.audit(session, actor=actor, action="update", material=material,
                   field_name=f"source of {field_name}", old=old, new=str(source))


def apply_changes(session: Session, material: Material, changes: MaterialChanges, *, actor: str) -> list[str]:
    """Check every value, then change what differs; returns the names of the changed fields.

    Every field is checked before anything changes; FieldErrors lists every
    problem under the MaterialChanges field names ('name', 'cas', 'odors', ...).
    The caller's transaction is then rolled back, so nothing changes.
    """
    checker = curation.FieldChecker()
    name = checker.check("name", _check_name, changes.name, "name")
    synonyms: list[str] = []
    for synonym in changes.synonyms:
        if synonym.strip():
            synonym = checker.check("synonyms", _check_name, synonym, "synonym")
            if synonym and synonym != name and synonym not in synonyms:
                synonyms.append(synonym)
    cas = checker.check("cas", check_cas, changes.cas) if (changes.cas or "").strip() else None
    family = checker.check("family", curation.clean_family, changes.family)
    notes = checker.check("notes", curation.clean_notes, changes.notes)
    odors = checker.check("odors", parse_odor_list, (changes.odors or "").replace(",", "|")) or []
    source = checker.check("source", Source.parse, changes.source, default="from memory")
    odor_source = checker.check("odor_source", Source.parse, changes.odor_source, default="from memory")
    if changes.status not in MATERIAL_STATUSES:
        checker.add("status", f"status {changes.status!r} is not one of {', '.join(MATERIAL_STATUSES)}")

    if name and name != material.preferred_name:
        clash = session.scalar(select(Material).where(
            func.lower(Material.preferred_name) == name.lower(), Material.id != material.id))
        if clash is not None:
            checker.add("name", f"the name {name!r} is already used by #{clash.id}; choose another name")
    if name and checker.ok("name"):
        message = curation.name_clash(session, [name], exclude_id=material.id)
        if message:
            checker.add("name", message)
    if synonyms:
        message = curation.name_clash(session, synonyms, exclude_id=material.id)
        if message:
            checker.add("synonyms", message)
    if cas and cas != material.cas_rn:
        clash = session.scalar(select(Material).where(Material.cas_rn == cas, Material.id != material.id))
        if clash is not None:
            checker.add("cas", f"CAS RN {cas} is already used by #{clash.id} {clash.preferred_name}; "
                               "check the number")
    terms = curation.vocabulary(session)
    unknown = [o.term for o in odors if o.term not in terms]
    if unknown:
        checker.add("odors", f"odor descriptor(s) {', '.join(unknown)} not in the vocabulary; "
                             "add them on the vocabulary page first")
    checker.raise_any()

    changed: list[str] = []

    def change(field_name: str, old, new, provenance_field: str | None = None) -> None:
        if old == new:
            return
        curation.audit(session, actor=actor, action="update", material=material,
                       field_name=field_name, old=old, new=new)
        changed.append(field_name)
        if provenance_field and new is not None:
            _set_provenance(session, material, provenance_field, source, actor)

    change("preferred_name", material.preferred_name, name, "preferred_name")
    material.preferred_name = name
    old_synonyms = [s.name for s in material.synonyms]
    if sorted(old_synonyms) != sorted(synonyms):
        change("synonyms", "|".join(sorted(old_synonyms)), "|".join(sorted(synonyms)), "synonyms")
        keep = [s for s in material.synonyms if s.name in synonyms]
        material.synonyms = keep + [Synonym(name=n) for n in synonyms
                                    if n not in {s.name for s in keep}]
    change("cas_rn", material.cas_rn, cas, "cas_rn")
    material.cas_rn = cas
    if cas is None:
        material.provenance = [p for p in material.provenance if p.field != "cas_rn"]
    change("olfactive_family", material.olfactive_family, family, "olfactive_family")
    material.olfactive_family = family
    change("notes", material.notes, notes, "notes")
    material.notes = notes

    old_odor = curation.format_odor_list(material.odors)
    by_term = {o.descriptor.term: o for o in material.odors}
    new_rows = []
    for assignment in odors:
        row = by_term.get(assignment.term)
        if row is None or row.strength != assignment.strength:
            row = row or MaterialOdor(descriptor=terms[assignment.term])
            row.strength = assignment.strength
            row.source_kind, row.source_reference = odor_source.kind, odor_source.reference
        new_rows.append(row)
    material.odors = new_rows
    session.flush()
    change("odor", old_odor or None, curation.format_odor_list(material.odors) or None)

    if changes.status != material.status:
        curation.set_status(session, material, changes.status, actor=actor)
        changed.append("status")
    if bool(changes.restricted) != material.restricted:
        curation.set_restricted(session, material, bool(changes.restricted), actor=actor)
        changed.append("restricted")
    if changed:  # child rows (synonyms, odors) do not touch the row's own timestamp
        material.updated_at = utc_now()
    return changed
