"""Restriction entries a curator records for a material: prohibited, restricted (a maximum level in a
product category), specification required, allergen to declare.

olibra stores what curators record; it is not a regulatory database. Every place that shows these
entries shows DISCLAIMER with them. Functions work inside the caller's session and never commit.
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from library.catalogue.curation import CurationError, Source, audit, current_actor
from library.catalogue.models import RESTRICTION_KINDS, Material, Restriction

DISCLAIMER = ("olibra stores what curators record, it is not a regulatory database; check the applicable "
              "regulations and safety data sheets.")
BLOCKING_KINDS = ("prohibited", "restricted")  # kinds that keep a material out of substitute lists by default
MAX_TEXT_CHARS = 200
CARRIED_OVER = "carried over from the former restricted flag"  # also written by the migration


@dataclass(frozen=True)
class RestrictionEntry:
    """One checked entry, not yet stored."""

    kind: str
    authority: str
    reference: str | None = None
    max_percent: float | None = None
    product_category: str | None = None
    decided_on: dt.date | None = None
    source: Source = Source("from memory")


def _text(value, what: str, *, required: bool = False) -> str | None:
    text = ("" if value is None else str(value)).strip()
    if not text:
        if required:
            raise CurationError(f"a restriction needs {what}")
        return None
    if any(ord(c) < 32 or ord(c) == 127 for c in text):
        raise CurationError(f"restriction {what} {text[:40]!r} contains control characters")
    if len(text) > MAX_TEXT_CHARS:
        raise CurationError(f"restriction {what} is {len(text)} characters long; keep it under {MAX_TEXT_CHARS}")
    return text


def check_entry(*, kind, authority, reference=None, max_percent=None, category=None, date=None,
                source=None) -> RestrictionEntry:
    """Check what a curator typed and return an entry, or raise CurationError naming the problem."""
    kind = (kind or "").strip().lower()
    if kind not in RESTRICTION_KINDS:
        raise CurationError(f"restriction kind {kind[:40]!r} is not one of {', '.join(RESTRICTION_KINDS)}")
    authority = _text(authority, "an authority or standard (e.g. 'IFRA Standards' or 'EU 1223/2009')",
                      required=True)
    level = None
    if max_percent not in (None, ""):
        try:
            level = float(max_percent)
        except (TypeError, ValueError):
            raise CurationError(f"maximum level {str(max_percent)[:40]!r} is not a number (percent)") from None
        if not 0.0 <= level <= 100.0:
            raise CurationError(f"maximum level {level} % is outside 0-100")
    if kind != "restricted" and level is not None and kind != "allergen":
        raise CurationError(f"a maximum level belongs to a 'restricted' or 'allergen' entry, not '{kind}'")
    decided_on = None
    if date not in (None, ""):
        if isinstance(date, dt.date):
            decided_on = date
        else:
            try:
                decided_on = dt.date.fromisoformat(str(date).strip())
            except ValueError:
                raise CurationError(f"date {str(date)[:40]!r} is not a date; write it as YYYY-MM-DD") from None
    parsed = source if isinstance(source, Source) else Source.parse(source, default="from memory")
    return RestrictionEntry(kind=kind, authority=authority, reference=_text(reference, "reference"),
                            max_percent=level, product_category=_text(category, "product category"),
                            decided_on=decided_on, source=parsed)


def tag(entry: Restriction | RestrictionEntry) -> str:
    """A short label for hit lists: 'prohibited (IFRA)', 'max 0.01 % cat. 4 (IFRA)', 'declare allergen (EU)'."""
    authority = entry.authority
    if entry.kind == "restricted":
        if entry.max_percent is None:
            return f"restricted ({authority})"
        level = f"max {entry.max_percent:g} %"
        return f"{level} {entry.product_category} ({authority})" if entry.product_category else f"{level} ({authority})"
    if entry.kind == "allergen":
        return f"declare allergen ({authority})"
    if entry.kind == "specification":
        return f"specification required ({authority})"
    return f"prohibited ({authority})"


def tags(material: Material) -> str:
    """Every entry's tag, separated by '; ' (empty when none is recorded)."""
    return "; ".join(tag(r) for r in material.restrictions)


def describe(entry: Restriction) -> str:
    """One line for `olibra restriction list` and `olibra show`."""
    parts = [f"#{entry.id}", tag(entry)]
    if entry.reference:
        parts.append(f"ref: {entry.reference}")
    if entry.decided_on:
        parts.append(f"dated {entry.decided_on.isoformat()}")
    parts.append(f"source: {Source(entry.source_kind, entry.source_reference)}")
    return "  ".join(parts)


def _sync_flag(material: Material) -> None:
    material.restricted = any(r.kind in BLOCKING_KINDS for r in material.restrictions)


def add_restriction(session: Session, material: Material, entry: RestrictionEntry, *,
                    actor: str | None = None) -> Restriction:
    """Store one entry (audited) and keep the material's restricted flag in step."""
    row = Restriction(kind=entry.kind, authority=entry.authority, reference=entry.reference,
                      max_percent=entry.max_percent, product_category=entry.product_category,
                      decided_on=entry.decided_on, source_kind=entry.source.kind,
                      source_reference=entry.source.reference)
    material.restrictions.append(row)
    _sync_flag(material)
    session.flush()
    audit(session, actor=actor or current_actor(), action="create", material=material,
          field_name="restriction", old=None, new=tag(row))
    return row


def remove_restriction(session: Session, restriction_id: int, *,
                       actor: str | None = None) -> tuple[Material, str]:
    """Delete one entry by its id (audited); returns its material and the removed entry's tag."""
    row = session.get(Restriction, restriction_id)
    if row is None:
        raise CurationError(f"no restriction entry #{restriction_id}; `olibra restriction list MATERIAL` "
                            "shows the ids")
    material = row.material
    material.restrictions.remove(row)
    _sync_flag(material)
    audit(session, actor=actor or current_actor(), action="delete", material=material,
          field_name="restriction", old=tag(row), new=None)
    return material, tag(row)


def set_flag(session: Session, material: Material, restricted: bool, *, actor: str | None = None) -> None:
    """`olibra status X restricted|unrestricted`: add an entry of kind 'restricted' with no details
    recorded, or remove every prohibited/restricted entry."""
    if restricted and not material.restricted:
        add_restriction(session, material, RestrictionEntry(
            kind="restricted", authority="not recorded", source=Source("from memory", "set with olibra status")),
            actor=actor)
    elif not restricted:
        for row in [r for r in material.restrictions if r.kind in BLOCKING_KINDS]:
            remove_restriction(session, row.id, actor=actor)


def as_records(material: Material) -> list[dict]:
    """The entries as plain mappings (the export format of every file kind)."""
    records = []
    for r in material.restrictions:
        record = {"kind": r.kind, "authority": r.authority}
        for key, value in (("max_percent", r.max_percent), ("category", r.product_category),
                           ("reference", r.reference),
                           ("date", r.decided_on.isoformat() if r.decided_on else None)):
            if value is not None:
                record[key] = value
        record["source"] = str(Source(r.source_kind, r.source_reference))
        records.append(record)
    return records


def to_text(material: Material) -> str:
    """The entries as one JSON array (the CSV column and SDF data item); empty when none."""
    records = as_records(material)
    return json.dumps(records, ensure_ascii=False, sort_keys=True) if records else ""


def from_records(records) -> list[RestrictionEntry]:
    """Check the entries of an imported row (a list of mappings, or its JSON text)."""
    if isinstance(records, str):
        if not records.strip():
            return []
        try:
            records = json.loads(records)
        except ValueError:
            raise CurationError("restrictions column is not a JSON array of entries "
                                "(e.g. [{\"kind\": \"prohibited\", \"authority\": \"IFRA Standards\"}])") from None
    if not isinstance(records, list) or not all(isinstance(r, dict) for r in records):
        raise CurationError("restrictions must be a list of entries, each with kind and authority")
    entries = []
    for record in records:
        unknown = sorted(set(record) - {"kind", "authority", "max_percent", "category", "reference", "date",
                                        "source"})
        if unknown:
            raise CurationError(f"restriction entry has unknown key(s) {', '.join(unknown)}")
        entries.append(check_entry(kind=record.get("kind"), authority=record.get("authority"),
                                   reference=record.get("reference"), max_percent=record.get("max_percent"),
                                   category=record.get("category"), date=record.get("date"),
                                   source=record.get("source")))
    return entries


def entries_of(session: Session, material: Material) -> list[Restriction]:
    return list(session.scalars(select(Restriction).where(Restriction.material_id == material.id)
                                .order_by(Restriction.id)))


def excluded(material: Material, *, prohibited: bool = False, restricted: bool = False) -> bool:
    """Whether --exclude-prohibited / --exclude-restricted leave this material out."""
    kinds = {r.kind for r in material.restrictions}
    return (prohibited and "prohibited" in kinds) or (restricted and bool(kinds & set(BLOCKING_KINDS)))


def tags_by_id(session: Session, material_ids) -> dict[int, str]:
    """{material id: tags} for the given ids (materials without entries are left out)."""
    ids = sorted({int(i) for i in material_ids})
    found: dict[int, list[str]] = {}
    if ids:
        for row in session.scalars(select(Restriction).where(Restriction.material_id.in_(ids))
                                   .order_by(Restriction.id)):
            found.setdefault(row.material_id, []).append(tag(row))
    return {material_id: "; ".join(texts) for material_id, texts in found.items()}
