"""User pair classes stored in the catalogue (name, reaction SMARTS, description)."""

from __future__ import annotations

from sqlalchemy import select

from library.catalogue.models import PairClassDefinition
from library.errors import OlibraError

NAME_CHARACTERS = "abcdefghijklmnopqrstuvwxyz0123456789-_"


def stored_classes(session) -> list[tuple[str, str, str | None]]:
    """(name, reaction SMARTS, description) of every stored class, by name."""
    rows = session.scalars(select(PairClassDefinition).order_by(PairClassDefinition.name))
    return [(r.name, r.reaction_smarts, r.description) for r in rows]


def add_class(session, name: str, reaction: str, description: str | None = None) -> None:
    """Store a class after checking its name and reaction SMARTS (OlibraError naming the problem)."""
    from library.search.pair_classes import PairClassError, builtin_classes, parse_reaction

    name = (name or "").strip().lower()
    if not name or any(ch not in NAME_CHARACTERS for ch in name) or len(name) > 60:
        raise OlibraError(f"pair class name {name!r} must be 1-60 lowercase letters, digits, '-' or '_'")
    if name in {c.name for c in builtin_classes()}:
        raise OlibraError(f"{name!r} is a built-in pair class; choose another name")
    if session.scalar(select(PairClassDefinition).where(PairClassDefinition.name == name)) is not None:
        raise OlibraError(f"a pair class named {name!r} already exists; remove it first to redefine it")
    try:
        parse_reaction(reaction, label=f"reaction of {name!r}")
    except PairClassError as exc:
        raise OlibraError(str(exc)) from None
    session.add(PairClassDefinition(name=name, reaction_smarts=reaction.strip(), description=description))


def remove_class(session, name: str) -> None:
    row = session.scalar(select(PairClassDefinition).where(PairClassDefinition.name == name))
    if row is None:
        raise OlibraError(f"no stored pair class named {name!r} (built-in classes cannot be removed)")
    session.delete(row)
