"""The catalogue's tables (SQLAlchemy 2.0 typed declarative models).

The schema changes only through Alembic revisions in `library/catalogue/migrations/`; a test
proves these models and the migrations agree. Column names that hold a
quantity carry its unit.
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import (
    Boolean,
    Date,
    CheckConstraint,
    DateTime,
    Float,
    ForeignKey,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Text,
    UniqueConstraint,
    false,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

PROVENANCE_KINDS = ("measured", "literature", "from memory", "computed", "demo")
STEREO_STATUSES = ("defined", "partly undefined", "none")
MATERIAL_STATUSES = ("active", "retired")
COMPUTED_KINDS = ("shape", "vibration", "tunnelling")
# prohibited; restricted (a maximum level in a product category); specification required (a purity or
# composition the material must meet); allergen (to be declared on the label above a threshold)
RESTRICTION_KINDS = ("prohibited", "restricted", "specification", "allergen")


def utc_now() -> dt.datetime:
    return dt.datetime.now(dt.timezone.utc)


def _one_of(column: str, values: tuple[str, ...]) -> str:
    quoted = ", ".join(f"'{v}'" for v in values)
    return f"{column} IN ({quoted})"


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)


class Material(Base):
    """One substance as sold or made, identified by the InChIKey of its standardized structure."""

    __tablename__ = "material"
    __table_args__ = (
        CheckConstraint(_one_of("stereo_status", STEREO_STATUSES), name="stereo_status"),
        CheckConstraint(_one_of("status", MATERIAL_STATUSES), name="status"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    preferred_name: Mapped[str] = mapped_column(String(200), unique=True)
    cas_rn: Mapped[str | None] = mapped_column(String(12), unique=True)
    smiles: Mapped[str] = mapped_column(Text)
    molfile: Mapped[str] = mapped_column(Text)
    inchi: Mapped[str] = mapped_column(Text)
    inchikey: Mapped[str] = mapped_column(String(27), unique=True)
    formula: Mapped[str] = mapped_column(String(100))
    average_mass_g_per_mol: Mapped[float] = mapped_column(Float)
    monoisotopic_mass_da: Mapped[float] = mapped_column(Float)
    heavy_atom_count: Mapped[int] = mapped_column(Integer)
    stereo_status: Mapped[str] = mapped_column(String(20))
    unassigned_stereo_count: Mapped[int] = mapped_column(Integer, default=0)
    olfactive_family: Mapped[str | None] = mapped_column(String(40))
    status: Mapped[str] = mapped_column(String(10), default="active")
    restricted: Mapped[bool] = mapped_column(Boolean, default=False)
    notes: Mapped[str | None] = mapped_column(Text)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)
    updated_at: Mapped[dt.datetime] = mapped_column(
        DateTime(timezone=True), default=utc_now, onupdate=utc_now)

    synonyms: Mapped[list[Synonym]] = relationship(
        back_populates="material", cascade="all, delete-orphan", order_by="Synonym.name")
    odors: Mapped[list[MaterialOdor]] = relationship(
        back_populates="material", cascade="all, delete-orphan")
    provenance: Mapped[list[Provenance]] = relationship(
        back_populates="material", cascade="all, delete-orphan", order_by="Provenance.field")
    computed: Mapped[list[ComputedRecord]] = relationship(
        back_populates="material", cascade="all, delete-orphan")
    restrictions: Mapped[list[Restriction]] = relationship(
        back_populates="material", cascade="all, delete-orphan", order_by="Restriction.id")

    def __repr__(self) -> str:
        return f"<Material #{self.id} {self.preferred_name!r} {self.inchikey}>"


class Synonym(Base):
    __tablename__ = "synonym"
    __table_args__ = (UniqueConstraint("material_id", "name", name="uq_synonym_material_name"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    material_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    name: Mapped[str] = mapped_column(String(200), index=True)

    material: Mapped[Material] = relationship(back_populates="synonyms")


class Provenance(Base):
    """Where one curated value of a material came from."""

    __tablename__ = "provenance"
    __table_args__ = (
        UniqueConstraint("material_id", "field", name="uq_provenance_material_field"),
        CheckConstraint(_one_of("kind", PROVENANCE_KINDS), name="kind"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    material_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    field: Mapped[str] = mapped_column(String(40))
    kind: Mapped[str] = mapped_column(String(20))
    reference: Mapped[str | None] = mapped_column(Text)

    material: Mapped[Material] = relationship(back_populates="provenance")


class Restriction(Base):
    """A regulatory or standard's entry a curator recorded for a material (not a regulatory database).

    `restricted` on the material is kept equal to "has a prohibited or restricted entry", so the
    search index can leave such materials out without reading this table."""

    __tablename__ = "restriction"
    __table_args__ = (
        CheckConstraint(_one_of("kind", RESTRICTION_KINDS), name="kind"),
        CheckConstraint(_one_of("source_kind", PROVENANCE_KINDS), name="source_kind"),
        CheckConstraint("max_percent IS NULL OR (max_percent >= 0 AND max_percent <= 100)", name="max_percent"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    material_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    kind: Mapped[str] = mapped_column(String(20))
    max_percent: Mapped[float | None] = mapped_column(Float)  # maximum level, percent by mass
    product_category: Mapped[str | None] = mapped_column(String(200))
    authority: Mapped[str] = mapped_column(String(200))
    reference: Mapped[str | None] = mapped_column(Text)
    decided_on: Mapped[dt.date | None] = mapped_column(Date)
    source_kind: Mapped[str] = mapped_column(String(20))
    source_reference: Mapped[str | None] = mapped_column(Text)

    material: Mapped[Material] = relationship(back_populates="restrictions")


class OdorDescriptor(Base):
    """A term of the controlled odor vocabulary."""

    __tablename__ = "odor_descriptor"

    id: Mapped[int] = mapped_column(primary_key=True)
    term: Mapped[str] = mapped_column(String(60), unique=True)
    family: Mapped[str | None] = mapped_column(String(40))
    description: Mapped[str | None] = mapped_column(Text)


class MaterialOdor(Base):
    """An odor descriptor given to a material, with optional strength (0-1) and its source."""

    __tablename__ = "material_odor"
    __table_args__ = (
        CheckConstraint("strength IS NULL OR (strength >= 0 AND strength <= 1)", name="strength"),
        CheckConstraint(_one_of("source_kind", PROVENANCE_KINDS), name="source_kind"),
    )

    material_id: Mapped[int] = mapped_column(
        ForeignKey("material.id", ondelete="CASCADE"), primary_key=True)
    descriptor_id: Mapped[int] = mapped_column(
        ForeignKey("odor_descriptor.id", ondelete="RESTRICT"), primary_key=True, index=True)
    strength: Mapped[float | None] = mapped_column(Float)
    source_kind: Mapped[str] = mapped_column(String(20))
    source_reference: Mapped[str | None] = mapped_column(Text)

    material: Mapped[Material] = relationship(back_populates="odors")
    descriptor: Mapped[OdorDescriptor] = relationship()


class AuditEntry(Base):
    """Who changed what, when, with the old and new value."""

    __tablename__ = "audit_entry"

    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now, index=True)
    actor: Mapped[str] = mapped_column(String(100))
    action: Mapped[str] = mapped_column(String(40))
    entity: Mapped[str] = mapped_column(String(40))
    entity_id: Mapped[int | None] = mapped_column(Integer, index=True)
    field: Mapped[str | None] = mapped_column(String(60))
    old_value: Mapped[str | None] = mapped_column(Text)
    new_value: Mapped[str | None] = mapped_column(Text)


class ComputedRecord(Base):
    """A computed description of a material (shape, vibration), versioned for staleness."""

    __tablename__ = "computed_record"
    __table_args__ = (
        UniqueConstraint("material_id", "kind", "engine_name", name="uq_computed_record_material_kind_engine"),
        CheckConstraint(_one_of("kind", COMPUTED_KINDS), name="kind"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    material_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    kind: Mapped[str] = mapped_column(String(20))
    engine_name: Mapped[str] = mapped_column(String(40))
    engine_version: Mapped[str] = mapped_column(String(100))
    parameter_hash: Mapped[str] = mapped_column(String(64))
    structure_inchikey: Mapped[str] = mapped_column(String(27))
    summary_json: Mapped[str] = mapped_column(Text, default="{}")
    elapsed_s: Mapped[float | None] = mapped_column(Float)
    computed_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)

    material: Mapped[Material] = relationship(back_populates="computed")
    arrays: Mapped[list[ComputedArray]] = relationship(
        back_populates="record", cascade="all, delete-orphan")


class ComputedArray(Base):
    """One named array of a computed record, stored as little-endian float32 bytes."""

    __tablename__ = "computed_array"

    record_id: Mapped[int] = mapped_column(
        ForeignKey("computed_record.id", ondelete="CASCADE"), primary_key=True)
    name: Mapped[str] = mapped_column(String(60), primary_key=True)
    dtype: Mapped[str] = mapped_column(String(10), default="<f4")
    shape: Mapped[str] = mapped_column(String(60))
    data: Mapped[bytes] = mapped_column(LargeBinary)

    record: Mapped[ComputedRecord] = relationship(back_populates="arrays")


class ObservationSet(Base):
    """A named data set of measured values (a panel's descriptor profiles, a receptor assay...)."""

    __tablename__ = "observation_set"
    __table_args__ = (CheckConstraint(_one_of("source_kind", PROVENANCE_KINDS), name="source_kind"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(100), unique=True)
    kind: Mapped[str] = mapped_column(String(40))
    unit: Mapped[str | None] = mapped_column(String(40))
    description: Mapped[str | None] = mapped_column(Text)
    source_kind: Mapped[str] = mapped_column(String(20))
    source_reference: Mapped[str | None] = mapped_column(Text)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)


class Observation(Base):
    """One measured value: a material's response on one variable of a data set."""

    __tablename__ = "observation"
    __table_args__ = (
        UniqueConstraint("set_id", "material_id", "variable", name="uq_observation_set_material_variable"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    set_id: Mapped[int] = mapped_column(ForeignKey("observation_set.id", ondelete="CASCADE"), index=True)
    material_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    variable: Mapped[str] = mapped_column(String(100))
    value: Mapped[float] = mapped_column(Float)


class PairFlag(Base):
    """A curator's or chemist's flag on a pair of materials (stored with the lower id first)."""

    __tablename__ = "pair_flag"
    __table_args__ = (CheckConstraint("material_a_id < material_b_id", name="ordered_pair"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    material_a_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    material_b_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    kind: Mapped[str] = mapped_column(String(60))
    note: Mapped[str | None] = mapped_column(Text)
    created_by: Mapped[str] = mapped_column(String(100))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)

    material_a: Mapped[Material] = relationship(foreign_keys=[material_a_id])
    material_b: Mapped[Material] = relationship(foreign_keys=[material_b_id])


class CatalogueState(Base):
    """A single row whose revision grows with every committed change (keys the search index cache)."""

    __tablename__ = "catalogue_state"

    id: Mapped[int] = mapped_column(primary_key=True)
    revision: Mapped[int] = mapped_column(Integer, default=0)


USER_ROLES = ("reader", "curator", "admin")
JOB_STATES = ("queued", "running", "finished", "failed", "interrupted")


class User(Base):
    """A person who signs in to the web interface: readers see everything, curators also write, admins
    also manage accounts.

    `session_generation` is written into every session cookie at sign-in; signing out, a password or role
    change and disabling the account move it on, so every older cookie stops working at once.
    """

    __tablename__ = "user_account"
    __table_args__ = (CheckConstraint(_one_of("role", USER_ROLES), name="role"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    username: Mapped[str] = mapped_column(String(60), unique=True)
    password_hash: Mapped[str] = mapped_column(String(255))
    role: Mapped[str] = mapped_column(String(10), default="reader")
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)
    session_generation: Mapped[int] = mapped_column(Integer, default=0, server_default="0")
    disabled: Mapped[bool] = mapped_column(Boolean, default=False, server_default=false())


class BackgroundJob(Base):
    """Long work started from the web interface (a recompute), with its progress persisted."""

    __tablename__ = "background_job"
    __table_args__ = (CheckConstraint(_one_of("state", JOB_STATES), name="state"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    kind: Mapped[str] = mapped_column(String(40))
    description: Mapped[str] = mapped_column(Text, default="")
    parameters_json: Mapped[str] = mapped_column(Text, default="{}")
    state: Mapped[str] = mapped_column(String(12), default="queued", index=True)
    total: Mapped[int] = mapped_column(Integer, default=0)
    done: Mapped[int] = mapped_column(Integer, default=0)
    failed: Mapped[int] = mapped_column(Integer, default=0)
    message: Mapped[str | None] = mapped_column(Text)
    created_by: Mapped[str] = mapped_column(String(100))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)
    started_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    finished_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))


class PairClassDefinition(Base):
    """A user's pair class: materials related by a functional-group swap written as reaction SMARTS."""

    __tablename__ = "pair_class"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(60), unique=True)
    reaction_smarts: Mapped[str] = mapped_column(Text)
    description: Mapped[str | None] = mapped_column(Text)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)


class CalibratedMetric(Base):
    """Blend weights learned from an observation source, stamped with the source and its content hash."""

    __tablename__ = "calibrated_metric"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(60), unique=True)
    weights_json: Mapped[str] = mapped_column(Text)  # {metric: non-negative weight on its percentile}
    observed_source: Mapped[str] = mapped_column(String(100))  # 'descriptors' or an observation set name
    observed_revision: Mapped[str] = mapped_column(String(64))  # hash of the observations it was fitted on
    report_json: Mapped[str] = mapped_column(Text)  # cross-validated figures
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)


class StoredReceptorPanel(Base):
    """A user's virtual receptor panel: receptors as JSON [{"gap_ev": g, "lambda_ev": l or null}, ...]."""

    __tablename__ = "receptor_panel"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(60), unique=True)
    receptors_json: Mapped[str] = mapped_column(Text)
    note: Mapped[str | None] = mapped_column(Text)
    created_by: Mapped[str] = mapped_column(String(100))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)


class StoredBasePreset(Base):
    """A curator's base preset (the groups a product base usually attacks), or a curator's version of a
    built-in one, which it then replaces: groups as a JSON list of group names or SMARTS."""

    __tablename__ = "base_preset"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(60), unique=True)
    groups_json: Mapped[str] = mapped_column(Text)
    why: Mapped[str | None] = mapped_column(Text)
    source: Mapped[str] = mapped_column(String(500))
    updated_by: Mapped[str] = mapped_column(String(100))
    updated_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utc_now)


class MaterialComponent(Base):
    """A recorded mixture and one of its components (both catalogue materials)."""

    __tablename__ = "material_component"
    __table_args__ = (
        UniqueConstraint("mixture_id", "component_id", name="uq_material_component_pair"),
        CheckConstraint("mixture_id <> component_id", name="not_itself"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    mixture_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
    component_id: Mapped[int] = mapped_column(ForeignKey("material.id", ondelete="CASCADE"), index=True)
