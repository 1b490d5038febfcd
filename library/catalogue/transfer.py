"""Bulk import (CSV, SDF) and export (CSV, SDF, JSON) of materials.

CSV columns (header row, UTF-8, any order, case-insensitive):

    name (required), smiles or inchi (one required), synonyms ('|'-separated),
    cas, formula (checked against the structure when given), family,
    odor ('|'-separated terms, each optionally 'term:strength' with strength 0-1),
    structure_source, cas_source, odor_source, name_source, synonyms_source,
    family_source, notes_source (provenance text: 'from memory', 'demo',
    'literature: <reference>', 'measured: <how>', 'computed: <how>'), notes,
    inchikey (checked), status (active or retired), restricted (yes or no),
    odor_sources (a JSON object: term -> provenance, for the terms whose source
    differs from odor_source), restrictions (a JSON array of the curator's
    restriction entries: kind, authority, max_percent, category, reference,
    date, source; see library.catalogue.restrictions), components (a recorded
    mixture's components, '|'-separated: InChIKeys as export writes them, or any
    key `olibra show` accepts; they may be rows of the same file)

Flat values are plain text; a structured curated field is one column holding
JSON (odor_sources today; more such columns can be added beside it). Cells a
spreadsheet would run as a formula are written with a leading apostrophe
(`spreadsheet_safe`), which the CSV reader removes again.

SDF records carry the structure in the molfile block and the same fields as
data items (`name` or the title line, `synonyms`, `cas`, ...). A value that an
SDF data item cannot hold as it is (a blank line, a line starting with '>' or
'$$$$', surrounding spaces, a line separator other than newline) is written as a
JSON string under a header line ending in `[json]`, and read back exactly.

JSON files are olibra's own export ({"format": "olibra-materials", ...}).

An import is one transaction: by default any rejected row means nothing is
stored; with keep_good=True the good rows are stored and every rejected row is
still reported with its row number and reason.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Iterator

from sqlalchemy import delete, select
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import Session, selectinload

from library.catalogue.curation import (
    CurationError,
    Source,
    add_material,
    draft_material,
    format_odor_list,
    format_strength,
    vocabulary,
)
from library.catalogue import restrictions
from library.catalogue.database import CatalogueBusy, busy_message, is_busy
from library.catalogue.models import AuditEntry, Material, MaterialOdor
from library.errors import OlibraError
from library.structures import StructureError

CSV_COLUMNS = ("name", "synonyms", "cas", "smiles", "inchi", "formula", "family", "odor",
               "structure_source", "cas_source", "odor_source", "name_source", "notes", "inchikey",
               "status", "restricted", "odor_sources", "synonyms_source", "family_source", "notes_source",
               "restrictions", "components")
EXPORT_COLUMNS = ("name", "synonyms", "cas", "smiles", "formula", "family", "odor",
                  "structure_source", "cas_source", "odor_source", "name_source", "notes", "inchikey",
                  "status", "restricted", "odor_sources", "synonyms_source", "family_source", "notes_source",
                  "restrictions", "components")
# Import column -> provenance field it sets.
SOURCE_COLUMNS = {"structure_source": "structure", "cas_source": "cas_rn", "name_source": "preferred_name",
                  "synonyms_source": "synonyms", "family_source": "olfactive_family", "notes_source": "notes"}
SDF_JSON_MARKER = "[json]"
YES, NO = ("yes", "true", "1", "y"), ("no", "false", "0", "n", "")
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
MAX_FIELD_CHARS = 100_000
MAX_FILE_BYTES = 200 * 1024 * 1024


class ImportFileError(OlibraError, ValueError):
    """The file as a whole cannot be read (encoding, header, format); nothing was imported."""


@dataclass
class RowOutcome:
    row: int  # 1-based data row (CSV: line after the header; SDF: record number)
    name: str
    status: str  # 'added' | 'present' | 'rejected' | 'would be added' (in a refused import)
    message: str
    material_id: int | None = None


@dataclass
class ImportReport:
    rows: list[RowOutcome] = field(default_factory=list)
    committed: bool = False

    def count(self, status: str) -> int:
        return sum(1 for r in self.rows if r.status == status)

    @property
    def rejected(self) -> list[RowOutcome]:
        return [r for r in self.rows if r.status == "rejected"]

    def summary(self) -> str:
        added = (f"{self.count('added')} added" if self.committed or not self.count("would be added")
                 else f"0 added ({self.count('would be added')} would have been added)")
        text = f"{added}, {self.count('present')} already present, {self.count('rejected')} rejected"
        if self.rejected and not self.committed:
            text += "; nothing was imported (fix the rejected rows, or keep the good rows to store those)"
        return text


@dataclass
class InputRow:
    row: int
    fields: dict[str, str]
    structure: str
    structure_format: str


def spreadsheet_safe(value):
    """A CSV cell a spreadsheet will not run as a formula: text starting with =, +, -, @, tab or CR gets a
    leading apostrophe (as does text that already starts with apostrophes before one of those, so that
    `from_spreadsheet_safe` restores every value exactly). Lists are joined with '|'; None is empty."""
    if isinstance(value, list):
        value = "|".join(map(str, value))
    if value is None:
        return ""
    if isinstance(value, str) and value.lstrip("'").startswith(FORMULA_STARTS):
        return "'" + value
    return value


def from_spreadsheet_safe(text: str) -> str:
    """The value `spreadsheet_safe` wrote: one leading apostrophe removed where it added one."""
    if text.startswith("'") and text.lstrip("'").startswith(FORMULA_STARTS):
        return text[1:]
    return text


def _decode(data: bytes, path_label: str) -> str:
    if not data.strip():
        raise ImportFileError(f"{path_label} is empty; nothing to import")
    nul = data.find(b"\x00")
    if nul >= 0:
        raise ImportFileError(f"{path_label} contains a NUL byte (at byte {nul}); it looks binary or damaged: "
                              "give a CSV, SDF or JSON text file")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ImportFileError(
            f"{path_label} is not UTF-8 text (byte {exc.start} cannot be decoded); "
            "save it as UTF-8 and import again") from None


def read_csv_rows(text: str, label: str = "file") -> list[InputRow]:
    sample = text[:4096]
    delimiter = "\t" if sample.count("\t") > sample.count(",") else ","
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    try:
        header = next(reader)
    except StopIteration:
        raise ImportFileError(f"{label} has no header row") from None
    except csv.Error as exc:
        raise ImportFileError(f"{label}: header row is not valid CSV ({exc})") from None
    columns = [h.strip().lower() for h in header]
    unknown = [c for c in columns if c not in CSV_COLUMNS]
    if unknown:
        raise ImportFileError(
            f"{label}: unknown column(s) {', '.join(map(repr, unknown))}; "
            f"allowed columns are {', '.join(CSV_COLUMNS)}")
    duplicated = sorted({c for c in columns if columns.count(c) > 1})
    if duplicated:
        raise ImportFileError(f"{label}: column(s) {', '.join(duplicated)} appear more than once")
    if "name" not in columns or not ({"smiles", "inchi"} & set(columns)):
        raise ImportFileError(
            f"{label}: needs a 'name' column and a 'smiles' or 'inchi' column; found {', '.join(columns)}")
    rows: list[InputRow] = []
    try:
        for number, values in enumerate(reader, start=1):
            if not any(v.strip() for v in values):
                continue
            if len(values) != len(columns):
                rows.append(InputRow(number, {"__error__": (
                    f"has {len(values)} fields but the header has {len(columns)}; "
                    "check quoting and separators")}, "", ""))
                continue
            fields = dict(zip(columns, (from_spreadsheet_safe(v.strip()) for v in values)))
            too_long = [c for c, v in fields.items() if len(v) > MAX_FIELD_CHARS]
            if too_long:
                fields = {"name": fields.get("name", "")[:60],
                          "__error__": f"field {too_long[0]!r} is longer than {MAX_FIELD_CHARS} characters"}
                rows.append(InputRow(number, fields, "", ""))
                continue
            if fields.get("smiles"):
                rows.append(InputRow(number, fields, fields["smiles"], "smiles"))
            else:
                rows.append(InputRow(number, fields, fields.get("inchi", ""), "inchi"))
    except csv.Error as exc:
        raise ImportFileError(
            f"{label}: CSV is malformed near data row {reader.line_num - 1} ({exc}); "
            "check quotes and separators") from None
    if not rows:
        raise ImportFileError(f"{label} has a header but no data rows; nothing to import")
    return rows


def _sdf_records(text: str) -> list[list[str]]:
    """The records of an SDF text as lists of lines (a record ends at a line that is exactly '$$$$')."""
    records, current = [], []
    for line in text.replace("\r\n", "\n").split("\n"):
        if line.rstrip() == "$$$$":
            records.append(current)
            current = []
        else:
            current.append(line)
    records.append(current)
    return [r for r in records if any(line.strip() for line in r)]


def _sdf_header(line: str) -> tuple[str | None, bool]:
    """(item name, JSON-escaped?) of a data header line such as '>  <notes>' or '>  <notes>  [json]'."""
    start = line.find("<")
    end = line.find(">", start + 1)
    if start < 0 or end <= start:
        return None, False
    return line[start + 1:end].strip().lower(), line[end + 1:].strip() == SDF_JSON_MARKER


def read_sdf_rows(text: str, label: str = "file") -> list[InputRow]:
    records = _sdf_records(text)
    if not records:
        raise ImportFileError(f"{label} holds no SDF records")
    rows: list[InputRow] = []
    for number, lines in enumerate(records, start=1):
        # The molfile header is three lines (title, program, comment) and the counts line; the
        # title may be anything, so 'M  END' is looked for only after them.
        end = next((i for i in range(4, len(lines)) if lines[i].rstrip() == "M  END"), None)
        if end is None:
            rows.append(InputRow(number, {"__error__": "record is truncated: no 'M  END' line"}, "", ""))
            continue
        block = "\n".join(lines[:end + 1]) + "\n"
        fields: dict[str, str] = {}
        values: dict[str, list[str]] = {}
        escaped: set[str] = set()
        current = None
        for line in lines[end + 1:]:
            if line.startswith(">"):
                current, is_json = _sdf_header(line)
                if current is not None:
                    values[current] = []
                    if is_json:
                        escaped.add(current)
            elif current is not None:
                if line.strip() == "":
                    current = None
                else:
                    values[current].append(line)
        for name, value_lines in values.items():
            value = "\n".join(value_lines)
            if name in escaped:
                try:
                    value = json.loads(value)
                except ValueError:
                    value = None
                if not isinstance(value, str):
                    fields["__error__"] = f"data item {name!r} is marked {SDF_JSON_MARKER} but is not a JSON string"
                    continue
            fields[name] = value.strip() if name not in escaped else value
        unknown = [c for c in fields if c not in CSV_COLUMNS and c != "__error__"]
        if unknown:
            fields["__error__"] = f"unknown data item(s) {', '.join(unknown)}; allowed: {', '.join(CSV_COLUMNS)}"
        if not fields.get("name"):
            fields["name"] = lines[0].strip()
        rows.append(InputRow(number, fields, block, "molfile"))
    return rows


def read_json_rows(text: str, label: str = "file") -> list[InputRow]:
    """Rows of an olibra JSON export ({"format": "olibra-materials", "materials": [...]})."""
    try:
        document = json.loads(text)
    except RecursionError:
        raise ImportFileError(f"{label} nests JSON too deeply to be an olibra export") from None
    except ValueError as exc:
        raise ImportFileError(f"{label} is not valid JSON ({exc}); give an olibra JSON export") from None
    if not isinstance(document, dict) or document.get("format") != "olibra-materials" \
            or not isinstance(document.get("materials"), list):
        raise ImportFileError(f"{label} is not an olibra JSON export: it needs "
                              '{"format": "olibra-materials", "materials": [...]}')
    rows = []
    for number, record in enumerate(document["materials"], start=1):
        try:
            fields = _json_record_fields(record)
        except (TypeError, ValueError, KeyError, AttributeError):
            fields = {"__error__": "record is not a material as olibra exports it (see README, Import file format)",
                      "name": str(record.get("name", ""))[:60] if isinstance(record, dict) else ""}
        rows.append(InputRow(number, fields, fields.get("smiles", "") or fields.get("inchi", ""),
                             "smiles" if fields.get("smiles") else "inchi"))
    if not rows:
        raise ImportFileError(f"{label} holds no materials; nothing to import")
    return rows


def _json_record_fields(record: dict) -> dict[str, str]:
    if not isinstance(record, dict):
        raise TypeError
    fields: dict[str, str] = {}
    for key, value in record.items():
        if key in ("synonyms", "odor", "odor_sources", "restricted", "restrictions", "components"):
            continue
        if key in CSV_COLUMNS:
            if not isinstance(value, str):
                raise TypeError
            fields[key] = value
    fields["synonyms"] = "|".join(_strings(record.get("synonyms", [])))
    fields["components"] = "|".join(_strings(record.get("components", [])))
    odors = record.get("odor", [])
    if not isinstance(odors, list):
        raise TypeError
    items, sources = [], {}
    for odor in odors:
        term = odor["term"]
        strength = odor.get("strength")
        if not isinstance(term, str) or not (strength is None or isinstance(strength, (int, float))) \
                or isinstance(strength, bool):
            raise TypeError
        items.append(term if strength is None else f"{term}:{format_strength(float(strength))}")
        source = odor.get("source")
        if source is not None:
            if not isinstance(source, str):
                raise TypeError
            sources[term] = source
    fields["odor"] = "|".join(items)
    fields["odor_sources"] = json.dumps(sources) if sources else ""
    fields.pop("odor_source", None)
    restricted = record.get("restricted", False)
    if not isinstance(restricted, bool):
        raise TypeError
    fields["restricted"] = "yes" if restricted else "no"
    entries = record.get("restrictions", [])
    if not isinstance(entries, list):
        raise TypeError
    fields["restrictions"] = json.dumps(entries) if entries else ""
    return fields


def _strings(values) -> list[str]:
    if not isinstance(values, list) or not all(isinstance(v, str) for v in values):
        raise TypeError
    return values


def read_rows(path: Path | str, *, data: bytes | None = None) -> list[InputRow]:
    """Read a CSV/TSV or SDF file into rows; raises ImportFileError for a file that cannot be read."""
    path = Path(path)
    label = path.name
    if data is None:
        data = read_file_bytes(path, "a CSV, SDF or JSON file", limit=MAX_FILE_BYTES)
    text = _decode(data, label)
    suffix = path.suffix.lower()
    sdf_suffixes = (".sdf", ".sd", ".mol")
    if suffix == ".json" or (suffix not in (".csv", ".tsv", ".txt") + sdf_suffixes
                             and text.lstrip().startswith("{")):
        return read_json_rows(text, label)
    if suffix in sdf_suffixes or (suffix not in (".csv", ".tsv", ".txt") and "M  END" in text):
        return read_sdf_rows(text, label)
    return read_csv_rows(text, label)


def read_file_bytes(path: Path, what: str, *, limit: int) -> bytes:
    """The bytes of a file, or ImportFileError for a missing, folder, unreadable or oversized path."""
    try:
        if not path.exists():
            raise ImportFileError(f"{path} does not exist; give the path of {what}")
        if path.is_dir():
            raise ImportFileError(f"{path} is a folder; give the path of {what}")
        if path.stat().st_size > limit:
            raise ImportFileError(f"{path} is larger than {limit // 2**20} MiB; split it")
        return path.read_bytes()
    except OSError as exc:
        raise ImportFileError(f"cannot read {path}: {exc.strerror or exc}; check the path and its permissions") \
            from None


def _check_formula(row: InputRow, structure_formula: str) -> None:
    given = row.fields.get("formula", "").replace(" ", "")
    if given and given != structure_formula:
        raise CurationError(f"formula {given} does not match the structure's {structure_formula}")


def _check_inchikey(row: InputRow, structure_inchikey: str) -> None:
    given = row.fields.get("inchikey", "").strip().upper()
    if given and given != structure_inchikey:
        raise CurationError(
            f"InChIKey {given} does not match the structure's {structure_inchikey}; "
            "the structure or the key was changed by hand")


@dataclass
class StagedRow:
    """One input row checked and standardized, ready to store (or refused, or a repeat within the file)."""

    row: int
    name: str
    draft: object | None = None  # MaterialDraft
    rejection: str | None = None
    repeat_of: int | None = None


def stage_rows(rows: Iterable[InputRow], *, max_heavy_atoms: int | None = None,
               default_structure_source: str | None = None, canonical_tautomer: bool = False,
               progress: Callable[[int], None] | None = None) -> list[StagedRow]:
    """Check and standardize every row without touching the catalogue (the slow part of an import), so
    that the write transaction that follows is short."""
    staged: list[StagedRow] = []
    seen_in_file: dict[str, int] = {}
    for row in rows:
        name = row.fields.get("name", "")
        try:
            if "__error__" in row.fields:
                raise CurationError(row.fields["__error__"])
            draft = draft_material(
                row.structure, name=name,
                synonyms=[s for s in row.fields.get("synonyms", "").split("|") if s.strip()],
                cas=row.fields.get("cas"), family=row.fields.get("family"), notes=row.fields.get("notes"),
                odors=row.fields.get("odor"), input_format=row.structure_format,
                canonical_tautomer=canonical_tautomer, max_heavy_atoms=max_heavy_atoms,
                sources={**{field: row.fields.get(column) for column, field in SOURCE_COLUMNS.items()},
                         "structure": row.fields.get("structure_source") or default_structure_source,
                         "odor": row.fields.get("odor_source")},
                odor_sources=_odor_sources(row.fields.get("odor_sources", "")))
            _check_formula(row, draft.structure.formula)
            _check_inchikey(row, draft.structure.inchikey)
            draft.status = row.fields.get("status", "").strip().lower() or "active"
            draft.restricted = _yes_no(row.fields.get("restricted", ""), "restricted")
            draft.restrictions = restrictions.from_records(row.fields.get("restrictions", ""))
            draft.components = [k.strip() for k in row.fields.get("components", "").split("|") if k.strip()]
            key = draft.structure.inchikey
            if key in seen_in_file:
                staged.append(StagedRow(row.row, name, repeat_of=seen_in_file[key]))
            else:
                seen_in_file[key] = row.row
                staged.append(StagedRow(row.row, name, draft=draft))
        except (StructureError, CurationError) as exc:
            staged.append(StagedRow(row.row, name, rejection=str(exc)))
        if progress:
            progress(1)
    return staged


def store_staged(session: Session, staged: list[StagedRow], *, keep_good: bool = False,
                 actor: str | None = None) -> ImportReport:
    """Store staged rows inside the caller's (write) transaction; the caller commits only if
    `report.committed`. Each row goes in a savepoint, so a row refused by the catalogue (a name or
    CAS RN already used) is rolled back alone."""
    report = ImportReport()
    terms = vocabulary(session)
    for item in staged:
        if item.rejection is not None:
            report.rows.append(RowOutcome(item.row, item.name, "rejected", item.rejection))
            continue
        if item.repeat_of is not None:
            report.rows.append(RowOutcome(item.row, item.name, "present",
                                          f"same structure as row {item.repeat_of} of this file"))
            continue
        try:
            with session.begin_nested():
                outcome = add_material(session, item.draft, actor=actor, known_terms=terms)
            report.rows.append(RowOutcome(item.row, item.name, "added" if outcome.added else "present",
                                          outcome.message, outcome.material.id))
        except (StructureError, CurationError) as exc:
            report.rows.append(RowOutcome(item.row, item.name, "rejected", str(exc)))
    _store_components(session, staged, report, actor=actor)
    report.committed = keep_good or not report.rejected
    if not report.committed:
        report.rows = [_not_stored(r) for r in report.rows]
    return report


def _store_components(session: Session, staged: list[StagedRow], report: ImportReport, *,
                      actor: str | None) -> None:
    """Record the components of the added mixtures, once every row is in (a component may come later in
    the file). A mixture whose components cannot all be found is taken out again and its row rejected."""
    from library.catalogue import mixtures

    outcomes = {o.row: o for o in report.rows}
    for item in staged:
        outcome = outcomes.get(item.row)
        if item.draft is None or not item.draft.components or outcome is None or outcome.status != "added":
            continue
        mixture = session.get(Material, outcome.material_id)
        try:
            with session.begin_nested():
                mixtures.set_components(session, mixture, item.draft.components, actor=actor)
        except CurationError as exc:
            # added by this import only: its audit entries go with it
            session.execute(delete(AuditEntry).where(AuditEntry.entity == "material",
                                                     AuditEntry.entity_id == mixture.id))
            session.delete(mixture)
            session.flush()
            outcome.status, outcome.material_id = "rejected", None
            outcome.message = f"components: {exc}"


def _not_stored(outcome: RowOutcome) -> RowOutcome:
    """A row of a refused import: what it would have done, without the id nothing was given."""
    if outcome.status != "added":
        return outcome
    return RowOutcome(outcome.row, outcome.name, "would be added",
                      f"{outcome.name} would have been added; nothing was stored because the import was refused",
                      None)


def import_rows(session: Session, rows: Iterable[InputRow], *, keep_good: bool = False,
                actor: str | None = None, max_heavy_atoms: int | None = None,
                default_structure_source: str | None = None,
                canonical_tautomer: bool = False,
                progress: Callable[[int], None] | None = None) -> ImportReport:
    """Import rows inside the caller's transaction; the caller commits only if `report.committed`.

    Rows without a structure_source take `default_structure_source` (e.g. 'from
    memory') when given; otherwise they are rejected. (`import_into` stages the rows
    before it opens its transaction; this does both inside the caller's.)
    """
    staged = stage_rows(rows, max_heavy_atoms=max_heavy_atoms, default_structure_source=default_structure_source,
                        canonical_tautomer=canonical_tautomer, progress=progress)
    return store_staged(session, staged, keep_good=keep_good, actor=actor)


def _odor_sources(text: str) -> dict[str, str]:
    if not text.strip():
        return {}
    try:
        value = json.loads(text)
    except (ValueError, RecursionError):
        value = None
    if not isinstance(value, dict) or not all(isinstance(k, str) and isinstance(v, str) for k, v in value.items()):
        raise CurationError('odor_sources must be a JSON object of term to provenance, e.g. '
                            '{"citrus": "measured: panel 2026-03"}')
    return value


def _yes_no(text: str, column: str) -> bool:
    value = (text or "").strip().lower()
    if value in YES:
        return True
    if value in NO:
        return False
    raise CurationError(f"{column} {text[:20]!r} must be yes or no")


WRITE_ATTEMPTS = 3


def import_into(catalogue, rows: Iterable[InputRow], *, keep_good: bool = False, actor: str | None = None,
                progress: Callable[[int], None] | None = None, **options) -> ImportReport:
    """Import all-or-nothing into `catalogue`: rows are checked and standardized first, outside any
    transaction; then one short write transaction stores them (rolled back unless the report is
    committed). When another writer holds the catalogue past the busy timeout, the write is tried
    again (WRITE_ATTEMPTS in all) before a clear CatalogueBusy error."""
    staged = stage_rows(rows, progress=progress, **options)
    for attempt in range(1, WRITE_ATTEMPTS + 1):
        try:
            with catalogue.writer_sessions() as session:
                with session.begin() as outer:
                    report = store_staged(session, staged, keep_good=keep_good, actor=actor)
                    if not report.committed:
                        outer.rollback()
            return report
        except OperationalError as exc:
            if not is_busy(exc):
                raise
            if attempt == WRITE_ATTEMPTS:
                raise CatalogueBusy(busy_message() + f" ({WRITE_ATTEMPTS} attempts)") from None
    raise AssertionError("unreachable")


def _materials(session: Session, *, include_retired: bool = True) -> list[Material]:
    query = select(Material).options(
        selectinload(Material.synonyms), selectinload(Material.provenance),
        selectinload(Material.odors).selectinload(MaterialOdor.descriptor),
        selectinload(Material.restrictions)).order_by(Material.id)
    if not include_retired:
        query = query.where(Material.status == "active")
    return list(session.scalars(query))


def _odor_sources_of(material: Material) -> tuple[str, dict[str, str]]:
    """(source shared by the first term, {term: source} of the terms whose source differs)."""
    odors = sorted(material.odors, key=lambda o: o.descriptor.term)
    texts = {o.descriptor.term: str(Source(o.source_kind, o.source_reference)) for o in odors}
    if not odors:
        return "", {}
    shared = texts[odors[0].descriptor.term]
    return shared, {term: text for term, text in texts.items() if text != shared}


def material_fields(material: Material, *, component_keys: tuple[str, ...] = ()) -> dict[str, str]:
    """A material as the flat fields of the import format (round-trips through import); a recorded
    mixture's components are given by their InChIKeys (`component_keys`)."""
    sources = {p.field: str(Source(p.kind, p.reference)) for p in material.provenance}
    odor_source, odor_sources = _odor_sources_of(material)
    fields = {
        "name": material.preferred_name,
        "synonyms": "|".join(s.name for s in material.synonyms),
        "cas": material.cas_rn or "",
        "smiles": material.smiles,
        "formula": material.formula,
        "family": material.olfactive_family or "",
        "odor": format_odor_list(material.odors),
        "odor_source": odor_source,
        "notes": material.notes or "",
        "inchikey": material.inchikey,
        "status": material.status,
        "restricted": "yes" if material.restricted else "no",
        "restrictions": restrictions.to_text(material),
        "components": "|".join(component_keys),
        "odor_sources": json.dumps(odor_sources, ensure_ascii=False, sort_keys=True) if odor_sources else "",
    }
    for column, field_name in SOURCE_COLUMNS.items():
        fields[column] = sources.get(field_name, "")
    return {column: fields[column] for column in EXPORT_COLUMNS}


def sdf_data_item(key: str, value: str) -> str:
    """One SDF data item; a value an SDF item cannot hold as it is goes as a JSON string marked [json]."""
    lines = value.split("\n")
    plain = (value == value.strip() and len(value.splitlines()) == len(lines)
             and all(line.strip() and not line.startswith(">") and not line.startswith("$$$$")
                     and line == line.rstrip() for line in lines))
    if plain:
        return f">  <{key}>\n{value}\n\n"
    return f">  <{key}>  {SDF_JSON_MARKER}\n{json.dumps(value, ensure_ascii=True)}\n\n"


def export_materials(session: Session, fmt: str, *, include_retired: bool = True) -> Iterator[str]:
    """Yield the catalogue as CSV, SDF or JSON text chunks."""
    from library.catalogue import mixtures

    materials = _materials(session, include_retired=include_retired)
    links = mixtures.component_links(session)
    inchikeys = dict(session.execute(select(Material.id, Material.inchikey).where(
        Material.id.in_({c for components in links.values() for c in components}))).all()) if links else {}

    def fields_of(material):  # with its components, for every format
        return material_fields(material, component_keys=tuple(inchikeys[c] for c in links.get(material.id, ())))
    if fmt == "csv":
        buffer = io.StringIO()
        writer = csv.DictWriter(buffer, fieldnames=EXPORT_COLUMNS, lineterminator="\n")
        writer.writeheader()
        yield buffer.getvalue()
        for material in materials:
            buffer.seek(0)
            buffer.truncate()
            writer.writerow({k: spreadsheet_safe(v) for k, v in fields_of(material).items()})
            yield buffer.getvalue()
    elif fmt == "sdf":
        for material in materials:
            block = material.molfile
            lines = block.split("\n")
            # The name travels as a data item; the title line carries it only where it cannot end the record.
            title = material.preferred_name
            lines[0] = "" if title.rstrip() in ("$$$$", "M  END") else title
            text = "\n".join(lines).rstrip("\n") + "\n"
            for key, value in fields_of(material).items():
                if key in ("smiles",) or not value:
                    continue
                text += sdf_data_item(key, value)
            yield text + "$$$$\n"
    elif fmt == "json":
        records = []
        for material in materials:
            record = fields_of(material)
            del record["odor_source"], record["odor_sources"]
            record.update(id=material.id, inchi=material.inchi,
                          average_mass_g_per_mol=round(material.average_mass_g_per_mol, 4),
                          monoisotopic_mass_da=round(material.monoisotopic_mass_da, 6),
                          stereo_status=material.stereo_status, restricted=material.restricted,
                          restrictions=restrictions.as_records(material),
                          restriction_tags=restrictions.tags(material),
                          synonyms=[s.name for s in material.synonyms],
                          components=[inchikeys[c] for c in links.get(material.id, ())],
                          odor=[{"term": o.descriptor.term, "strength": o.strength,
                                 "source": str(Source(o.source_kind, o.source_reference))}
                                for o in sorted(material.odors, key=lambda o: o.descriptor.term)])
            records.append(record)
        yield json.dumps({"format": "olibra-materials", "version": 1, "regulatory_note": restrictions.DISCLAIMER,
                          "materials": records}, indent=2)
        yield "\n"
    else:
        raise OlibraError(f"unknown export format {fmt!r}; use csv, sdf or json")

