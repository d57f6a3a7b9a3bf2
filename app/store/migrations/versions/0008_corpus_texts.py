"""Texts as the unit: the texts of a corpus (table ``corpustext``: name, tokens, types and compressed word
counts per text) and how they were found (``corpus.texts_json``, nullable: corpora stored before this
revision, or made from counts or a spectrum, have no texts).

Like 0005, only what is missing is added (a store made by ``SQLModel.metadata.create_all`` has it already).

Revision ID: 0008_corpus_texts
Revises: 0007_task_members
Create Date: 2026-12-05
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context, op

revision = "0008_corpus_texts"
down_revision = "0007_task_members"
branch_labels = None
depends_on = None

TABLE = "corpustext"


def upgrade() -> None:
    tables: set[str] = set()
    columns: set[str] = set()
    if not context.is_offline_mode():
        inspector = sa.inspect(op.get_bind())
        tables = set(inspector.get_table_names())
        columns = {c["name"] for c in inspector.get_columns("corpus")}
    if "texts_json" not in columns:
        op.add_column("corpus", sa.Column("texts_json", sa.Text(), nullable=True))
    if TABLE not in tables:
        op.create_table(
            TABLE,
            sa.Column(
                "corpus_id", sa.Integer(), sa.ForeignKey("corpus.id", ondelete="CASCADE"), nullable=False
            ),
            sa.Column("position", sa.BigInteger(), nullable=False),
            sa.Column("name", sa.Text(), nullable=False),
            sa.Column("tokens", sa.BigInteger(), nullable=False),
            sa.Column("types", sa.BigInteger(), nullable=False),
            sa.Column("word_ranks", sa.LargeBinary(), nullable=False),
            sa.Column("word_counts", sa.LargeBinary(), nullable=False),
            sa.PrimaryKeyConstraint("corpus_id", "position"),
        )


def downgrade() -> None:
    op.drop_table(TABLE)
    op.drop_column("corpus", "texts_json")  # in place: ALTER TABLE ... DROP COLUMN (SQLite >= 3.35)
