"""Lab sessions kept in the store (sign-out and password changes end them in every server process), and
failed sign-ins counted in the store (shared by every server process).

Like 0001 and 0002, a store whose tables were made by ``SQLModel.metadata.create_all`` may have these
already: only what is missing is added.

Revision ID: 0004_lab_sessions
Revises: 0003_background_tasks
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context, op

revision = "0004_lab_sessions"
down_revision = "0003_background_tasks"
branch_labels = None
depends_on = None


def _new_tables() -> dict[str, list[sa.SchemaItem]]:
    return {
        "labsession": [
            sa.Column("id_hash", sa.String(), nullable=False),
            sa.Column("account_id", sa.Integer(), nullable=False),
            sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
            sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
            sa.ForeignKeyConstraint(["account_id"], ["account.id"], ondelete="CASCADE"),
            sa.PrimaryKeyConstraint("id_hash"),
            sa.Index("ix_labsession_account_id", "account_id"),
        ],
        "signinfailures": [
            sa.Column("key", sa.String(), nullable=False),
            sa.Column("failures", sa.Integer(), nullable=False),
            sa.Column("last_failure_at", sa.DateTime(timezone=True), nullable=False),
            sa.PrimaryKeyConstraint("key"),
        ],
    }


def upgrade() -> None:
    existing = set() if context.is_offline_mode() else set(sa.inspect(op.get_bind()).get_table_names())
    for name, items in _new_tables().items():
        if name not in existing:
            op.create_table(name, *items)


def downgrade() -> None:
    for name in reversed(_new_tables()):
        op.drop_table(name)
