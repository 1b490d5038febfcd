"""Bulk import (CSV, SDF) and export (CSV, SDF, JSON) of materials.

CSV columns (header row, UTF-8, any order, case-insensitive):

    name (required), smiles or inchi (one required), synonyms ('|'-separated),
    cas, formula (checked against the structure when given), family,
    odor ('|'-separated terms, each optionally 'term:strength' with strength 0-1),
    structure_source, cas_source, odor_source, name_source (provenance text:
    'from memory', 'demo', 'literature: <reference>', 'measured: <how>',
    'computed: <how>'), notes

SDF records carry the structure in the molfile block and the same fields as
data items (`name` or the title line, `synonyms`, `cas`, ...).

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

from sqlalchemy import select
from sqlalchemy.orm import Session, selectinload

from library.catalogue.curation import (
    CurationError,
    add_material,
    draft_material,
    format_odor_list,
    vocabulary,
)
from library.catalogue.models import Material, MaterialOdor
from library.errors import OlibraError
from library.structures import StructureError

CSV_COLUMNS = ("name", "synonyms", "cas", "smiles", "inchi", "formula", "family", "odor",
               "structure_source", "cas_source", "odor_source", "name_source", "notes", "inchikey",
               "status")
EXPORT_COLUMNS = ("name", "synonyms", "cas", "smiles", "formula", "family", "odor",
                  "structure_source", "cas_source", "odor_source", "name_source", "notes", "inchikey",
                  "status")
MAX_FIELD_CHARS = 100_000
MAX_FILE_BYTES = 200 * 1024 * 1024


class ImportFileError(OlibraError, ValueError):
    """The file as a whole cannot be read (encoding, header, format); nothing was imported."""


@dataclass
class RowOutcome:
    row: int  # 1-based data row (CSV: line after the header; SDF: record number)
    name: str
    status: str  # 'added' | 'present' | 'rejected'
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
        text = (f"{self.count('added')} added, {self.count('present')} already present, "
                f"{self.count('rejected')} rejected")
        if self.rejected and not self.committed:
            text += "; nothing was imported (fix the rejected rows, or keep the good rows to store those)"
        return text


@dataclass
class InputRow:
    row: int
    fields: dict[str, str]
    structure: str
    structure_format: str


def _decode(data: bytes, path_label: str) -> str:
    if not data.strip():
        raise ImportFileError(f"{path_label} is empty; nothing to import")
    if b"\x00" in data[:4096]:
        raise ImportFileError(f"{path_label} looks binary (NUL bytes); give a CSV or SDF text file")
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
            fields = dict(zip(columns, (v.strip() for v in values)))
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


def read_sdf_rows(text: str, label: str = "file") -> list[InputRow]:
    pieces = text.replace("\r\n", "\n").split("$$$$")
    # Each record after a '$$$$' line starts after that line's newline; the
    # molfile's own first line (the title) may be blank and must be kept.
    records = [p if i == 0 else p.removeprefix("\n") for i, p in enumerate(pieces)]
    records = [r for r in records if r.strip()]
    if not records:
        raise ImportFileError(f"{label} holds no SDF records")
    rows: list[InputRow] = []
    for number, record in enumerate(records, start=1):
        block, _, data = record.partition("M  END")
        fields: dict[str, str] = {}
        if not _:
            rows.append(InputRow(number, {"__error__": "record is truncated: no 'M  END' line"}, "", ""))
            continue
        current = None
        for line in data.splitlines():
            if line.startswith(">"):
                start, end = line.find("<"), line.find(">", line.find("<") + 1)
                current = line[start + 1:end].strip().lower() if start >= 0 and end > start else None
                if current is not None:
                    fields[current] = ""
            elif current is not None:
                if line.strip() == "":
                    current = None
                else:
                    fields[current] = (fields[current] + "\n" + line).strip()
        unknown = [c for c in fields if c not in CSV_COLUMNS]
        if unknown:
            fields["__error__"] = f"unknown data item(s) {', '.join(unknown)}; allowed: {', '.join(CSV_COLUMNS)}"
        if not fields.get("name"):
            fields["name"] = block.split("\n", 1)[0].strip()
        rows.append(InputRow(number, fields, block + "M  END\n", "molfile"))
    return rows


def read_rows(path: Path | str, *, data: bytes | None = None) -> list[InputRow]:
    """Read a CSV/TSV or SDF file into rows; raises ImportFileError for a file that cannot be read."""
    path = Path(path)
    label = path.name
    if data is None:
        if not path.exists():
            raise ImportFileError(f"{path} does not exist")
        if path.is_dir():
            raise ImportFileError(f"{path} is a folder; give a CSV or SDF file")
        if path.stat().st_size > MAX_FILE_BYTES:
            raise ImportFileError(f"{path} is larger than {MAX_FILE_BYTES // 2**20} MiB; split it")
        data = path.read_bytes()
    text = _decode(data, label)
    suffix = path.suffix.lower()
    if suffix in (".sdf", ".sd", ".mol") or (suffix not in (".csv", ".tsv", ".txt") and "M  END" in text):
        return read_sdf_rows(text, label)
    return read_csv_rows(text, label)


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


def import_rows(session: Session, rows: Iterable[InputRow], *, keep_good: bool = False,
                actor: str | None = None, max_heavy_atoms: int | None = None,
                default_structure_source: str | None = None,
                canonical_tautomer: bool = False,
                progress: Callable[[int], None] | None = None) -> ImportReport:
    """Import rows inside the caller's transaction; the caller commits only if `report.committed`.

    Rows without a structure_source take `default_structure_source` (e.g. 'from
    memory') when given; otherwise they are rejected. Each row is stored inside a savepoint so a row that fails at the database
    (a unique constraint, say) is rolled back alone.
    """
    report = ImportReport()
    terms = vocabulary(session)
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
                sources={"structure": row.fields.get("structure_source") or default_structure_source,
                         "cas_rn": row.fields.get("cas_source"),
                         "odor": row.fields.get("odor_source"),
                         "preferred_name": row.fields.get("name_source")})
            _check_formula(row, draft.structure.formula)
            _check_inchikey(row, draft.structure.inchikey)
            draft.status = row.fields.get("status", "").strip().lower() or "active"
            key = draft.structure.inchikey
            if key in seen_in_file:
                report.rows.append(RowOutcome(row.row, name, "present",
                                              f"same structure as row {seen_in_file[key]} of this file"))
                continue
            seen_in_file[key] = row.row
            with session.begin_nested():
                outcome = add_material(session, draft, actor=actor, known_terms=terms)
            report.rows.append(RowOutcome(row.row, name, "added" if outcome.added else "present",
                                          outcome.message, outcome.material.id))
        except (StructureError, CurationError) as exc:
            report.rows.append(RowOutcome(row.row, name, "rejected", str(exc)))
        if progress:
            progress(1)
    report.committed = keep_good or not report.rejected
    return report


def import_into(catalogue, rows: Iterable[InputRow], **options) -> ImportReport:
    """Run `import_rows` in one transaction of `catalogue`, rolled back unless the report is committed."""
    with catalogue.sessions() as session:
        with session.begin() as outer:
            report = import_rows(session, rows, **options)
            if not report.committed:
                outer.rollback()
    return report


def _materials(session: Session, *, include_retired: bool = True) -> list[Material]:
    query = select(Material).options(
        selectinload(Material.synonyms), selectinload(Material.provenance),
        selectinload(Material.odors).selectinload(MaterialOdor.descriptor)).order_by(Material.id)
    if not include_retired:
        query = query.where(Material.status == "active")
    return list(session.scalars(query))


def material_fields(material: Material) -> dict[str, str]:
    """A material as the flat fields of the import format (round-trips through import)."""
    sources = {p.field: (f"{p.kind}: {p.reference}" if p.reference else p.kind) for p in material.provenance}
    odor_source = ""
    if material.odors:
        first = material.odors[0]
        odor_source = f"{first.source_kind}: {first.source_reference}" if first.source_reference else first.source_kind
    return {
        "name": material.preferred_name,
        "synonyms": "|".join(s.name for s in material.synonyms),
        "cas": material.cas_rn or "",
        "smiles": material.smiles,
        "formula": material.formula,
        "family": material.olfactive_family or "",
        "odor": format_odor_list(material.odors),
        "structure_source": sources.get("structure", ""),
        "cas_source": sources.get("cas_rn", ""),
        "odor_source": odor_source,
        "name_source": sources.get("preferred_name", ""),
        "notes": material.notes or "",
        "inchikey": material.inchikey,
        "status": material.status,
    }


def export_materials(session: Session, fmt: str, *, include_retired: bool = True) -> Iterator[str]:
    """Yield the catalogue as CSV, SDF or JSON text chunks."""
    materials = _materials(session, include_retired=include_retired)
    if fmt == "csv":
        buffer = io.StringIO()
        writer = csv.DictWriter(buffer, fieldnames=EXPORT_COLUMNS, lineterminator="\n")
        writer.writeheader()
        yield buffer.getvalue()
        for material in materials:
            buffer.seek(0)
            buffer.truncate()
            writer.writerow(material_fields(material))
            yield buffer.getvalue()
    elif fmt == "sdf":
        for material in materials:
            block = material.molfile
            lines = block.split("\n")
            lines[0] = material.preferred_name
            text = "\n".join(lines).rstrip("\n") + "\n"
            for key, value in material_fields(material).items():
                if key in ("smiles",) or not value or key not in CSV_COLUMNS:
                    continue
                text += f">  <{key}>\n{value}\n\n"
            yield text + "$$$$\n"
    elif fmt == "json":
        records = []
        for material in materials:
            record = material_fields(material)
            record.update(id=material.id, inchi=material.inchi,
                          average_mass_g_per_mol=round(material.average_mass_g_per_mol, 4),
                          monoisotopic_mass_da=round(material.monoisotopic_mass_da, 6),
                          stereo_status=material.stereo_status, restricted=material.restricted,
                          synonyms=[s.name for s in material.synonyms],
                          odor=[{"term": o.descriptor.term, "strength": o.strength,
                                 "source": o.source_kind, "reference": o.source_reference}
                                for o in material.odors])
            records.append(record)
        yield json.dumps({"format": "olibra-materials", "version": 1, "materials": records}, indent=2)
        yield "\n"
    else:
        raise OlibraError(f"unknown export format {fmt!r}; use csv, sdf or json")

