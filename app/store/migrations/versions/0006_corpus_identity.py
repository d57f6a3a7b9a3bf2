"""Corpus ids that are never given twice, and saved comparisons that remember each corpus as it was saved.

``issued_corpus_id`` hands out corpus ids from a sequence that never goes back (SQLite AUTOINCREMENT, a
PostgreSQL sequence). SQLite gives a new row ``max(id) + 1``, so deleting the corpus with the largest id
used to give its id to the next upload; the ``corpus`` table itself cannot be given AUTOINCREMENT in place
(SQLite would copy and drop it, cascading to every word count: see 0002). The sequence starts after every
id known to the store: corpora, saved comparisons and tasks, so an id that a saved comparison or a task
still names is not given again.

``savedcomparison.corpora_json``: each saved corpus's id, owner, content hash and time of counting when the
comparison was saved (NULL for comparisons saved before this revision).

Like 0002, only what is missing is added.

Revision ID: 0006_corpus_identity
Revises: 0005_corpus_kinds
Create Date: 2026-12-04
"""

from __future__ import annotations

import json

import sqlalchemy as sa
from alembic import context, op

revision = "0006_corpus_identity"
down_revision = "0005_corpus_kinds"
branch_labels = None
depends_on = None

ISSUED = "issued_corpus_id"


def _largest_known_id(bind: sa.Connection) -> int:
    """The largest corpus id the store knows of: stored, saved in a comparison or named by a task."""
    largest = bind.execute(sa.text("SELECT COALESCE(MAX(id), 0) FROM corpus")).scalar() or 0
    tasks = bind.execute(sa.text("SELECT COALESCE(MAX(corpus_id), 0) FROM backgroundtask")).scalar() or 0
    saved = [
        int(i)
        for (ids,) in bind.execute(sa.text("SELECT corpus_ids_json FROM savedcomparison"))
        for i in json.loads(ids)
        if isinstance(i, int)
    ]
    return max([largest, tasks, *saved])


def upgrade() -> None:
    tables: set[str] = set()
    columns: set[str] = set()
    if not context.is_offline_mode():
        inspector = sa.inspect(op.get_bind())
        tables = set(inspector.get_table_names())
        columns = {c["name"] for c in inspector.get_columns("savedcomparison")}
    if "corpora_json" not in columns:
        op.add_column("savedcomparison", sa.Column("corpora_json", sa.Text(), nullable=True))
    if ISSUED in tables:
        return
    op.create_table(
        ISSUED,
        sa.Column("id", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sqlite_autoincrement=True,
    )
    if context.is_offline_mode():
        return
    bind = op.get_bind()
    largest = _largest_known_id(bind)
    if largest:  # the sequence goes on from there (SQLite: an explicit id moves AUTOINCREMENT's counter)
        bind.execute(sa.text(f"INSERT INTO {ISSUED} (id) VALUES (:id)"), {"id": largest})
        if bind.dialect.name == "postgresql":
            bind.execute(
                sa.text(f"SELECT setval(pg_get_serial_sequence('{ISSUED}', 'id'), :id)"), {"id": largest}
            )


def downgrade() -> None:
    op.drop_table(ISSUED)
    op.drop_column("savedcomparison", "corpora_json")
