"""Schema migrations: a new database is built by the Alembic revisions, an older store is taken over.

Reference for "the revisions build exactly the models' schema": Alembic's own autogenerate comparison
(``alembic.autogenerate.compare_metadata``), which lists every table, column, type, index and key that
differs between a live database and ``SQLModel.metadata``.
"""

from __future__ import annotations

import threading
from datetime import UTC, datetime

from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import inspect, text
from sqlmodel import SQLModel

from app.store import corpora as store
from app.store import db
from tests.store.test_corpora import record

STORE_TABLES = set(SQLModel.metadata.tables)


def table_names(engine) -> set[str]:
    return set(inspect(engine).get_table_names())


def revision_rows(engine) -> list[str]:
    with engine.connect() as connection:
        return list(connection.execute(text("SELECT version_num FROM alembic_version")).scalars())


def test_new_database_gets_the_schema_of_the_models(database_url):
    engine = db.make_engine(database_url)
    assert table_names(engine) == STORE_TABLES | {"alembic_version"}
    assert revision_rows(engine) == [db.head_revision()]
    with engine.connect() as connection:
        assert compare_metadata(MigrationContext.configure(connection), SQLModel.metadata) == []
    engine.dispose()


def test_store_made_before_migrations_is_taken_over_with_its_data(database_url):
    # What make_engine did before migrations existed: create_all. This store was last opened by a
    # version without saved comparisons, so that table is missing.
    legacy = db.create_store_engine(database_url)
    SQLModel.metadata.create_all(
        legacy, tables=[t for t in SQLModel.metadata.sorted_tables if t.name != "savedcomparison"]
    )
    cid = store.save_corpus(legacy, record("old"))
    store.store_cached_result(legacy, cid, "fits", "test", {"x": 1})
    assert "alembic_version" not in table_names(legacy)
    legacy.dispose()

    engine = db.make_engine(database_url)
    assert table_names(engine) == STORE_TABLES | {"alembic_version"}
    assert revision_rows(engine) == [db.head_revision()]
    assert store.frequencies(engine, cid) == record().counts
    assert store.spectrum_pairs(engine, cid) == record().spectrum
    assert store.cached_result(engine, cid, "fits", "test") == {"x": 1}
    engine.dispose()


def test_naive_utc_timestamps_of_older_sqlite_files_read_as_utc(tmp_path):
    # SQLite has no time-zone type: earlier versions wrote UTC as text without an offset.
    url = f"sqlite:///{tmp_path / 'old.sqlite3'}"
    legacy = db.create_store_engine(url)
    SQLModel.metadata.create_all(legacy)
    cid = store.save_corpus(legacy, record("old"))
    with legacy.begin() as connection:
        connection.execute(text("UPDATE corpus SET created_at = '2024-01-02 03:04:05.000000'"))
    legacy.dispose()
    engine = db.make_engine(url)
    assert store.get_corpus(engine, cid).created_at == datetime(2024, 1, 2, 3, 4, 5, tzinfo=UTC)
    assert store.summary(store.get_corpus(engine, cid))["created_at"] == "2024-01-02T03:04:05+00:00"
    engine.dispose()


def test_downgrade_to_base_drops_the_schema_and_upgrade_rebuilds_it(database_url):
    engine = db.make_engine(database_url)
    with engine.begin() as connection:
        config = db.alembic_config()
        config.attributes["connection"] = connection
        command.downgrade(config, "base")
    assert table_names(engine) & STORE_TABLES == set()
    assert revision_rows(engine) == []
    db.upgrade_to_head(engine)
    assert table_names(engine) == STORE_TABLES | {"alembic_version"}
    assert revision_rows(engine) == [db.head_revision()]
    engine.dispose()


def test_up_to_date_database_is_only_read(database_url, monkeypatch):
    engine = db.make_engine(database_url)
    cid = store.save_corpus(engine, record())
    engine.dispose()

    def no_migration(*_args, **_kwargs):
        raise AssertionError("a database at the newest revision was migrated again")

    monkeypatch.setattr(db.command, "upgrade", no_migration)
    again = db.make_engine(database_url)
    assert store.frequencies(again, cid) == record().counts
    again.dispose()


def start_together(urls: list[str]) -> None:
    """Upgrade the databases of ``urls`` from as many threads at once; fail on any error or deadlock."""
    barrier = threading.Barrier(len(urls))
    errors: list[BaseException] = []

    def start(url: str) -> None:
        engine = db.create_store_engine(url)
        try:
            barrier.wait()
            db.upgrade_to_head(engine)
        except BaseException as exc:  # collected: an exception in a thread would not fail the test
            errors.append(exc)
        finally:
            engine.dispose()

    threads = [threading.Thread(target=start, args=(url,), daemon=True) for url in urls]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=60)
    assert not any(thread.is_alive() for thread in threads), "the starts deadlocked"
    assert errors == []


def test_processes_opening_a_new_store_together_migrate_it_once(database_url):
    start_together([database_url] * 4)
    engine = db.create_store_engine(database_url)
    assert revision_rows(engine) == [db.head_revision()]
    assert table_names(engine) == STORE_TABLES | {"alembic_version"}
    engine.dispose()


def test_threads_migrating_different_stores_take_turns(tmp_path):
    urls = [f"sqlite:///{tmp_path / f'store{i}.sqlite3'}" for i in range(4)]
    start_together(urls)
    for url in urls:
        engine = db.create_store_engine(url)
        assert revision_rows(engine) == [db.head_revision()]
        engine.dispose()


def test_corpus_ids_are_never_given_twice_after_the_upgrade(database_url):
    # A store of revision 0005 (before issued ids): corpora 1 and 2, and a saved comparison that still
    # names id 9 (deleted since). The upgrade's sequence starts after all of them.
    engine = db.make_engine(database_url)
    first, second = (store.save_corpus(engine, record(name)) for name in ("a", "b"))
    with engine.begin() as connection:
        config = db.alembic_config()
        config.attributes["connection"] = connection
        command.downgrade(config, "0005_corpus_kinds")
        connection.execute(
            text(
                "INSERT INTO savedcomparison (slug, corpus_ids_json, settings_json, snapshot_json, "
                "program_version, created_at, public) VALUES ('s', :ids, '{}', '{}', 'old', :now, false)"
            ),
            {"ids": f"[{first}, 9]", "now": datetime.now(UTC)},
        )
    assert "issued_corpus_id" not in table_names(engine)
    db.upgrade_to_head(engine)
    third = store.save_corpus(engine, record("c"))
    assert third == 10
    store.delete_corpus(engine, third)  # the largest id goes: SQLite alone would give it again
    store.delete_corpus(engine, second)
    assert store.save_corpus(engine, record("d")) == 11
    engine.dispose()
