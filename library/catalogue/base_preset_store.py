"""Base presets in the catalogue: the built-in ones (library.functional_groups, common practice, no
source) and curators' own, stored and audited. A stored preset with a built-in preset's name is the
curators' version of it and replaces it; removing that version brings the built-in one back."""

from __future__ import annotations

import datetime as dt
import json

from sqlalchemy import func, select

from library import functional_groups
from library.catalogue.curation import current_actor
from library.catalogue.models import AuditEntry, StoredBasePreset
from library.errors import OlibraError

MAX_NAME_CHARS = 60


def presets(session) -> list[functional_groups.BasePreset]:
    """Every preset in effect: the built-in ones (or the curators' versions of them), then curators' own."""
    stored = {row.name.lower(): row for row in session.scalars(select(StoredBasePreset).order_by(StoredBasePreset.name))}
    out = []
    for builtin in functional_groups.builtin_presets():
        row = stored.pop(builtin.name.lower(), None)
        out.append(builtin if row is None else _preset_of(row, builtin=True))
    return out + [_preset_of(row, builtin=False) for row in stored.values()]


def _preset_of(row: StoredBasePreset, *, builtin: bool) -> functional_groups.BasePreset:
    return functional_groups.BasePreset(row.name, tuple(json.loads(row.groups_json)), row.why or "", row.source,
                                        builtin=builtin, edited=True)


def groups_of(session, names) -> list[str]:
    """The groups to avoid for the presets `names` (OlibraError naming an unknown preset)."""
    known = presets(session)
    try:
        return [g for name in names or () if (name or "").strip()
                for g in functional_groups.find_preset(known, name).groups]
    except functional_groups.GroupError as exc:
        raise OlibraError(str(exc)) from None


def save_preset(session, name: str, groups, *, why: str | None = None, source: str | None = None,
                actor: str | None = None) -> functional_groups.BasePreset:
    """Store a preset, or replace the stored or built-in one of that name; audited with the old and new groups."""
    name = " ".join((name or "").split())
    if not name or len(name) > MAX_NAME_CHARS:
        raise OlibraError(f"a base preset needs a name of 1-{MAX_NAME_CHARS} characters, e.g. 'hypochlorite bleach'")
    try:
        checked = functional_groups.checked_groups(groups)
    except functional_groups.GroupError as exc:
        raise OlibraError(f"base preset {name!r}: {exc}") from None
    actor = (actor or current_actor())[:100]
    before = next((p for p in presets(session) if p.name.lower() == name.lower()), None)
    row = session.scalar(select(StoredBasePreset).where(func.lower(StoredBasePreset.name) == name.lower()))
    if row is None:
        row = StoredBasePreset(name=before.name if before else name)
        session.add(row)
    row.groups_json = json.dumps(list(checked))
    row.why = (why or "").strip() or (before.why if before else None)
    row.source = (source or "").strip()[:500] or functional_groups.PRESET_SOURCE
    row.updated_by = actor
    row.updated_at = dt.datetime.now(dt.timezone.utc)
    session.flush()
    session.add(AuditEntry(actor=actor, action="save", entity="base_preset", entity_id=row.id, field=row.name,
                           old_value=", ".join(before.groups) if before else None, new_value=", ".join(checked)))
    return _preset_of(row, builtin=row.name.lower() in {p.name.lower() for p in functional_groups.builtin_presets()})


def remove_preset(session, name: str, *, actor: str | None = None) -> bool:
    """Remove a stored preset; True when a built-in preset of that name is back in effect."""
    row = session.scalar(select(StoredBasePreset).where(func.lower(StoredBasePreset.name) == (name or "").strip().lower()))
    if row is None:
        raise OlibraError(f"no stored base preset named {(name or '').strip()!r} "
                          "(the built-in presets can be edited, not removed)")
    restored = row.name.lower() in {p.name.lower() for p in functional_groups.builtin_presets()}
    session.add(AuditEntry(actor=(actor or current_actor())[:100], action="remove", entity="base_preset",
                           entity_id=row.id, field=row.name, old_value=", ".join(json.loads(row.groups_json)),
                           new_value=None))
    session.delete(row)
    return restored
