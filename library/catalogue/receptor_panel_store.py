"""Receptor panels stored in the catalogue, beside the built-in one (library.vibration.receptors).

Adding and removing a panel is audited (entity ``receptor_panel``). A panel is looked up by its
name, case-insensitively; the built-in panel's name is reserved.
"""

from __future__ import annotations

import json

from sqlalchemy import func, select

from library.catalogue.curation import current_actor
from library.catalogue.models import AuditEntry, StoredReceptorPanel
from library.errors import OlibraError
from library.vibration.receptors import PanelError, Receptor, ReceptorPanel, default_panel, make_panel

NAME_CHARACTERS = set("abcdefghijklmnopqrstuvwxyz0123456789-_.")
MAX_NAME_CHARS = 60


def _panel_of(row: StoredReceptorPanel) -> ReceptorPanel:
    receptors = tuple(Receptor(float(r["gap_ev"]), None if r.get("lambda_ev") is None else float(r["lambda_ev"]))
                      for r in json.loads(row.receptors_json))
    return ReceptorPanel(row.name, receptors, note=row.note or "")


def panels(session) -> list[ReceptorPanel]:
    """The built-in panel first, then every stored panel by name."""
    rows = session.scalars(select(StoredReceptorPanel).order_by(StoredReceptorPanel.name))
    return [default_panel(), *(_panel_of(r) for r in rows)]


def find_panel(session, name: str | None) -> ReceptorPanel:
    """The panel called `name` (the built-in panel when no name is given); OlibraError naming the choices."""
    wanted = (name or "").strip().lower()
    builtin = default_panel()
    if not wanted or wanted == builtin.name:
        return builtin
    row = session.scalar(select(StoredReceptorPanel).where(func.lower(StoredReceptorPanel.name) == wanted))
    if row is None:
        known = ", ".join(p.name for p in panels(session))
        raise OlibraError(f"no receptor panel named {name.strip()!r}; the panels are: {known}")
    return _panel_of(row)


def add_panel(session, name: str, gaps, *, unit: str = "ev", lambdas_ev=None, note: str | None = None,
              actor: str | None = None) -> ReceptorPanel:
    """Check and store a panel; OlibraError naming the problem (nothing is stored then)."""
    name = (name or "").strip().lower()
    if not name or len(name) > MAX_NAME_CHARS or not set(name) <= NAME_CHARACTERS:
        raise OlibraError(f"panel name {name!r} must be 1-{MAX_NAME_CHARS} lowercase letters, digits, "
                          "'-', '_' or '.'")
    if name == default_panel().name:
        raise OlibraError(f"{name!r} is the built-in panel; choose another name")
    if session.scalar(select(StoredReceptorPanel).where(func.lower(StoredReceptorPanel.name) == name)) is not None:
        raise OlibraError(f"a receptor panel named {name!r} already exists; remove it first to redefine it")
    try:
        panel = make_panel(name, gaps, unit=unit, lambdas_ev=lambdas_ev, note=(note or "").strip())
    except PanelError as exc:
        raise OlibraError(f"panel {name!r}: {exc}") from None
    receptors = [{"gap_ev": round(r.gap_ev, 6), "lambda_ev": r.lambda_ev} for r in panel.receptors]
    row = StoredReceptorPanel(name=name, receptors_json=json.dumps(receptors), note=panel.note or None,
                              created_by=(actor or current_actor())[:100])
    session.add(row)
    session.flush()
    session.add(AuditEntry(actor=row.created_by, action="add", entity="receptor_panel", entity_id=row.id,
                           field=None, old_value=None, new_value=f"{name}: {json.dumps(receptors)}"))
    return _panel_of(row)


def remove_panel(session, name: str, *, actor: str | None = None) -> None:
    wanted = (name or "").strip().lower()
    if wanted == default_panel().name:
        raise OlibraError(f"{wanted!r} is the built-in panel and cannot be removed")
    row = session.scalar(select(StoredReceptorPanel).where(func.lower(StoredReceptorPanel.name) == wanted))
    if row is None:
        raise OlibraError(f"no stored receptor panel named {(name or '').strip()!r}")
    session.add(AuditEntry(actor=(actor or current_actor())[:100], action="remove", entity="receptor_panel",
                           entity_id=row.id, field=None, old_value=f"{row.name}: {row.receptors_json}",
                           new_value=None))
    session.delete(row)
