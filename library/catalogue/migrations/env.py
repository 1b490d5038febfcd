"""Alembic environment: the only way olibra's schema changes."""

from alembic import context
from sqlalchemy import create_engine

from library.catalogue.models import Base

config = context.config
target_metadata = Base.metadata


def run_migrations_online() -> None:
    engine = config.attributes.get("engine") or create_engine(config.get_main_option("sqlalchemy.url"))
    with engine.begin() as connection:
        context.configure(
            connection=connection,
            target_metadata=target_metadata,
            render_as_batch=connection.dialect.name == "sqlite",
            compare_type=True,
        )
        context.run_migrations()


if context.is_offline_mode():
    raise SystemExit("olibra migrations run online only: use `olibra init`")
run_migrations_online()
