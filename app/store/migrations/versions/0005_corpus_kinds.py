"""Corpora made from counts: what a corpus was made from (text, word-counts, spectrum, bundle) and, for a
bundle, its origin. Both columns are nullable; a corpus stored before this revision was made from text.

Like 0002, only what is missing is added (a store made by ``SQLModel.metadata.create_all`` has it already).

Revision ID: 0005_corpus_kinds
Revises: 0004_lab_sessions
Create Date: 2026-12-12
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context, op

revision = "0005_corpus_kinds"
down_revision = "0004_lab_sessions"
branch_labels = None
depends_on = None


def _new_columns() -> list[sa.Column]:
    return [
        sa.Column("source_kind", sa.String(), nullable=True),
        sa.Column("origin_json", sa.Text(), nullable=True),
    ]


def upgrade() -> None:
    existing: set[str] = set()
    if not context.is_offline_mode():
        existing = {c["name"] for c in sa.inspect(op.get_bind()).get_columns("corpus")}
    for column in _new_columns():
        if column.name not in existing:
            op.add_column("corpus", column)


def downgrade() -> None:
    for column in reversed(_new_columns()):
        op.drop_column("corpus", column.name)  # in place: ALTER TABLE ... DROP COLUMN (SQLite >= 3.35)
