"""Fair shares of the task queue: whom each task works for (``member``) and when it was last claimed
(``claimed_at``, indexed: the claim looks up each member's recent claims). Both are nullable; a task queued
before this revision belongs to no member.

Like 0005, only what is missing is added (a store made by ``SQLModel.metadata.create_all`` has it already).

Revision ID: 0007_task_members
Revises: 0006_corpus_identity
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context, op

revision = "0007_task_members"
down_revision = "0006_corpus_identity"
branch_labels = None
depends_on = None

TABLE = "backgroundtask"
CLAIMED_INDEX = "ix_backgroundtask_claimed_at"


def _new_columns() -> list[sa.Column]:
    return [
        sa.Column("member", sa.String(), nullable=True),
        sa.Column("claimed_at", sa.DateTime(timezone=True), nullable=True),
    ]


def upgrade() -> None:
    columns: set[str] = set()
    indexes: set[str] = set()
    if not context.is_offline_mode():
        inspector = sa.inspect(op.get_bind())
        columns = {c["name"] for c in inspector.get_columns(TABLE)}
        indexes = {i["name"] for i in inspector.get_indexes(TABLE)}
    for column in _new_columns():
        if column.name not in columns:
            op.add_column(TABLE, column)
    if CLAIMED_INDEX not in indexes:
        op.create_index(CLAIMED_INDEX, TABLE, ["claimed_at"])


def downgrade() -> None:
    op.drop_index(CLAIMED_INDEX, table_name=TABLE)
    for column in reversed(_new_columns()):
        op.drop_column(TABLE, column.name)  # in place: ALTER TABLE ... DROP COLUMN (SQLite >= 3.35)
