"""`olibra restriction add|list|remove`: the restriction entries a curator records for a material."""

from __future__ import annotations

from library.catalogue import curation, restrictions
from library.catalogue.models import RESTRICTION_KINDS
from library.cli.catalogue_commands import open_catalogue
from library.cli.output import FORMATS, emit
from library.errors import OlibraError


def cmd_restriction(args) -> int:
    catalogue = open_catalogue(args)
    if args.action == "remove":
        if not args.target.lstrip("#").isdigit():
            raise OlibraError("give the entry's id to remove (`olibra restriction list MATERIAL` shows it)")
        with catalogue.transaction() as session:
            number = int(args.target.lstrip("#"))
            material, removed = restrictions.remove_restriction(session, number)
            print(f"removed restriction #{number} ({removed}) from #{material.id} {material.preferred_name}")
        return 0
    if args.action == "add":
        entry = restrictions.check_entry(kind=args.kind, authority=args.authority, reference=args.reference,
                                         max_percent=args.max_percent, category=args.category, date=args.date,
                                         source=args.source)
        with catalogue.transaction() as session:
            material = curation.find_material(session, args.target)
            row = restrictions.add_restriction(session, material, entry)
            print(f"#{material.id} {material.preferred_name}: {restrictions.describe(row)}")
        print(restrictions.DISCLAIMER)
        return 0
    with catalogue.reading() as session:
        material = curation.find_material(session, args.target)
        rows = [{"id": r.id, "kind": r.kind, "tag": restrictions.tag(r), "max_percent": r.max_percent,
                 "category": r.product_category, "authority": r.authority, "reference": r.reference,
                 "date": r.decided_on.isoformat() if r.decided_on else None,
                 "source": str(curation.Source(r.source_kind, r.source_reference))}
                for r in material.restrictions]
    emit(rows, ["id", "tag", "reference", "date", "source"] if args.format == "table"
         else ["id", "kind", "max_percent", "category", "authority", "reference", "date", "source"], args.format)
    if args.format == "table":
        print(f"{len(rows)} entr{'y' if len(rows) == 1 else 'ies'} for #{material.id} {material.preferred_name}. "
              + restrictions.DISCLAIMER)
    return 0


def register(commands) -> None:
    p = commands.add_parser("restriction")
    p.description = restrictions.DISCLAIMER
    p.add_argument("action", choices=("add", "list", "remove"))
    p.add_argument("target", help="the material (add, list) or the entry id (remove)")
    p.add_argument("--kind", choices=RESTRICTION_KINDS,
                   help="prohibited; restricted (needs --max-percent); specification (required); "
                        "allergen (to declare)")
    p.add_argument("--max-percent", help="maximum level in percent by mass")
    p.add_argument("--category", help="the product category the maximum level applies to")
    p.add_argument("--authority", help="authority or standard as text, e.g. 'IFRA Standards'")
    p.add_argument("--reference", help="where the entry is published (amendment, annex, standard number)")
    p.add_argument("--date", help="date of the entry, YYYY-MM-DD")
    p.add_argument("--source", default="from memory",
                   help="provenance of this entry: 'from memory' (default), 'literature: ...', ...")
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=_checked)


def _checked(args) -> int:
    if args.action == "add" and not (args.kind and args.authority):
        raise OlibraError("olibra restriction add MATERIAL needs --kind and --authority "
                          f"(kinds: {', '.join(RESTRICTION_KINDS)})")
    if args.action == "add" and args.kind == "restricted" and args.max_percent in (None, ""):
        raise OlibraError("a 'restricted' entry needs its maximum level: --max-percent LEVEL "
                          "(and --category for the product category it applies to)")
    return cmd_restriction(args)
