"""Where the catalogue lives and how to open it.

SQLite is the embedded default (WAL journal, foreign keys on, a busy timeout;
write transactions start with BEGIN IMMEDIATE so that a writer waits for another
to finish instead of failing when it upgrades a read to a write);
any SQLAlchemy URL works, given by `--db URL` or the OLIBRA_DB environment
variable. Alembic owns the schema: `upgrade` brings a database to the newest
revision and `open_catalogue` refuses one that is not there yet.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from importlib import resources
from pathlib import Path
from typing import Iterator

import platformdirs
from sqlalchemy import create_engine, event, inspect, select, text, update
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import ArgumentError, NoSuchModuleError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

from library.catalogue.models import BackgroundJob, CatalogueState, User
from library.errors import OlibraError, Remedy

ENVIRONMENT_VARIABLE = "OLIBRA_DB"
DEFAULT_FILE_NAME = "catalogue.sqlite"
SQLITE_BUSY_TIMEOUT_MS = 10_000
WRITE_OPTION = "olibra_write"  # execution option: this connection's transactions write (BEGIN IMMEDIATE)
# The Alembic environment and versions are package data (library/catalogue/migrations/).
MIGRATIONS_DIR = Path(str(resources.files("library.catalogue") / "migrations"))


class CatalogueError(OlibraError):
    """The catalogue cannot be opened or is not in the expected state."""


class CatalogueBusy(OlibraError):
    """Another writer held the catalogue longer than we could wait; nothing was changed."""


def default_url(*, here: bool = False) -> str:
    """SQLite file in the user's data directory, or in the working directory when `here`."""
    folder = Path.cwd() if here else Path(platformdirs.user_data_dir("olibra", appauthor=False))
    return f"sqlite:///{folder / DEFAULT_FILE_NAME}"


def resolve_url(url: str | None = None, *, here: bool = False) -> str:
    """The catalogue URL: the argument, else $OLIBRA_DB, else the default file."""
    return url or os.environ.get(ENVIRONMENT_VARIABLE) or default_url(here=here)


def describe_url(url: str) -> str:
    """The URL with any password hidden, for messages."""
    try:
        return make_url(url).render_as_string(hide_password=True)
    except ArgumentError:
        return url


def _set_sqlite_pragmas(dbapi_connection, _record) -> None:
    # Let SQLAlchemy, not the sqlite3 module, decide where transactions begin, so
    # that rollbacks and savepoints work (the recipe from SQLAlchemy's SQLite notes).
    dbapi_connection.isolation_level = None
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.close()


def make_engine(url: str, *, create_folder: bool = False) -> Engine:
    """An SQLAlchemy engine for `url`, with olibra's SQLite settings where it applies."""
    try:
        parsed = make_url(url)
    except ArgumentError:
        raise CatalogueError(
            f"{url!r} is not a database URL; use e.g. sqlite:///path/catalogue.sqlite "
            "or postgresql+psycopg://user@host/dbname") from None
    if parsed.get_backend_name() == "sqlite":
        database = parsed.database
        if database and database != ":memory:":
            folder = Path(database).expanduser().resolve().parent
            if create_folder:
                folder.mkdir(parents=True, exist_ok=True)
            elif not folder.exists():
                raise CatalogueError(f"folder {folder} does not exist; create it or choose another --db")
    try:
        engine = create_engine(url, future=True)
    except NoSuchModuleError:
        raise CatalogueError(f"no database driver for {describe_url(url)}; "
                             "for PostgreSQL install olibra[postgres]") from None
    except ImportError as exc:
        raise CatalogueError(f"database driver missing for {describe_url(url)}: {exc}; "
                             "for PostgreSQL install olibra[postgres]") from None
    if engine.dialect.name == "sqlite":
        event.listen(engine, "connect", _set_sqlite_pragmas)
        event.listen(engine, "begin", _begin_sqlite)
    return engine


def _begin_sqlite(connection) -> None:
    # A writer takes the write lock at once (waiting up to the busy timeout for another writer);
    # a deferred transaction that reads first and writes later fails at once if another writer
    # committed in between, which the busy timeout cannot help.
    immediate = connection.get_execution_options().get(WRITE_OPTION)
    connection.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")


def writer_engine(engine: Engine) -> Engine:
    """The same engine (pool, settings) whose transactions are write transactions."""
    return engine.execution_options(**{WRITE_OPTION: True})


def is_busy(exc: BaseException) -> bool:
    """True for SQLite's 'database is locked' (another writer held the catalogue past the busy timeout)
    and PostgreSQL's lock timeouts."""
    text = str(getattr(exc, "orig", exc) or "").lower()
    return "database is locked" in text or "database table is locked" in text or "lock timeout" in text


def busy_message() -> str:
    seconds = SQLITE_BUSY_TIMEOUT_MS / 1000
    return (f"the catalogue is busy: another writer (an import, a recompute or another edit) held it for more "
            f"than {seconds:g} s; nothing was changed; try again when it has finished")


# The newest Alembic revision this olibra's schema needs. Written out so that opening a catalogue
# needs no Alembic import (about 0.2 s at every `olibra` start); tests/test_migrations.py checks it
# against the migration scripts, so a new migration that forgets to move it fails the tests.
SCHEMA_HEAD = "7b3e9f5a2c48"
VERSION_TABLE = "alembic_version"  # Alembic's default version table


def alembic_config(engine: Engine | None = None):
    from alembic.config import Config

    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    if engine is not None:
        config.attributes["engine"] = engine
    return config


def head_revision() -> str:
    """The head revision as Alembic reads it from the migration scripts (slow to import; see SCHEMA_HEAD)."""
    from alembic.script import ScriptDirectory

    return ScriptDirectory.from_config(alembic_config()).get_current_head()


def current_revision(engine: Engine) -> str | None:
    """The revision the database's schema is at, read from Alembic's version table; None when it has none."""
    with engine.connect() as connection:
        if not inspect(connection).has_table(VERSION_TABLE):
            return None
        return connection.execute(text(f"SELECT version_num FROM {VERSION_TABLE}")).scalar()


def upgrade(engine: Engine) -> str:
    """Bring the schema to the newest Alembic revision; returns that revision."""
    from alembic import command

    try:
        command.upgrade(alembic_config(engine), "head")
    except OperationalError as exc:
        raise CatalogueError(f"cannot upgrade {describe_url(str(engine.url))}: {exc.orig}") from None
    return head_revision()


def check_schema(engine: Engine) -> None:
    """Refuse a database whose schema is missing or older than this olibra."""
    try:
        current = current_revision(engine)
    except OperationalError as exc:
        raise CatalogueError(f"cannot open catalogue {describe_url(str(engine.url))}: {exc.orig}") from None
    if current is None:
        raise CatalogueError(
            f"{describe_url(str(engine.url))} holds no olibra catalogue yet; create it first",
            remedy=Remedy.INIT_CATALOGUE)
    if current != SCHEMA_HEAD:
        raise CatalogueError(
            f"catalogue schema is at revision {current}, this olibra needs {SCHEMA_HEAD}; upgrade it first",
            remedy=Remedy.INIT_CATALOGUE)


# Rows that are not catalogue content: changing them leaves the revision alone.
NOT_CATALOGUE = (CatalogueState, User, BackgroundJob)


def _bump_revision(session: Session, _flush_context, _instances) -> None:
    """Every flush that changes catalogue rows moves the revision on by one."""
    if any(not isinstance(o, NOT_CATALOGUE) for o in (*session.new, *session.dirty, *session.deleted)):
        bump_revision(session)


def bump_revision(session: Session) -> None:
    """Move the catalogue revision on by one in this transaction (once per transaction). Flushes of ORM
    objects do it themselves; a write through Core statements (bulk record inserts) calls it."""
    if session.info.get("revision_bumped"):
        return
    session.info["revision_bumped"] = True
    result = session.execute(update(CatalogueState).values(revision=CatalogueState.revision + 1))
    if result.rowcount == 0:
        session.add(CatalogueState(id=1, revision=1))


def _reset_bump(session: Session) -> None:
    session.info.pop("revision_bumped", None)


def session_factory(engine: Engine) -> sessionmaker[Session]:
    factory = sessionmaker(bind=engine, expire_on_commit=False)
    event.listen(factory, "before_flush", _bump_revision)
    event.listen(factory, "after_commit", _reset_bump)
    event.listen(factory, "after_rollback", _reset_bump)
    return factory


class Catalogue:
    """An opened catalogue: an engine and session factories (reading, writing), schema checked."""

    def __init__(self, url: str, *, check: bool = True, create_folder: bool = False):
        self.url = url
        self.engine = make_engine(url, create_folder=create_folder)
        if check:
            check_schema(self.engine)
        self.sessions = session_factory(self.engine)
        self.writer_sessions = session_factory(writer_engine(self.engine))

    @contextmanager
    def transaction(self) -> Iterator[Session]:
        """One unit of work that writes: commits on success, rolls everything back on any error.

        On SQLite it starts with BEGIN IMMEDIATE: it waits (up to the busy timeout) while another
        writer holds the catalogue, rather than failing halfway."""
        with self.writer_sessions() as session:
            with session.begin():
                yield session

    @contextmanager
    def reading(self) -> Iterator[Session]:
        with self.sessions() as session:
            yield session

    def revision(self) -> int:
        with self.sessions() as session:
            value = session.scalar(select(CatalogueState.revision).where(CatalogueState.id == 1))
            return int(value or 0)

    def dispose(self) -> None:
        self.engine.dispose()


def initialize(url: str) -> Catalogue:
    """Create or upgrade the catalogue at `url` and return it opened."""
    engine = make_engine(url, create_folder=True)
    upgrade(engine)
    engine.dispose()
    return Catalogue(url)
