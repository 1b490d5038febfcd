"""Catalogue commands: init, add, show, list, import, export, vocabulary, status."""

from __future__ import annotations

import json
import sys
from pathlib import Path

from sqlalchemy import func, select
from sqlalchemy.orm import selectinload

from library import functional_groups
from library.catalogue import curation, records, restrictions, transfer
from library.catalogue.database import Catalogue, describe_url, initialize, resolve_url
from library.catalogue.models import (
    AuditEntry,
    ComputedRecord,
    Material,
    MaterialOdor,
    OdorDescriptor,
    PairFlag,
)
from library.cli.output import FORMATS, emit, progress_bar
from library.errors import OlibraError
from library.stamps import current_stamps

PROGRESS_MIN_ROWS = 20


def open_catalogue(args) -> Catalogue:
    return Catalogue(resolve_url(args.db, here=args.here))


def cmd_init(args) -> int:
    url = resolve_url(args.db, here=args.here)
    catalogue = initialize(url)
    with catalogue.transaction() as session:
        added = curation.load_vocabulary(session)
    print(f"catalogue ready at {describe_url(url)} (schema at the newest revision; "
          f"{added} odor descriptor(s) added to the vocabulary)")
    catalogue.dispose()
    return 0


def cmd_add(args) -> int:
    catalogue = open_catalogue(args)
    draft = curation.draft_material(
        args.structure, name=args.name, synonyms=args.synonym, cas=args.cas, family=args.family,
        notes=args.notes, odors="|".join(args.odor or []), canonical_tautomer=args.canonical_tautomer,
        max_heavy_atoms=args.max_heavy_atoms,
        sources={"structure": args.source, "cas_rn": args.source if args.cas else None,
                 "odor": args.source if args.odor else None, "preferred_name": args.source})
    with catalogue.transaction() as session:
        outcome = curation.add_material(session, draft)
    for note in draft.structure.notes:
        print(f"note: {note}")
    print(outcome.message)
    return 0 if outcome.added else 1


def _provenance_text(kind: str, reference: str | None) -> str:
    return f"{kind}: {reference}" if reference else kind


def cmd_show(args) -> int:
    catalogue = open_catalogue(args)
    with catalogue.reading() as session:
        m = curation.find_material(session, args.key)
        fields = transfer.material_fields(m)
        lines = [
            f"#{m.id}  {m.preferred_name}" + ("  [retired]" if m.status == "retired" else "")
            + ("  [restricted]" if m.restricted else ""),
            *[f"  restriction     {restrictions.describe(r)}" for r in m.restrictions],
            *([f"                  {restrictions.DISCLAIMER}"] if m.restrictions else []),
            f"  synonyms        {', '.join(s.name for s in m.synonyms) or '-'}",
            f"  CAS RN          {m.cas_rn or '-'}",
            f"  SMILES          {m.smiles}",
            f"  InChI           {m.inchi}",
            f"  InChIKey        {m.inchikey}",
            f"  formula         {m.formula}",
            f"  average mass    {m.average_mass_g_per_mol:.4f} g/mol",
            f"  monoisotopic    {m.monoisotopic_mass_da:.6f} Da",
            f"  heavy atoms     {m.heavy_atom_count}",
            f"  stereo          {m.stereo_status}"
            + (f" ({m.unassigned_stereo_count} unassigned: treated as a mixture of stereoisomers)"
               if m.unassigned_stereo_count else ""),
            f"  family          {m.olfactive_family or '-'}",
            f"  groups          {', '.join(functional_groups.groups_of(m.smiles)) or '-'}",
            f"  odor            {fields['odor'].replace('|', ', ') or '-'}"
            + (f"  ({fields['odor_source']})" if fields["odor"] else ""),
        ]
        for p in m.provenance:
            lines.append(f"  source of {p.field:<14}{_provenance_text(p.kind, p.reference)}")
        from library.catalogue import mixtures

        for label, linked in (("components", mixtures.components_of(session, m.id)),
                              ("component of", mixtures.mixtures_of(session, m.id))):
            if linked:
                lines.append(f"  {label:<16}{', '.join(f'#{c.id} {c.preferred_name}' for c in linked)}")
        if m.notes:
            lines.append(f"  notes           {m.notes}")
        stamps = current_stamps()
        for record in session.scalars(select(ComputedRecord).where(ComputedRecord.material_id == m.id)
                                      .order_by(ComputedRecord.kind, ComputedRecord.engine_name)):
            stamp = stamps.get((record.kind, record.engine_name))
            state = ("  [engine not installed]" if stamp is None
                     else "" if records.is_current(record, stamp, m.inchikey) else "  [stale: run olibra compute]")
            lines.append(f"  {record.kind:<15} {record.engine_name} {record.engine_version} "
                         f"(computed {record.computed_at:%Y-%m-%d %H:%M})" + state)
            lines.extend(f"    {line}" for line in summary_lines(json.loads(record.summary_json or "{}")))
        flags = session.scalars(select(PairFlag).where(
            (PairFlag.material_a_id == m.id) | (PairFlag.material_b_id == m.id))).all()
        for flag in flags:
            other = flag.material_b if flag.material_a_id == m.id else flag.material_a
            lines.append(f"  pair flag       {flag.kind} with #{other.id} {other.preferred_name}"
                         + (f": {flag.note}" if flag.note else ""))
        if args.history:
            entries = session.scalars(select(AuditEntry).where(
                AuditEntry.entity == "material", AuditEntry.entity_id == m.id).order_by(AuditEntry.id)).all()
            for e in entries:
                change = (f"{e.field}: {_readable(e.old_value)} -> {_readable(e.new_value)}" if e.field
                          else (e.new_value or ""))
                lines.append(f"  history         {e.at:%Y-%m-%d %H:%M} {e.actor} {e.action} {change}")
    print("\n".join(lines))
    return 0


def _readable(value: str | None) -> str:
    """An audited value as a person reads it: '(none)' for nothing, 'yes'/'no' for flags."""
    if value is None or value == "":
        return "(none)"
    return {"True": "yes", "False": "no"}.get(value, repr(value) if value != value.strip() else value)


def summary_lines(summary: dict) -> list[str]:
    """A computed record's summary as short 'name  value' lines."""
    items = records.summary_items(summary)
    width = max((len(label) for label, _ in items), default=0) + 2
    return [f"{label:<{width}}{text}" for label, text in items]


def cmd_list(args) -> int:
    catalogue = open_catalogue(args)
    with catalogue.reading() as session:
        query = select(Material).options(
            selectinload(Material.odors).selectinload(MaterialOdor.descriptor)).order_by(Material.id)
        if not args.all:
            query = query.where(Material.status == "active")
        if args.family:
            query = query.where(Material.olfactive_family == args.family.lower())
        if args.odor:
            query = query.where(Material.id.in_(
                select(MaterialOdor.material_id).join(OdorDescriptor)
                .where(OdorDescriptor.term == args.odor.lower())))
        query = query.options(selectinload(Material.restrictions))
        materials = [m for m in session.scalars(query)
                     if not restrictions.excluded(m, prohibited=args.exclude_prohibited,
                                                  restricted=args.exclude_restricted)]
        rows = [{"id": m.id, "name": m.preferred_name, "cas": m.cas_rn, "formula": m.formula,
                 "mass": m.average_mass_g_per_mol, "family": m.olfactive_family,
                 "odor": ", ".join(sorted(o.descriptor.term for o in m.odors)), "status": m.status,
                 "regulatory": restrictions.tags(m)}
                for m in materials]
    emit(rows, ["id", "name", "cas", "formula", "mass", "family", "odor", "status", "regulatory"], args.format)
    if args.format == "table":
        print(f"{len(rows)} material(s)")
        if any(row["regulatory"] for row in rows):
            print(restrictions.DISCLAIMER)
    return 0


def cmd_import(args) -> int:
    catalogue = open_catalogue(args)
    rows = transfer.read_rows(args.file)
    bar = progress_bar(len(rows), "importing", unit="row",
                       enabled=len(rows) >= PROGRESS_MIN_ROWS and not args.quiet)
    report = transfer.import_into(catalogue, rows, keep_good=args.keep_good,
                                  max_heavy_atoms=args.max_heavy_atoms,
                                  canonical_tautomer=args.canonical_tautomer,
                                  default_structure_source=args.structure_source, progress=bar.update)
    bar.close()
    shown = report.rows if args.verbose else [r for r in report.rows if r.status != "added"]
    if not args.quiet:
        for r in shown:
            print(f"row {r.row}: {r.status}: {r.name}: {r.message}")
    print(report.summary() + (" (--keep-good stores the good rows)" if report.rejected and not report.committed
                              else ""))
    return 0 if not report.rejected else 1


def cmd_export(args) -> int:
    catalogue = open_catalogue(args)
    with catalogue.reading() as session:
        chunks = transfer.export_materials(session, args.format, include_retired=not args.active_only)
        if args.out:
            target = Path(args.out)
            temporary = target.with_name(target.name + ".part")
            try:
                with temporary.open("w", encoding="utf-8", newline="") as handle:
                    for chunk in chunks:
                        handle.write(chunk)
            except OSError as exc:
                raise OlibraError(f"cannot write {target}: {exc.strerror}") from None
            temporary.replace(target)
            print(f"wrote {target}", file=sys.stderr)
        else:
            for chunk in chunks:
                sys.stdout.write(chunk)
    return 0


def cmd_vocabulary(args) -> int:
    catalogue = open_catalogue(args)
    if args.action == "add":
        with catalogue.transaction() as session:
            descriptor = curation.add_descriptor(session, args.term, family=args.family,
                                                 description=args.description)
            print(f"odor descriptor {descriptor.term!r} is in the vocabulary")
        return 0
    with catalogue.reading() as session:
        counts = dict(session.execute(select(MaterialOdor.descriptor_id, func.count())
                                      .group_by(MaterialOdor.descriptor_id)).all())
        rows = [{"term": d.term, "family": d.family, "materials": counts.get(d.id, 0),
                 "description": d.description}
                for d in session.scalars(select(OdorDescriptor).order_by(OdorDescriptor.term))]
    emit(rows, ["term", "family", "materials", "description"], args.format, max_width=70)
    return 0


def cmd_status(args) -> int:
    catalogue = open_catalogue(args)
    with catalogue.transaction() as session:
        material = curation.find_material(session, args.key)
        if args.set in ("active", "retired"):
            curation.set_status(session, material, args.set)
        else:
            curation.set_restricted(session, material, args.set == "restricted")
        print(f"#{material.id} {material.preferred_name}: {material.status}"
              + (", restricted" if material.restricted else ""))
    return 0


def cmd_components(args) -> int:
    from library.catalogue import mixtures

    catalogue = open_catalogue(args)
    with catalogue.transaction() as session:
        mixture = curation.find_material(session, args.mixture)
        if args.component or args.clear:
            found = mixtures.set_components(session, mixture, [] if args.clear else args.component)
        else:
            found = mixtures.components_of(session, mixture.id)
        listed = ", ".join(f"#{c.id} {c.preferred_name}" for c in found) or "none recorded"
        print(f"#{mixture.id} {mixture.preferred_name}: components {listed}")
    return 0


def register(commands) -> None:
    p = commands.add_parser("components")
    p.add_argument("mixture", help="the mixture (id, name, synonym, CAS RN or InChIKey)")
    p.add_argument("component", nargs="*", help="its components; they replace the recorded ones (none: list them)")
    p.add_argument("--clear", action="store_true", help="record that it has no components")
    p.set_defaults(handler=cmd_components)

    p = commands.add_parser("init")
    p.set_defaults(handler=cmd_init)

    p = commands.add_parser("add")
    p.add_argument("structure", help="SMILES, InChI, or a path to a molfile")
    p.add_argument("--name", required=True, help="preferred name")
    p.add_argument("--cas", help="CAS Registry Number (check digit verified)")
    p.add_argument("--odor", nargs="*", metavar="TERM", help="odor descriptors, e.g. citrus green:0.5")
    p.add_argument("--synonym", action="append", default=[], help="a synonym (repeatable)")
    p.add_argument("--family", help="olfactive family, e.g. citrus, woody")
    p.add_argument("--notes", help="free text")
    p.add_argument("--source", default="from memory",
                   help="provenance of the values given: 'from memory' (default), 'measured: ...', "
                        "'literature: J. ... (year)', 'demo'")
    p.add_argument("--canonical-tautomer", action="store_true", help="store RDKit's canonical tautomer")
    p.add_argument("--max-heavy-atoms", type=int, default=None, help="heavy-atom limit (default 60)")
    p.set_defaults(handler=_add_with_file)

    p = commands.add_parser("show")
    p.add_argument("key")
    p.add_argument("--history", action="store_true", help="include the audit trail")
    p.set_defaults(handler=cmd_show)

    p = commands.add_parser("list")
    p.add_argument("--all", action="store_true", help="include retired materials")
    p.add_argument("--family", help="only this olfactive family")
    p.add_argument("--odor", help="only materials with this odor descriptor")
    p.add_argument("--exclude-prohibited", action="store_true",
                   help="leave out materials with a recorded 'prohibited' entry")
    p.add_argument("--exclude-restricted", action="store_true",
                   help="leave out materials with a recorded 'prohibited' or 'restricted' entry")
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=cmd_list)

    p = commands.add_parser("import")
    p.add_argument("file")
    p.add_argument("--keep-good", action="store_true",
                   help="store the good rows even when some rows are rejected")
    p.add_argument("--verbose", action="store_true", help="also list every added row")
    p.add_argument("--quiet", action="store_true", help="print only the summary")
    p.add_argument("--structure-source", metavar="PROVENANCE",
                   help="provenance for rows without a structure_source column value, "
                        "e.g. 'from memory' or 'measured: in-house NMR'")
    p.add_argument("--canonical-tautomer", action="store_true")
    p.add_argument("--max-heavy-atoms", type=int, default=None)
    p.set_defaults(handler=cmd_import)

    p = commands.add_parser("export")
    p.add_argument("--format", choices=("csv", "sdf", "json"), default="csv")
    p.add_argument("--out", help="file to write (default: standard output)")
    p.add_argument("--active-only", action="store_true", help="leave out retired materials")
    p.set_defaults(handler=cmd_export)

    p = commands.add_parser("vocabulary")
    p.add_argument("action", choices=("list", "add"))
    p.add_argument("term", nargs="?")
    p.add_argument("--family")
    p.add_argument("--description")
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=_vocabulary_checked)

    p = commands.add_parser("status")
    p.add_argument("key")
    p.add_argument("set", choices=("active", "retired", "restricted", "unrestricted"))
    p.set_defaults(handler=cmd_status)


def _add_with_file(args) -> int:
    candidate = Path(args.structure)
    if args.structure.endswith((".mol", ".sdf", ".mdl")) or (len(args.structure) < 4096 and candidate.exists()):
        data = transfer.read_file_bytes(candidate, "a molfile", limit=2**20)
        if b"\x00" in data:
            raise OlibraError(f"{candidate} contains a NUL byte; it is not a molfile (give a text molfile)")
        try:
            args.structure = data.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise OlibraError(f"{candidate} is not UTF-8 text (byte {exc.start}); save it as UTF-8") from None
    return cmd_add(args)


def _vocabulary_checked(args) -> int:
    if args.action == "add" and not args.term:
        raise OlibraError("give the term to add: olibra vocabulary add TERM [--family F]")
    return cmd_vocabulary(args)
