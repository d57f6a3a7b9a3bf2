"""Background tasks: uploads being counted and model reports being fitted, shared by every server process.

Revision ID: 0003_background_tasks
Revises: 0002_lab_accounts
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context, op

revision = "0003_background_tasks"
down_revision = "0002_lab_accounts"
branch_labels = None
depends_on = None

TABLE = "backgroundtask"


def upgrade() -> None:
    if not context.is_offline_mode() and TABLE in sa.inspect(op.get_bind()).get_table_names():
        return  # made by SQLModel.metadata.create_all
    op.create_table(
        TABLE,
        sa.Column("id", sa.String(), nullable=False),
        sa.Column("kind", sa.String(), nullable=False),
        sa.Column("dedupe_key", sa.String(), nullable=True),
        sa.Column("state", sa.String(), nullable=False),
        sa.Column("stage", sa.String(), nullable=False),
        sa.Column("done", sa.BigInteger(), nullable=False),
        sa.Column("total", sa.BigInteger(), nullable=False),
        sa.Column("size_hint", sa.BigInteger(), nullable=False),
        sa.Column("priority", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=True),
        sa.Column("message", sa.Text(), nullable=True),
        sa.Column("params_json", sa.Text(), nullable=False),
        sa.Column("owner", sa.String(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("heartbeat_at", sa.DateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("dedupe_key"),
        sa.Index("ix_backgroundtask_kind", "kind"),
        sa.Index("ix_backgroundtask_state", "state"),
        sa.Index("ix_backgroundtask_corpus_id", "corpus_id"),
    )


def downgrade() -> None:
    op.drop_table(TABLE)
