"""The Alembic migrations and the SQLAlchemy models describe the same schema, on every backend."""

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from library.catalogue.database import (
    SCHEMA_HEAD, CatalogueError, Catalogue, current_revision, head_revision, initialize, make_engine)
from library.catalogue.models import Base
from library.errors import Remedy


def test_models_and_migrations_agree(catalogue_url):
    opened = initialize(catalogue_url)
    with opened.engine.connect() as connection:
        context = MigrationContext.configure(connection, opts={"compare_type": True})
        assert compare_metadata(context, Base.metadata) == []
    opened.dispose()


def test_init_is_idempotent_and_reaches_head(catalogue_url):
    initialize(catalogue_url).dispose()
    opened = initialize(catalogue_url)
    with opened.engine.connect() as connection:
        assert MigrationContext.configure(connection).get_current_revision() == head_revision()
    assert current_revision(opened.engine) == head_revision()  # olibra's own read of the version table
    opened.dispose()


def test_written_out_schema_head_is_the_migration_scripts_head():
    # opening a catalogue compares with SCHEMA_HEAD; a new migration must move it (Alembic is the reference)
    assert SCHEMA_HEAD == head_revision()


def test_older_schema_is_refused_with_advice(sqlite_url):
    from alembic import command

    from library.catalogue.database import alembic_config

    engine = make_engine(sqlite_url)
    command.upgrade(alembic_config(engine), "head")
    command.downgrade(alembic_config(engine), "-1")
    with pytest.raises(CatalogueError, match=r"schema is at revision \w+, this olibra needs " + SCHEMA_HEAD):
        Catalogue(sqlite_url)
    engine.dispose()


def test_uninitialized_catalogue_is_refused_with_advice(sqlite_url):
    make_engine(sqlite_url).dispose()
    with pytest.raises(CatalogueError, match="holds no olibra catalogue yet; create it first") as refused:
        Catalogue(sqlite_url)
    assert refused.value.remedy == Remedy.INIT_CATALOGUE  # each front end names its own way to do that


def test_tunnelling_kind_migration_keeps_every_records_arrays(catalogue_url):
    # the kind-check change rebuilds computed_record on SQLite; its arrays (ON DELETE CASCADE) must survive
    from alembic import command

    from library.catalogue import curation, records
    from library.catalogue.database import alembic_config
    from catalogue_helpers import draft

    opened = initialize(catalogue_url)
    stamp = records.EngineStamp("shape", "test-engine", "1", {})
    with opened.transaction() as session:
        material = curation.add_material(session, draft("CCO", "Ethanol")).material
        records.save_record(session, material, stamp, {"values": [1.0, 2.0]}, {})
        material_id = material.id
    config = alembic_config(opened.engine)
    for step in (lambda: command.downgrade(config, "5c1e0a7d2b94"), lambda: command.upgrade(config, "head")):
        step()
        with opened.reading() as session:
            kept = records.load_records(session, "shape", "test-engine")
            assert kept[material_id].arrays["values"].tolist() == [1.0, 2.0]
    opened.dispose()
