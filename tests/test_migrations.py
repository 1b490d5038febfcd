"""The Alembic migrations and the SQLAlchemy models describe the same schema, on every backend."""

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from library.catalogue.database import CatalogueError, Catalogue, head_revision, initialize, make_engine
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
    opened.dispose()


def test_uninitialized_catalogue_is_refused_with_advice(sqlite_url):
    make_engine(sqlite_url).dispose()
    with pytest.raises(CatalogueError, match="holds no olibra catalogue yet; create it first") as refused:
        Catalogue(sqlite_url)
    assert refused.value.remedy == Remedy.INIT_CATALOGUE  # each front end names its own way to do that
