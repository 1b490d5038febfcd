"""Observations (measured data sets) and pair flags.

An observation set is a named table of measured values per material: a
sensory panel's descriptor profile (one variable per descriptor, e.g. intensity
0-10) or a receptor assay's responses (one variable per receptor). Files are
CSV in either of two layouts:

    long:  material,variable,value            (one measurement per row)
    wide:  material,<variable 1>,<variable 2>,...   (one material per row)

`material` is any key `olibra show` accepts (id, name, synonym, CAS RN,
InChIKey). An import is all or nothing: any bad row and nothing is stored.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field

import numpy as np
from sqlalchemy import delete, select
from sqlalchemy.orm import Session

from library.catalogue.curation import CurationError, Source, current_actor, find_material
from library.errors import Remedy
from library.catalogue.models import AuditEntry, Material, Observation, ObservationSet, PairFlag
from library.catalogue.transfer import ImportFileError, _decode

OBSERVATION_KINDS = ("panel profile", "receptor response", "other")
FLAG_KINDS = ("shape-alike smell-different", "vibration-alike smell-different",
              "shape-unalike smell-alike", "vibration-unalike smell-alike",
              "check structure", "restricted candidate", "other")
MAX_VARIABLE_CHARS = 100


@dataclass
class ObservationReport:
    set_name: str
    materials: int = 0
    values: int = 0
    problems: list[str] = field(default_factory=list)
    stored: bool = False

    def summary(self) -> str:
        if self.problems:
            return (f"{len(self.problems)} problem(s); nothing was stored in data set {self.set_name!r}")
        return f"data set {self.set_name!r}: {self.values} value(s) for {self.materials} material(s) stored"


def _parse_value(text: str, where: str, problems: list[str]) -> float | None:
    text = text.strip()
    if text == "":
        return None  # not measured
    try:
        value = float(text)
    except ValueError:
        problems.append(f"{where}: value {text[:30]!r} is not a number")
        return None
    if not math.isfinite(value):
        problems.append(f"{where}: value {text!r} is not finite")
        return None
    return value


def read_observation_file(data: bytes, label: str) -> list[tuple[int, str, str, str]]:
    """(row number, material key, variable, value text) from a long or wide CSV."""
    text = _decode(data, label)
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        raise ImportFileError(f"{label} has no header row") from None
    except csv.Error as exc:
        raise ImportFileError(f"{label}: header is not valid CSV ({exc})") from None
    lowered = [h.lower() for h in header]
    if not lowered or lowered[0] != "material" or len(header) < 2:
        raise ImportFileError(
            f"{label}: the first column must be 'material', followed by 'variable,value' "
            "(long layout) or one column per variable (wide layout)")
    long_layout = lowered[1:] == ["variable", "value"]
    if not long_layout:
        empty = [i + 1 for i, h in enumerate(header) if not h]
        if empty:
            raise ImportFileError(f"{label}: column {empty[0]} has no name")
        if len(set(lowered)) != len(lowered):
            raise ImportFileError(f"{label}: a column name appears twice")
        too_long = [h for h in header if len(h) > MAX_VARIABLE_CHARS]
        if too_long:
            raise ImportFileError(f"{label}: variable name {too_long[0][:40]!r}... is too long")
    cells = []
    try:
        for number, values in enumerate(reader, start=1):
            if not any(v.strip() for v in values):
                continue
            if len(values) != len(header):
                raise ImportFileError(
                    f"{label}: row {number} has {len(values)} fields but the header has {len(header)}")
            if long_layout:
                cells.append((number, values[0].strip(), values[1].strip(), values[2]))
            else:
                cells.extend((number, values[0].strip(), header[i], values[i]) for i in range(1, len(header)))
    except csv.Error as exc:
        raise ImportFileError(f"{label}: CSV is malformed near row {reader.line_num - 1} ({exc})") from None
    if not cells:
        raise ImportFileError(f"{label} has no data rows")
    return cells


def import_observations(session: Session, data: bytes, label: str, *, set_name: str, kind: str,
                        source: str, unit: str | None = None, description: str | None = None,
                        replace: bool = False, actor: str | None = None) -> ObservationReport:
    """Store a data set inside the caller's transaction; `report.stored` is False when nothing may be kept."""
    report = ObservationReport(set_name=set_name.strip())
    if not report.set_name:
        raise CurationError("the data set needs a name (--set NAME)")
    if kind not in OBSERVATION_KINDS:
        raise CurationError(f"data set kind {kind!r} is not one of {', '.join(OBSERVATION_KINDS)}")
    provenance = Source.parse(source)
    if provenance is None:
        raise CurationError("the data set needs a source, e.g. 'measured: panel of 12, March 2026'")
    cells = read_observation_file(data, label)
    existing = session.scalar(select(ObservationSet).where(ObservationSet.name == report.set_name))
    if existing is not None and not replace:
        raise CurationError(f"data set {report.set_name!r} already exists; choose another name or use --replace")
    materials: dict[str, Material] = {}
    values: dict[tuple[int, str], float] = {}
    for number, key, variable, text in cells:
        where = f"row {number}"
        if key not in materials:
            try:
                materials[key] = find_material(session, key)
            except CurationError as exc:
                report.problems.append(f"{where}: {exc}")
                materials[key] = None
        material = materials[key]
        if not variable:
            report.problems.append(f"{where}: variable name is empty")
            continue
        value = _parse_value(text, where, report.problems)
        if material is None or value is None:
            continue
        if (material.id, variable) in values:
            report.problems.append(f"{where}: {material.preferred_name} / {variable} is given twice")
            continue
        values[(material.id, variable)] = value
    if report.problems:
        return report
    if existing is not None:
        session.execute(delete(Observation).where(Observation.set_id == existing.id))
        session.delete(existing)
        session.flush()
    observation_set = ObservationSet(name=report.set_name, kind=kind, unit=unit, description=description,
                                     source_kind=provenance.kind, source_reference=provenance.reference)
    session.add(observation_set)
    session.flush()
    session.add_all(Observation(set_id=observation_set.id, material_id=m, variable=v, value=x)
                    for (m, v), x in values.items())
    session.add(AuditEntry(actor=actor or current_actor(), action="import", entity="observation_set",
                           entity_id=observation_set.id, new_value=f"{report.set_name}: {len(values)} values"))
    report.materials = len({m for m, _ in values})
    report.values = len(values)
    report.stored = True
    return report


@dataclass(frozen=True)
class SetSummary:
    """What a stored data set holds, for listing."""

    id: int
    name: str
    kind: str
    unit: str | None
    description: str | None
    source: str
    materials: int
    values: int
    created_at: object  # datetime


def set_summaries(session: Session) -> list[SetSummary]:
    """Every stored data set with its counts, alphabetically."""
    from sqlalchemy import func

    counts = dict(session.execute(select(Observation.set_id, func.count()).group_by(Observation.set_id)).all())
    materials = dict(session.execute(select(Observation.set_id, func.count(func.distinct(Observation.material_id)))
                                     .group_by(Observation.set_id)).all())
    return [SetSummary(s.id, s.name, s.kind, s.unit, s.description,
                       f"{s.source_kind}: {s.source_reference}" if s.source_reference else s.source_kind,
                       materials.get(s.id, 0), counts.get(s.id, 0), s.created_at)
            for s in session.scalars(select(ObservationSet).order_by(ObservationSet.name))]


def delete_set(session: Session, set_name: str, *, actor: str | None = None) -> int:
    """Delete a data set and its values (audited); the number of values removed. CurationError when absent."""
    stored = session.scalar(select(ObservationSet).where(ObservationSet.name == (set_name or "").strip()))
    if stored is None:
        names = ", ".join(set_names(session)) or "none yet"
        raise CurationError(f"no data set named {(set_name or '').strip()!r} (data sets: {names})")
    removed = session.execute(delete(Observation).where(Observation.set_id == stored.id)).rowcount
    session.add(AuditEntry(actor=actor or current_actor(), action="delete", entity="observation_set",
                           entity_id=stored.id, old_value=f"{stored.name}: {removed} values"))
    session.delete(stored)
    return removed


def set_names(session: Session) -> list[str]:
    """Names of the stored observation data sets, alphabetically."""
    return list(session.scalars(select(ObservationSet.name).order_by(ObservationSet.name)))


def observation_profiles(session: Session, set_name: str) -> tuple[list[int], list[str], np.ndarray]:
    """(material ids, variables, matrix materials x variables with NaN where not measured)."""
    observation_set = session.scalar(select(ObservationSet).where(ObservationSet.name == set_name))
    if observation_set is None:
        names = ", ".join(session.scalars(select(ObservationSet.name))) or "none yet"
        raise CurationError(f"no data set named {set_name!r} (data sets: {names})", remedy=Remedy.IMPORT_OBSERVATIONS)
    rows = session.execute(select(Observation.material_id, Observation.variable, Observation.value)
                           .where(Observation.set_id == observation_set.id)).all()
    ids = sorted({r[0] for r in rows})
    variables = sorted({r[1] for r in rows})
    matrix = np.full((len(ids), len(variables)), np.nan)
    row_of = {m: i for i, m in enumerate(ids)}
    column_of = {v: j for j, v in enumerate(variables)}
    for material_id, variable, value in rows:
        matrix[row_of[material_id], column_of[variable]] = value
    return ids, variables, matrix


def flag_pair(session: Session, material_a: Material, material_b: Material, *, kind: str,
              note: str | None = None, actor: str | None = None) -> PairFlag:
    """Flag a pair of materials (stored with the lower id first); the same kind twice updates the note."""
    if material_a.id == material_b.id:
        raise CurationError("a pair flag needs two different materials")
    kind = (kind or "").strip()
    if kind not in FLAG_KINDS:
        raise CurationError(f"flag kind {kind!r} is not one of: {'; '.join(FLAG_KINDS)}")
    low, high = sorted((material_a.id, material_b.id))
    flag = session.scalar(select(PairFlag).where(PairFlag.material_a_id == low, PairFlag.material_b_id == high,
                                                 PairFlag.kind == kind))
    actor = actor or current_actor()
    if flag is None:
        flag = PairFlag(material_a_id=low, material_b_id=high, kind=kind, note=note, created_by=actor)
        session.add(flag)
    else:
        flag.note = note
    session.flush()
    session.add(AuditEntry(actor=actor, action="flag", entity="pair_flag", entity_id=flag.id,
                           new_value=f"#{low} #{high} {kind}: {note or ''}"))
    return flag


def _flag_text(flag: PairFlag) -> str:
    return f"#{flag.material_a_id} #{flag.material_b_id} {flag.kind}: {flag.note or ''}"


def _stored_flag(session: Session, flag_id: int) -> PairFlag:
    flag = session.get(PairFlag, flag_id, with_for_update=True)
    if flag is None:
        raise CurationError(f"there is no pair flag #{flag_id} (it may have been withdrawn); reload the page")
    return flag


def edit_flag(session: Session, flag_id: int, *, kind: str, note: str | None = None,
              actor: str | None = None) -> PairFlag:
    """Change a flag's kind and note; the old and new values go to the audit trail."""
    flag = _stored_flag(session, flag_id)
    kind = (kind or "").strip()
    if kind not in FLAG_KINDS:
        raise CurationError(f"flag kind {kind!r} is not one of: {'; '.join(FLAG_KINDS)}")
    note = (note or "").strip() or None
    if kind != flag.kind and session.scalar(select(PairFlag.id).where(
            PairFlag.material_a_id == flag.material_a_id, PairFlag.material_b_id == flag.material_b_id,
            PairFlag.kind == kind)) is not None:
        raise CurationError(f"this pair already has a {kind!r} flag; edit or withdraw that one instead")
    old = _flag_text(flag)
    flag.kind, flag.note = kind, note
    if _flag_text(flag) != old:
        session.add(AuditEntry(actor=actor or current_actor(), action="update", entity="pair_flag",
                               entity_id=flag.id, old_value=old, new_value=_flag_text(flag)))
    session.flush()
    return flag


def withdraw_flag(session: Session, flag_id: int, *, actor: str | None = None) -> str:
    """Remove a flag; the audit trail keeps what it said. Returns that text."""
    flag = _stored_flag(session, flag_id)
    text = _flag_text(flag)
    session.add(AuditEntry(actor=actor or current_actor(), action="withdraw", entity="pair_flag",
                           entity_id=flag.id, old_value=text))
    session.delete(flag)
    session.flush()
    return text


def list_flags(session: Session) -> list[PairFlag]:
    return list(session.scalars(select(PairFlag).order_by(PairFlag.created_at, PairFlag.id)))
