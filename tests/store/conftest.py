"""The store's tests run on SQLite, and on PostgreSQL too when LEXIGROWTH_TEST_DATABASE_URL is set."""

from __future__ import annotations

import os

import pytest
from sqlmodel import SQLModel

from app.store.db import make_engine

URLS = ["sqlite"] + (["postgresql"] if os.environ.get("LEXIGROWTH_TEST_DATABASE_URL") else [])


@pytest.fixture(params=URLS)
def engine(request, tmp_path):
    if request.param == "sqlite":
        engine = make_engine(f"sqlite:///{tmp_path / 'store.sqlite3'}")
        yield engine
    else:
        engine = make_engine(os.environ["LEXIGROWTH_TEST_DATABASE_URL"])
        yield engine
        SQLModel.metadata.drop_all(engine)
    engine.dispose()
