"""Recorded mixtures: a catalogue material made of other catalogue materials (citral of geranial and
neral, say). Substitute lists leave a mixture's components, and the mixtures a material is part of,
out of its shortlist like its own stereoisomers (library.search.substitutes). Changes are audited."""

from __future__ import annotations

from sqlalchemy import delete, select

from library.catalogue.curation import CurationError, audit, current_actor, find_material
from library.catalogue.models import Material, MaterialComponent


def components_of(session, material_id: int) -> list[Material]:
    """The recorded components of a mixture, by id."""
    return list(session.scalars(select(Material).join(MaterialComponent, MaterialComponent.component_id == Material.id)
                                .where(MaterialComponent.mixture_id == material_id).order_by(Material.id)))


def mixtures_of(session, material_id: int) -> list[Material]:
    """The recorded mixtures a material is a component of, by id."""
    return list(session.scalars(select(Material).join(MaterialComponent, MaterialComponent.mixture_id == Material.id)
                                .where(MaterialComponent.component_id == material_id).order_by(Material.id)))


def component_links(session) -> dict[int, tuple[int, ...]]:
    """{mixture id: its component ids} for every recorded mixture."""
    links: dict[int, list[int]] = {}
    for mixture, component in session.execute(select(MaterialComponent.mixture_id, MaterialComponent.component_id)
                                              .order_by(MaterialComponent.mixture_id, MaterialComponent.component_id)):
        links.setdefault(mixture, []).append(component)
    return {m: tuple(c) for m, c in links.items()}


def set_components(session, mixture: Material, keys, *, actor: str | None = None) -> list[Material]:
    """Record the components of `mixture` (any keys find_material accepts; none clears them). Every key is
    checked first: CurationError lists each one that names no material, the mixture itself or a repeat."""
    problems, components = [], []
    for key in keys or ():
        try:
            found = find_material(session, key)
        except CurationError as exc:
            problems.append(str(exc))
            continue
        if found.id == mixture.id:
            problems.append(f"{key!r} is the mixture itself")
        elif found.id in {c.id for c in components}:
            problems.append(f"{key!r} is given twice (#{found.id} {found.preferred_name})")
        else:
            components.append(found)
    if problems:
        raise CurationError("; ".join(problems))
    before = components_of(session, mixture.id)
    session.execute(delete(MaterialComponent).where(MaterialComponent.mixture_id == mixture.id))
    session.add_all(MaterialComponent(mixture_id=mixture.id, component_id=c.id) for c in components)

    def names(materials):
        return ", ".join(f"#{m.id} {m.preferred_name}" for m in materials) or None
    if names(before) != names(components):
        audit(session, actor=actor or current_actor(), action="edit", material=mixture, field_name="components",
              old=names(before), new=names(components))
    return components
