"""The store's tests run on SQLite, and on PostgreSQL too when LEXIGROWTH_TEST_DATABASE_URL is set.

The PostgreSQL database is emptied before and after each test (the store's tables and Alembic's
version table), so every test starts from an empty database on both backends.
"""

from __future__ import annotations

import os

import pytest
from sqlalchemy import text
from sqlmodel import SQLModel

from app.store.db import create_store_engine, make_engine

URLS = ["sqlite"] + (["postgresql"] if os.environ.get("LEXIGROWTH_TEST_DATABASE_URL") else [])


def empty_database(url: str) -> None:
    engine = create_store_engine(url)
    SQLModel.metadata.drop_all(engine)
    with engine.begin() as connection:
        connection.execute(text("DROP TABLE IF EXISTS alembic_version"))
    engine.dispose()


@pytest.fixture(params=URLS)
def database_url(request, tmp_path):
    """The URL of an empty database (nothing created yet)."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'store.sqlite3'}"
    else:
        url = os.environ["LEXIGROWTH_TEST_DATABASE_URL"]
        empty_database(url)
        yield url
        empty_database(url)


@pytest.fixture
def engine(database_url):
    engine = make_engine(database_url)
    yield engine
    engine.dispose()
