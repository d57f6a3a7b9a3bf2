"""Initial schema: corpora with their word counts, spectra, growth curves, cached results and comparisons.

A store made before migrations existed (by ``SQLModel.metadata.create_all``) has some or all of these
tables already, with the same columns: those are kept as they are, with their data, only the missing
ones are created, and the store is then at this revision like a new one.

Revision ID: 0001_initial
Revises:
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import context, op

revision = "0001_initial"
down_revision = None
branch_labels = None
depends_on = None

# Keys that pages are ordered by: code-point order on PostgreSQL too (see app.store.tables).
_CODE_POINT_STRING = sa.String().with_variant(sa.String(collation="C"), "postgresql")


def _corpus_id() -> list[sa.SchemaItem]:
    return [
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpus.id"], ondelete="CASCADE"),
    ]


def _tables() -> dict[str, list[sa.SchemaItem]]:
    """Table name -> columns and constraints, parents before children."""
    return {
        "corpus": [
            sa.Column("id", sa.Integer(), nullable=False),
            sa.Column("name", sa.String(), nullable=False, index=True),
            sa.Column("labels_json", sa.Text(), nullable=False),
            sa.Column("profile_json", sa.Text(), nullable=False),
            sa.Column("profile_name", sa.String(), nullable=False),
            sa.Column("sources_json", sa.Text(), nullable=False),
            sa.Column("tokens", sa.BigInteger(), nullable=False),
            sa.Column("types", sa.BigInteger(), nullable=False),
            sa.Column("hapaxes", sa.BigInteger(), nullable=False),
            sa.Column("content_hash", sa.String(), nullable=False, index=True),
            sa.Column("program_version", sa.String(), nullable=False),
            sa.Column("text_order_json", sa.Text(), nullable=False),
            sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
            sa.PrimaryKeyConstraint("id"),
        ],
        "savedcomparison": [
            sa.Column("slug", sa.String(), nullable=False),
            sa.Column("corpus_ids_json", sa.Text(), nullable=False),
            sa.Column("settings_json", sa.Text(), nullable=False),
            sa.Column("snapshot_json", sa.Text(), nullable=False),
            sa.Column("program_version", sa.String(), nullable=False),
            sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
            sa.PrimaryKeyConstraint("slug"),
        ],
        "cachedresult": [
            *_corpus_id(),
            sa.Column("kind", sa.String(), nullable=False),
            sa.Column("program_version", sa.String(), nullable=False),
            sa.Column("payload_json", sa.Text(), nullable=False),
            sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
            sa.PrimaryKeyConstraint("corpus_id", "kind"),
        ],
        "growthpoint": [
            *_corpus_id(),
            sa.Column("tokens", sa.BigInteger(), nullable=False),
            sa.Column("types", sa.BigInteger(), nullable=False),
            sa.PrimaryKeyConstraint("corpus_id", "tokens"),
        ],
        "prefixspectrumrow": [
            *_corpus_id(),
            sa.Column("share", _CODE_POINT_STRING, nullable=False),
            sa.Column("m", sa.BigInteger(), nullable=False),
            sa.Column("vm", sa.BigInteger(), nullable=False),
            sa.Column("prefix_tokens", sa.BigInteger(), nullable=False),
            sa.PrimaryKeyConstraint("corpus_id", "share", "m"),
        ],
        "spectrumrow": [
            *_corpus_id(),
            sa.Column("m", sa.BigInteger(), nullable=False),
            sa.Column("vm", sa.BigInteger(), nullable=False),
            sa.PrimaryKeyConstraint("corpus_id", "m"),
        ],
        "wordcount": [
            *_corpus_id(),
            sa.Column("word", _CODE_POINT_STRING, nullable=False),
            sa.Column("count", sa.BigInteger(), nullable=False),
            sa.PrimaryKeyConstraint("corpus_id", "word"),
        ],
    }


def upgrade() -> None:
    existing = set() if context.is_offline_mode() else set(sa.inspect(op.get_bind()).get_table_names())
    for name, items in _tables().items():
        if name not in existing:
            op.create_table(name, *items)  # with the indexes of columns marked index=True


def downgrade() -> None:
    for name in reversed(_tables()):
        op.drop_table(name)
