"""Lab mode: member accounts and API tokens, the owner of a corpus, the creator and visibility of a comparison.

``corpus.owner_id`` and ``savedcomparison.creator_id`` are plain nullable integers, not foreign keys: SQLite
can add a foreign key to an existing table only by copying the table, and dropping the old ``corpus`` table
inside the migration's transaction (where ``PRAGMA foreign_keys`` cannot be switched off) would cascade to
every word count. Accounts are never deleted, so the ids stay meaningful.

Like 0001, a store whose tables were made by ``SQLModel.metadata.create_all`` may have some of this already:
only what is missing is added.

Revision ID: 0002_lab_accounts
Revises: 0001_initial
Create Date: 2026-12-09
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context, op

revision = "0002_lab_accounts"
down_revision = "0001_initial"
branch_labels = None
depends_on = None


def _new_columns() -> dict[str, list[sa.Column]]:
    """Table -> columns added to it by this revision."""
    return {
        "corpus": [sa.Column("owner_id", sa.Integer(), nullable=True)],
        "savedcomparison": [
            sa.Column("creator_id", sa.Integer(), nullable=True),
            sa.Column("public", sa.Boolean(), server_default=sa.false(), nullable=False),
        ],
    }


def _new_tables() -> dict[str, list[sa.SchemaItem]]:
    """Table name -> columns and constraints, parents before children."""
    return {
        "account": [
            sa.Column("id", sa.Integer(), nullable=False),
            sa.Column("name", sa.String(), nullable=False),
            sa.Column("password_hash", sa.String(), nullable=False),
            sa.Column("is_admin", sa.Boolean(), nullable=False),
            sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
            sa.PrimaryKeyConstraint("id"),
            sa.Index("ix_account_name", "name", unique=True),
        ],
        "apitoken": [
            sa.Column("id", sa.Integer(), nullable=False),
            sa.Column("account_id", sa.Integer(), nullable=False),
            sa.Column("token_hash", sa.String(), nullable=False),
            sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
            sa.ForeignKeyConstraint(["account_id"], ["account.id"], ondelete="CASCADE"),
            sa.PrimaryKeyConstraint("id"),
            sa.Index("ix_apitoken_account_id", "account_id"),
            sa.Index("ix_apitoken_token_hash", "token_hash", unique=True),
        ],
    }


def _existing() -> tuple[set[str], dict[str, set[str]]]:
    """Tables and their columns as the database has them now (nothing, when only printing SQL)."""
    if context.is_offline_mode():
        return set(), {}
    inspector = sa.inspect(op.get_bind())
    tables = set(inspector.get_table_names())
    return tables, {t: {c["name"] for c in inspector.get_columns(t)} for t in _new_columns() if t in tables}


def upgrade() -> None:
    tables, columns = _existing()
    for name, items in _new_tables().items():
        if name not in tables:
            op.create_table(name, *items)
    for table, new in _new_columns().items():
        for column in new:
            if column.name not in columns.get(table, set()):
                op.add_column(table, column)


def downgrade() -> None:
    for table, new in _new_columns().items():
        for column in new:
            op.drop_column(table, column.name)  # in place: ALTER TABLE ... DROP COLUMN (SQLite >= 3.35)
    for name in reversed(_new_tables()):
        op.drop_table(name)
