"""Alembic environment of the store: the revisions in ``versions/`` build ``SQLModel.metadata``.

The application runs the migrations on its own connection (``config.attributes["connection"]``, see
``app.store.db.upgrade_to_head``). Run by hand (alembic.ini at the repository root), the database is the
one of ``-x url=...``, else the one of the application settings (``LEXIGROWTH_DATABASE_URL``).
"""

from __future__ import annotations

from logging.config import fileConfig

from alembic import context
from sqlalchemy.engine import Connection
from sqlmodel import SQLModel
from sqlmodel.sql.sqltypes import AutoString, UTCDateTime

from app.config import get_settings
from app.store import tables  # noqa: F401  (registers the tables on SQLModel.metadata)
from app.store.db import create_store_engine

config = context.config
if config.config_file_name is not None:  # by hand only: the application keeps its own logging
    fileConfig(config.config_file_name)


def _render_item(kind: str, item, _autogen_context) -> str | bool:
    """Write SQLModel's column types as plain SQLAlchemy ones in generated revisions."""
    if kind == "type" and isinstance(item, AutoString):
        return "sa.String()"
    if kind == "type" and isinstance(item, UTCDateTime):
        return "sa.DateTime(timezone=True)"
    return False


def _url() -> str:
    return context.get_x_argument(as_dictionary=True).get("url") or get_settings().resolved_database_url


def _run(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=SQLModel.metadata,
        render_as_batch=connection.dialect.name == "sqlite",  # SQLite alters a table by copying it
        render_item=_render_item,
    )
    with context.begin_transaction():
        context.run_migrations()


if context.is_offline_mode():  # `alembic upgrade head --sql`: print the SQL instead of running it
    context.configure(
        url=_url(), target_metadata=SQLModel.metadata, literal_binds=True, render_item=_render_item
    )
    with context.begin_transaction():
        context.run_migrations()
elif (given := config.attributes.get("connection")) is not None:
    _run(given)
else:
    engine = create_store_engine(_url())
    with engine.connect() as own:
        _run(own)
    engine.dispose()
