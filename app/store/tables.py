"""SQLModel tables of the store. Raw text is never stored: only counts, spectra and curves."""

from __future__ import annotations

from datetime import UTC, datetime

from sqlalchemy import Column, ForeignKey, Integer, Text
from sqlmodel import Field, SQLModel


def _utcnow() -> datetime:
    return datetime.now(UTC)


def _corpus_fk() -> Column:
    return Column(Integer, ForeignKey("corpus.id", ondelete="CASCADE"), primary_key=True)


class Corpus(SQLModel, table=True):
    """One uploaded text or set of texts, with its labels and tokenization profile."""

    id: int | None = Field(default=None, primary_key=True)
    name: str = Field(index=True)
    labels_json: str = Field(default="{}", sa_column=Column(Text, nullable=False, default="{}"))
    profile_json: str = Field(sa_column=Column(Text, nullable=False))
    profile_name: str
    sources_json: str = Field(default="[]", sa_column=Column(Text, nullable=False, default="[]"))
    tokens: int
    types: int
    hapaxes: int
    content_hash: str = Field(index=True)
    program_version: str
    text_order_json: str = Field(default="{}", sa_column=Column(Text, nullable=False, default="{}"))
    created_at: datetime = Field(default_factory=_utcnow)


class WordCount(SQLModel, table=True):
    """How often each type (word) occurs in a corpus."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    word: str = Field(primary_key=True)
    count: int


class SpectrumRow(SQLModel, table=True):
    """V_m: the number of types occurring exactly m times."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    m: int = Field(primary_key=True)
    vm: int


class GrowthPoint(SQLModel, table=True):
    """Exact text-order type growth: V after the first ``tokens`` tokens."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    tokens: int = Field(primary_key=True)
    types: int


class PrefixSpectrumRow(SQLModel, table=True):
    """Spectrum of the first share of the text (for text-order backtests)."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    share: str = Field(primary_key=True)
    m: int = Field(primary_key=True)
    vm: int
    prefix_tokens: int


class CachedResult(SQLModel, table=True):
    """A computed result (fits, backtests, richness) cached as JSON for one corpus."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    kind: str = Field(primary_key=True)
    program_version: str
    payload_json: str = Field(sa_column=Column(Text, nullable=False))
    created_at: datetime = Field(default_factory=_utcnow)


class SavedComparison(SQLModel, table=True):
    """A comparison permalink: its corpora, settings and the numbers it showed."""

    slug: str = Field(primary_key=True)
    corpus_ids_json: str = Field(sa_column=Column(Text, nullable=False))
    settings_json: str = Field(sa_column=Column(Text, nullable=False))
    snapshot_json: str = Field(sa_column=Column(Text, nullable=False))
    program_version: str
    created_at: datetime = Field(default_factory=_utcnow)
