"""Adding, finding and editing materials; the odor vocabulary; the audit trail.

Every function here works inside a session the caller opened (one transaction
per user action); none commits on its own.
"""

from __future__ import annotations

import csv
import difflib
import datetime as dt
import getpass
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from sqlalchemy import func, or_, select
from sqlalchemy.orm import Session, selectinload

from library.catalogue.models import (
    MATERIAL_STATUSES,
    PROVENANCE_KINDS,
    AuditEntry,
    Material,
    MaterialOdor,
    OdorDescriptor,
    Provenance,
    Synonym,
)
from library.errors import OlibraError, Remedy
from library.seed_catalog import VOCABULARY_FILE
from library.structures import StandardStructure, check_cas, standardize

CURATED_FIELDS = ("structure", "preferred_name", "synonyms", "cas_rn", "olfactive_family", "notes")
MAX_NAME_CHARS = 200
MAX_FAMILY_CHARS = 40
MAX_NOTES_CHARS = 100_000


class CurationError(OlibraError, ValueError):
    """A curation request that cannot be carried out as given."""


ACTOR_VARIABLE = "OLIBRA_ACTOR"
class FieldErrors(CurationError):
    """Every problem found in one form's values, by field name, so a person fixes them all in one pass.

    `errors` maps the field names the caller used ('structure', 'name', 'cas', ...)
    to messages; the text of the exception lists them all."""

    def __init__(self, errors: dict[str, list[str]]):
        self.errors = {key: list(messages) for key, messages in errors.items() if messages}
        super().__init__("; ".join(f"{key}: {message}" for key, messages in self.errors.items()
                                   for message in messages))


class FieldChecker:
    """Runs one check per field, keeps every OlibraError message under its field, raises them together."""

    def __init__(self):
        self.errors: dict[str, list[str]] = {}

    def check(self, key: str, check, *args, **kwargs):
        """The value `check(*args, **kwargs)` returns, or None after recording its error under `key`."""
        try:
            return check(*args, **kwargs)
        except OlibraError as exc:
            self.add(key, str(exc))
            return None

    def add(self, key: str, message: str) -> None:
        self.errors.setdefault(key, []).append(message)

    def ok(self, *keys: str) -> bool:
        return not any(key in self.errors for key in keys)

    def raise_any(self) -> None:
        if self.errors:
            raise FieldErrors(self.errors)


def current_actor() -> str:
    """Who a write is attributed to when no signed-in user makes it: $OLIBRA_ACTOR (the CLI's --actor
    sets it), else the operating-system user."""
    named = (os.environ.get(ACTOR_VARIABLE) or "").strip()
    if named:
        return named[:100]
    try:
        return getpass.getuser()
    except Exception:  # no login name in some containers
        return "unknown"


@dataclass(frozen=True)
class Source:
    """Provenance of a value: kind (measured, literature, from memory, computed, demo) and reference."""

    kind: str
    reference: str | None = None

    @classmethod
    def parse(cls, text: str | None, *, default: str | None = None) -> Source | None:
        """Read 'from memory', 'demo', 'literature: J. Org. Chem. 12, 34 (1950)' and so on."""
        text = (text or "").strip() or (default or "")
        if not text:
            return None
        if any(ord(c) < 32 or ord(c) == 127 for c in text):
            raise CurationError(f"provenance {text[:40]!r} contains control characters (a line break, tab or NUL)")
        kind, _, reference = text.partition(":")
        kind = kind.strip().lower()
        if kind not in PROVENANCE_KINDS:
            raise CurationError(
                f"provenance {text!r} does not start with one of: {', '.join(PROVENANCE_KINDS)}")
        reference = reference.strip() or None
        if kind == "literature" and not looks_like_reference(reference):
            raise CurationError(
                f"literature provenance {reference[:60]!r} does not look like a published reference; write "
                "journal, volume, first page and year, e.g. 'literature: J. Agric. Food Chem. 50, 1 (2002)', "
                "or a DOI, e.g. 'literature: doi:10.1093/chemse/21.6.773'; for your own notes use "
                "'from memory' or 'measured: ...'" if reference else
                "literature provenance needs a reference, e.g. 'literature: J. Agric. Food Chem. 50, 1 (2002)'")
        return cls(kind, reference)

    def __str__(self) -> str:
        return f"{self.kind}: {self.reference}" if self.reference else self.kind


DOI_PATTERN = re.compile(r"\b10\.\d{4,9}/\S+")
YEAR_PATTERN = re.compile(r"\b(1[6-9]\d\d|20\d\d)\b")


def looks_like_reference(text: str | None) -> bool:
    """A DOI, or a journal name with a volume, a page and a year (e.g. 'Chem. Senses 21, 773 (1996)')."""
    text = (text or "").strip()
    if DOI_PATTERN.search(text):
        return True
    year = YEAR_PATTERN.search(text)
    if year is None:
        return False
    others = re.findall(r"\d+", text[:year.start()] + " " + text[year.end():])
    journal = re.match(r"\s*[^\W\d_][^\d]*", text)
    return len(others) >= 2 and journal is not None and sum(c.isalpha() for c in journal.group()) >= 2


@dataclass
class OdorAssignment:
    term: str
    strength: float | None = None


def parse_odor_list(text: str | None) -> list[OdorAssignment]:
    """Read 'citrus|green:0.6' (terms separated by '|', optional ':strength' in 0-1)."""
    assignments: list[OdorAssignment] = []
    seen: set[str] = set()
    for item in (text or "").split("|"):
        item = item.strip()
        if not item:
            continue
        term, _, strength_text = item.partition(":")
        term = term.strip().lower()
        strength = None
        if strength_text.strip():
            try:
                strength = float(strength_text)
            except ValueError:
                raise CurationError(f"odor strength {strength_text.strip()!r} of {term!r} is not a number") from None
            if not 0.0 <= strength <= 1.0:
                raise CurationError(f"odor strength {strength} of {term!r} is outside 0-1")
        if term in seen:
            raise CurationError(f"odor descriptor {term!r} is given twice")
        seen.add(term)
        assignments.append(OdorAssignment(term, strength))
    return assignments


def check_odor_terms(terms, vocabulary_terms, *, label: str, where: str) -> list[str]:
    """The terms, lower-cased, if each is in the odor vocabulary; otherwise a CurationError naming the
    unknown ones, close vocabulary terms and `where` the vocabulary is listed (the CLI and the web share it)."""
    terms = [str(t).strip().lower() for t in terms if str(t).strip()]
    unknown = [t for t in terms if t not in vocabulary_terms]
    if unknown:
        close = sorted({match for t in unknown for match in
                        difflib.get_close_matches(t[:60], sorted(vocabulary_terms), n=3, cutoff=0.6)})
        raise CurationError(f"{label}: {', '.join(repr(t[:40]) for t in unknown)} "
                            f"{'is' if len(unknown) == 1 else 'are'} not in the odor vocabulary; "
                            + (f"close terms: {', '.join(close)}; " if close else "") + f"use terms from {where}")
    return terms


def format_strength(strength: float) -> str:
    """A strength as short as it can be written and still be read back as the same number."""
    short = f"{strength:g}"
    return short if float(short) == strength else repr(float(strength))


def format_odor_list(odors: list[MaterialOdor]) -> str:
    parts = []
    for odor in sorted(odors, key=lambda o: o.descriptor.term):
        parts.append(odor.descriptor.term if odor.strength is None
                     else f"{odor.descriptor.term}:{format_strength(odor.strength)}")
    return "|".join(parts)


@dataclass
class MaterialDraft:
    """Everything needed to add a material, checked but not yet stored."""

    structure: StandardStructure
    preferred_name: str
    synonyms: list[str] = field(default_factory=list)
    cas_rn: str | None = None
    olfactive_family: str | None = None
    notes: str | None = None
    odors: list[OdorAssignment] = field(default_factory=list)
    sources: dict[str, Source] = field(default_factory=dict)
    odor_source: Source | None = None
    odor_sources: dict[str, Source] = field(default_factory=dict)  # per term, overriding odor_source
    status: str = "active"
    restricted: bool = False  # the former yes/no column; an entry 'restricted, not recorded' when no entries
    restrictions: list = field(default_factory=list)  # restrictions.RestrictionEntry
    components: list[str] = field(default_factory=list)  # keys of its recorded components (library.catalogue.mixtures)


def _clean_name(name: str | None, what: str) -> str:
    name = (name or "").strip()
    if not name:
        raise CurationError(f"{what} is empty; every material needs a name")
    if len(name) > MAX_NAME_CHARS:
        raise CurationError(f"{what} is {len(name)} characters long (limit {MAX_NAME_CHARS})")
    if any(ord(c) < 32 or ord(c) == 127 for c in name):
        raise CurationError(f"{what} {name[:40]!r} contains control characters (a line break, tab or NUL)")
    if what == "synonym" and "|" in name:
        raise CurationError(f"synonym {name[:40]!r} contains '|', which separates synonyms; "
                            "give each synonym on its own")
    return name


def clean_notes(notes: str | None) -> str | None:
    """Notes as stored: line breaks normalized to '\\n', no other control characters, ends stripped."""
    text = (notes or "").replace("\r\n", "\n").replace("\r", "\n").strip()
    if len(text) > MAX_NOTES_CHARS:
        raise CurationError(f"notes are {len(text)} characters long (limit {MAX_NOTES_CHARS})")
    bad = next((c for c in text if (ord(c) < 32 and c not in "\n\t") or ord(c) == 127), None)
    if bad is not None:
        raise CurationError(f"notes contain the control character {bad!r} (a NUL byte or similar); "
                            "remove it and try again")
    return text or None


def clean_family(family: str | None) -> str | None:
    text = (family or "").strip().lower()
    if len(text) > MAX_FAMILY_CHARS:
        raise CurationError(f"olfactive family {text[:40]!r}... is {len(text)} characters long "
                            f"(limit {MAX_FAMILY_CHARS})")
    if any(ord(c) < 32 or ord(c) == 127 for c in text):
        raise CurationError(f"olfactive family {text[:40]!r} contains control characters")
    return text or None


def name_clash(session: Session, names: list[str], *, exclude_id: int | None = None) -> str | None:
    """A message if any of `names` (a preferred name and synonyms) is another material's name or synonym.

    Compared without regard to case, as `find_material` looks names up."""
    lowered = {n.lower(): n for n in names}
    if not lowered:
        return None
    others = [] if exclude_id is None else [Material.id != exclude_id]
    row = session.execute(select(Material.id, Material.preferred_name).where(
        func.lower(Material.preferred_name).in_(list(lowered)), *others).limit(1)).first()
    if row is not None:
        name = lowered[row.preferred_name.lower()]
        return (f"{name!r} is already the name of #{row.id}; a name or synonym must point to one material, "
                "so choose another")
    others = [] if exclude_id is None else [Synonym.material_id != exclude_id]
    row = session.execute(select(Synonym.material_id, Synonym.name, Material.preferred_name).join(Material).where(
        func.lower(Synonym.name).in_(list(lowered)), *others).limit(1)).first()
    if row is not None:
        name = lowered[row.name.lower()]
        return (f"{name!r} is already a synonym of #{row.material_id} {row.preferred_name}; a name or synonym "
                "must point to one material, so choose another")
    return None


def draft_material(structure_text: str, *, name: str, synonyms: list[str] | None = None,
                   cas: str | None = None, family: str | None = None, notes: str | None = None,
                   odors: str | list[OdorAssignment] | None = None,
                   sources: dict[str, str | None] | None = None,
                   input_format: str | None = None, canonical_tautomer: bool = False,
                   max_heavy_atoms: int | None = None,
                   odor_sources: dict[str, str | None] | None = None) -> MaterialDraft:
    """Check every field of a new material; raise StructureError or CurationError on the first problem.

    `sources` maps a field ('structure', 'cas_rn', 'odor', 'preferred_name', ...)
    to provenance text; the structure and name default to 'from memory' only when
    the caller passes that default explicitly.
    """
    kwargs = {} if max_heavy_atoms is None else {"max_heavy_atoms": max_heavy_atoms}
    structure = standardize(structure_text, input_format=input_format,
                            canonical_tautomer=canonical_tautomer, **kwargs)
    draft = MaterialDraft(structure=structure, preferred_name=_clean_name(name, "name"))
    draft.synonyms = []
    for synonym in synonyms or []:
        synonym = _clean_name(synonym, "synonym")
        if synonym != draft.preferred_name and synonym not in draft.synonyms:
            draft.synonyms.append(synonym)
    draft.cas_rn = check_cas(cas) if cas and cas.strip() else None
    draft.olfactive_family = clean_family(family)
    draft.notes = clean_notes(notes)
    draft.odors = parse_odor_list(odors) if isinstance(odors, (str, type(None))) else list(odors)
    for key, text in (sources or {}).items():
        source = Source.parse(text)
        if source is None:
            continue
        if key == "odor":
            draft.odor_source = source
        else:
            draft.sources[key] = source
    terms = {o.term for o in draft.odors}
    for term, text in (odor_sources or {}).items():
        term = (term or "").strip().lower()
        if term not in terms:
            raise CurationError(f"a source is given for odor descriptor {term!r}, which the material does not have")
        source = Source.parse(text)
        if source is not None:
            draft.odor_sources[term] = source
    if any(o.term not in draft.odor_sources for o in draft.odors) and draft.odor_source is None:
        raise CurationError("odor descriptors need a source (e.g. 'from memory', 'measured: panel 2026-03')")
    if draft.cas_rn and "cas_rn" not in draft.sources:
        raise CurationError("a CAS RN needs a source (e.g. 'from memory' or 'literature: ...')")
    if "structure" not in draft.sources:
        raise CurationError("the structure needs a source (e.g. 'from memory' or 'literature: ...')")
    return draft


@dataclass(frozen=True)
class MaterialInput:
    """A new material's values as a person typed them in a form or sent them to the API."""

    structure: str = ""
    name: str = ""
    synonyms: list[str] = field(default_factory=list)
    cas: str = ""
    family: str = ""
    notes: str = ""
    odors: str = ""  # 'citrus:0.8|green' or with commas
    source: str = ""  # provenance of every value given; empty means 'from memory'


def check_new_material(session: Session, values: MaterialInput) -> tuple[MaterialDraft | None, Material | None]:
    """Check every field of a new material in one pass: (draft, None), or (None, existing material).

    The structure is read first and looked up by InChIKey: a structure already in
    the catalogue is reported before anything else (there is nothing to add).
    Otherwise every field is checked, including clashes with other materials'
    names, synonyms and CAS RNs and the odor vocabulary, and FieldErrors lists
    every problem under the field keys of MaterialInput ('structure', 'name', ...).
    """
    checker = FieldChecker()
    structure = checker.check("structure", standardize, values.structure or "")
    if structure is not None:
        existing = find_by_inchikey(session, structure.inchikey)
        if existing is not None:
            return None, existing
    name = checker.check("name", _clean_name, values.name, "name")
    synonyms: list[str] = []
    for synonym in values.synonyms:
        synonym = checker.check("synonyms", _clean_name, synonym, "synonym")
        if synonym and synonym != name and synonym not in synonyms:
            synonyms.append(synonym)
    cas = checker.check("cas", check_cas, values.cas) if (values.cas or "").strip() else None
    family = checker.check("family", clean_family, values.family)
    notes = checker.check("notes", clean_notes, values.notes)
    odors = checker.check("odors", parse_odor_list, (values.odors or "").replace(",", "|")) or []
    source = checker.check("source", Source.parse, values.source, default="from memory")
    if name and checker.ok("name"):
        message = name_clash(session, [name])
        if message:
            checker.add("name", message)
    if synonyms:
        message = name_clash(session, synonyms)
        if message:
            checker.add("synonyms", message)
    if cas:
        clash = session.scalar(select(Material).where(Material.cas_rn == cas))
        if clash is not None:
            checker.add("cas", f"CAS RN {cas} is already used by #{clash.id} {clash.preferred_name} "
                               "with a different structure; check the number or the structure")
    terms = vocabulary(session)
    unknown = [o.term for o in odors if o.term not in terms]
    if unknown:
        checker.add("odors", f"odor descriptor(s) {', '.join(unknown)} not in the vocabulary; use vocabulary "
                             "terms or add these to the vocabulary first")
    checker.raise_any()
    draft = MaterialDraft(structure=structure, preferred_name=name, synonyms=synonyms, cas_rn=cas,
                          olfactive_family=family, notes=notes, odors=odors, odor_source=source)
    draft.sources = {"structure": source, "preferred_name": source}
    if cas:
        draft.sources["cas_rn"] = source
    return draft, None


@dataclass(frozen=True)
class AddOutcome:
    material: Material
    added: bool  # False when the structure was already in the catalogue
    message: str


def find_by_inchikey(session: Session, inchikey: str) -> Material | None:
    return session.scalar(select(Material).where(Material.inchikey == inchikey))


def vocabulary(session: Session) -> dict[str, OdorDescriptor]:
    return {d.term: d for d in session.scalars(select(OdorDescriptor))}


def add_material(session: Session, draft: MaterialDraft, *, actor: str | None = None,
                 known_terms: dict[str, OdorDescriptor] | None = None) -> AddOutcome:
    """Store a checked draft, or report the existing material with the same InChIKey."""
    actor = actor or current_actor()
    existing = find_by_inchikey(session, draft.structure.inchikey)
    if existing is not None and draft.cas_rn and existing.cas_rn != draft.cas_rn:
        holder = session.scalar(select(Material).where(Material.cas_rn == draft.cas_rn))
        if holder is not None:
            raise CurationError(
                f"conflict: the structure is #{existing.id} {existing.preferred_name} but CAS RN {draft.cas_rn} "
                f"belongs to #{holder.id} {holder.preferred_name}; check the number or the structure")
    if existing is not None:
        return AddOutcome(existing, False,
                          f"already present as #{existing.id} {existing.preferred_name} "
                          f"(InChIKey {existing.inchikey})")
    clash = session.scalar(select(Material).where(
        func.lower(Material.preferred_name) == draft.preferred_name.lower()))
    if clash is not None:
        raise CurationError(
            f"name {draft.preferred_name!r} is already used by #{clash.id} with a different structure "
            f"({clash.smiles}); choose another name")
    message = name_clash(session, [draft.preferred_name, *draft.synonyms])
    if message:
        raise CurationError(message)
    if draft.cas_rn:
        clash = session.scalar(select(Material).where(Material.cas_rn == draft.cas_rn))
        if clash is not None:
            raise CurationError(
                f"CAS RN {draft.cas_rn} is already used by #{clash.id} {clash.preferred_name} "
                "with a different structure; check the number or the structure")
    terms = known_terms if known_terms is not None else vocabulary(session)
    unknown = [o.term for o in draft.odors if o.term not in terms]
    if unknown:
        raise CurationError(
            f"odor descriptor(s) {', '.join(unknown)} not in the vocabulary; use vocabulary terms or add "
            "these to the vocabulary first", remedy=Remedy.VOCABULARY)
    if draft.status not in MATERIAL_STATUSES:
        raise CurationError(f"status {draft.status!r} is not one of {', '.join(MATERIAL_STATUSES)}")
    s = draft.structure
    material = Material(
        preferred_name=draft.preferred_name, cas_rn=draft.cas_rn, smiles=s.smiles, molfile=s.molfile,
        inchi=s.inchi, inchikey=s.inchikey, formula=s.formula,
        average_mass_g_per_mol=s.average_mass, monoisotopic_mass_da=s.monoisotopic_mass,
        heavy_atom_count=s.heavy_atom_count, stereo_status=s.stereo_status,
        unassigned_stereo_count=s.unassigned_stereo_count,
        olfactive_family=draft.olfactive_family, notes=draft.notes, status=draft.status,
        restricted=False,
    )
    material.synonyms = [Synonym(name=n) for n in draft.synonyms]
    material.provenance = [Provenance(field=f, kind=src.kind, reference=src.reference)
                           for f, src in sorted(draft.sources.items())]
    def odor_row(o: OdorAssignment) -> MaterialOdor:
        source = draft.odor_sources.get(o.term) or draft.odor_source or Source("from memory")
        return MaterialOdor(descriptor=terms[o.term], strength=o.strength,
                            source_kind=source.kind, source_reference=source.reference)
    material.odors = [odor_row(o) for o in draft.odors]
    session.add(material)
    session.flush()
    session.add(AuditEntry(actor=actor, action="create", entity="material", entity_id=material.id,
                           new_value=f"{material.preferred_name} {material.smiles}"))
    from library.catalogue import restrictions  # restrictions builds on this module

    for entry in draft.restrictions:
        restrictions.add_restriction(session, material, entry, actor=actor)
    if draft.restricted and not material.restricted:
        restrictions.set_flag(session, material, True, actor=actor)
    return AddOutcome(material, True, f"added #{material.id} {material.preferred_name}")


def find_material(session: Session, key: str) -> Material:
    """Find one material by id ('12' or '#12'), name, synonym, CAS RN or InChIKey (case-insensitive)."""
    key = (key or "").strip()
    if not key:
        raise CurationError("give a material: id, name, synonym, CAS RN or InChIKey")
    options = selectinload(Material.synonyms), selectinload(Material.odors).selectinload(MaterialOdor.descriptor), \
        selectinload(Material.provenance)
    number = key[1:] if key.startswith("#") else key
    if number.isdigit():
        found = session.get(Material, int(number), options=options)
        if found is not None:
            return found
    lowered = key.lower()
    candidates = session.scalars(
        select(Material).options(*options).where(or_(
            func.lower(Material.preferred_name) == lowered,
            Material.cas_rn == key,
            Material.inchikey == key.upper(),
            Material.id.in_(select(Synonym.material_id).where(func.lower(Synonym.name) == lowered)),
        ))).unique().all()
    if len(candidates) == 1:
        return candidates[0]
    if len(candidates) > 1:
        names = ", ".join(f"#{m.id} {m.preferred_name}" for m in candidates)
        raise CurationError(f"{key!r} matches several materials ({names}); use the id")
    raise CurationError(f"no material matches {key!r}; check the name, synonym, CAS RN, InChIKey or id",
                        remedy=Remedy.FIND_MATERIAL)


def audit(session: Session, *, actor: str, action: str, material: Material, field_name: str,
          old, new) -> None:
    session.add(AuditEntry(actor=actor, action=action, entity="material", entity_id=material.id,
                           field=field_name, old_value=None if old is None else str(old),
                           new_value=None if new is None else str(new)))


@dataclass(frozen=True)
class HistoryPage:
    entries: list[AuditEntry]
    total: int
    page: int
    per_page: int

    @property
    def pages(self) -> int:
        return max(1, -(-self.total // self.per_page))


def _day(text: str | None, what: str) -> dt.date | None:
    text = (text or "").strip()
    if not text:
        return None
    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        raise CurationError(f"{what} date {text[:20]!r} is not a date of the form YYYY-MM-DD (e.g. 2026-03-01)") from None


def change_history(session: Session, *, actor: str | None = None, since: str | None = None,
                   until: str | None = None, material: str | None = None, page: int = 1,
                   per_page: int = 100) -> HistoryPage:
    """The catalogue-wide audit trail, newest first, filtered by who, from/until which day (UTC,
    inclusive, YYYY-MM-DD) and which material (any key find_material accepts; its own changes)."""
    conditions = []
    if (actor or "").strip():
        conditions.append(func.lower(AuditEntry.actor) == actor.strip().lower())
    first, last = _day(since, "from"), _day(until, "until")
    if first and last and first > last:
        raise CurationError(f"the from date {first} is after the until date {last}; swap them")
    if first:
        conditions.append(AuditEntry.at >= dt.datetime.combine(first, dt.time(), dt.timezone.utc))
    if last:
        conditions.append(AuditEntry.at < dt.datetime.combine(last + dt.timedelta(days=1), dt.time(),
                                                              dt.timezone.utc))
    if (material or "").strip():
        found = find_material(session, material)
        conditions += [AuditEntry.entity == "material", AuditEntry.entity_id == found.id]
    if page < 1 or not 1 <= per_page <= 500:
        raise CurationError("page must be 1 or more and per_page from 1 to 500")
    total = session.scalar(select(func.count()).select_from(AuditEntry).where(*conditions)) or 0
    entries = list(session.scalars(select(AuditEntry).where(*conditions).order_by(AuditEntry.id.desc())
                                   .offset((page - 1) * per_page).limit(per_page)))
    return HistoryPage(entries, total, page, per_page)


def set_status(session: Session, material: Material, status: str, *, actor: str | None = None) -> None:
    if status not in MATERIAL_STATUSES:
        raise CurationError(f"status {status!r} is not one of {', '.join(MATERIAL_STATUSES)}")
    if material.status != status:
        audit(session, actor=actor or current_actor(), action="update", material=material,
              field_name="status", old=material.status, new=status)
        material.status = status


def set_restricted(session: Session, material: Material, restricted: bool, *, actor: str | None = None) -> None:
    """Restricted: record an entry 'restricted, details not recorded'; unrestricted: remove the prohibited
    and restricted entries (both audited)."""
    from library.catalogue import restrictions  # restrictions builds on this module

    restrictions.set_flag(session, material, restricted, actor=actor)


def add_descriptor(session: Session, term: str, *, family: str | None = None,
                   description: str | None = None, actor: str | None = None) -> OdorDescriptor:
    term = (term or "").strip().lower()
    if not term or len(term) > 60 or any(c in term for c in "|:,"):
        raise CurationError(f"odor descriptor {term!r} must be 1-60 characters without '|', ':' or ','")
    existing = session.scalar(select(OdorDescriptor).where(OdorDescriptor.term == term))
    if existing is not None:
        return existing
    descriptor = OdorDescriptor(term=term, family=(family or "").strip().lower() or None,
                                description=(description or "").strip() or None)
    session.add(descriptor)
    session.flush()
    session.add(AuditEntry(actor=actor or current_actor(), action="create", entity="odor_descriptor",
                           entity_id=descriptor.id, new_value=term))
    return descriptor


def load_vocabulary(session: Session, path: Path = VOCABULARY_FILE) -> int:
    """Add the terms of a vocabulary CSV (term,family,description) not yet present; returns how many."""
    if not path.exists():
        return 0
    known = vocabulary(session)
    added = 0
    with path.open(encoding="utf-8", newline="") as handle:
        for row in csv.DictReader(handle):
            term = (row.get("term") or "").strip().lower()
            if term and term not in known:
                known[term] = add_descriptor(session, term, family=row.get("family"),
                                             description=row.get("description"), actor="olibra init")
                added += 1
    return added
