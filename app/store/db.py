"""The database engine: SQLite file by default (WAL mode), any SQLAlchemy URL by configuration.

The schema is kept by Alembic (revisions in ``app/store/migrations``): opening a store upgrades it to the
newest revision, and a store made before migrations existed is taken over as it is.
"""

from __future__ import annotations

import os
import sqlite3
import time
from collections.abc import Iterator
from contextlib import contextmanager
from functools import lru_cache
from pathlib import Path
from threading import Lock

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import event, text
from sqlalchemy.engine import Connection, Engine, make_url
from sqlmodel import Session, create_engine

from app.store import tables  # noqa: F401  (registers the tables on SQLModel.metadata)

MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"
# Key of the PostgreSQL advisory lock that lets one process at a time migrate (any fixed 64-bit number).
_MIGRATION_LOCK = 0x4C657869_67726F77
_WAL_SWITCH_TRIES = 100  # 50 ms apart
SQLITE_POOL_SIZE = 16
# Alembic keeps the running migration in module globals: one migration at a time in a process.
_ALEMBIC_IN_USE = Lock()


def _use_wal(cursor: sqlite3.Cursor) -> None:
    """Put the file in WAL mode (a setting kept in the file).

    Switching a new file needs it alone for a moment, and SQLite answers "database is locked" at once,
    without waiting, to a connection that asks meanwhile: that one tries again (for 5 s at most).
    """
    for attempt in range(_WAL_SWITCH_TRIES):
        try:
            cursor.execute("PRAGMA journal_mode=WAL")
            return
        except sqlite3.OperationalError as exc:
            if exc.sqlite_errorcode != sqlite3.SQLITE_BUSY or attempt == _WAL_SWITCH_TRIES - 1:
                raise
            time.sleep(0.05)


def _private_file(path: Path) -> None:
    """Create the SQLite file (and its folder, when missing) readable by its owner only: modes 0600 and
    0700. SQLite gives its -wal and -shm files the mode of the database file.

    An existing file is not opened: closing any descriptor of a file drops every POSIX lock the process
    holds on it (fcntl(2)), those of its open SQLite connections too, and another process closing its
    connection would then take itself for the last one and delete the write-ahead log still in use."""
    path.parent.mkdir(mode=0o700, parents=True, exist_ok=True)
    try:
        os.close(os.open(path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o600))
    except FileExistsError:
        pass
    if path.stat().st_mode & 0o077:
        path.chmod(0o600)


def create_store_engine(url: str) -> Engine:
    """The engine alone, schema untouched; SQLite gets WAL, foreign keys and a busy timeout."""
    is_sqlite = url.startswith("sqlite")
    database = make_url(url).database
    if is_sqlite and database and database != ":memory:":
        _private_file(Path(database))
    if is_sqlite:
        # One connection per request thread kept open (a new SQLite connection costs its pragmas each time);
        # a PostgreSQL server counts its connections, so there SQLAlchemy's default pool stays.
        engine = create_engine(
            url, connect_args={"check_same_thread": False, "timeout": 30}, pool_size=SQLITE_POOL_SIZE
        )
    else:
        engine = create_engine(url)
    if is_sqlite:

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_connection, _record) -> None:  # pragma: no cover - driver callback
            cursor = dbapi_connection.cursor()
            _use_wal(cursor)
            cursor.execute("PRAGMA foreign_keys=ON")
            cursor.execute("PRAGMA synchronous=NORMAL")
            cursor.close()

    return engine


def alembic_config() -> Config:
    """Alembic's configuration for the store's revisions (no alembic.ini needed)."""
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    return config


@lru_cache(maxsize=1)
def head_revision() -> str:
    """The newest revision (read once per process)."""
    head = ScriptDirectory.from_config(alembic_config()).get_current_head()
    assert head is not None, "no revision in app/store/migrations/versions"
    return head


def current_revision(connection: Connection) -> str | None:
    """The revision the database is at; None for an empty database or one made before migrations."""
    return MigrationContext.configure(connection).get_current_revision()


def upgrade_to_head(engine: Engine) -> None:
    """Run the revisions the database lacks, in one transaction; only a read when it is up to date.

    Processes that open a new store together migrate one after the other: the migrating transaction
    first takes the database's write lock (SQLite) or an advisory lock (PostgreSQL), then looks again.
    Threads of one process also take turns, whatever their databases.
    """
    with engine.connect() as connection:
        if current_revision(connection) == head_revision():
            return
    with engine.begin() as connection:
        if connection.dialect.name == "sqlite":
            connection.exec_driver_sql("BEGIN IMMEDIATE")  # also makes the DDL transactional
        elif connection.dialect.name == "postgresql":
            connection.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": _MIGRATION_LOCK})
        if current_revision(connection) == head_revision():
            return
        config = alembic_config()
        config.attributes["connection"] = connection
        with _ALEMBIC_IN_USE:
            command.upgrade(config, "head")


def make_engine(url: str) -> Engine:
    """The engine of a store whose schema is upgraded to the newest revision."""
    engine = create_store_engine(url)
    upgrade_to_head(engine)
    return engine


@contextmanager
def transaction(engine: Engine) -> Iterator[Session]:
    """One unit of work: committed when the block ends, rolled back entirely on any error."""
    with Session(engine) as session:
        try:
            yield session
            session.commit()
        except BaseException:
            session.rollback()
            raise
