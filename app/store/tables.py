"""SQLModel tables of the store. Raw text is never stored: only counts, spectra and curves.

Every count (tokens, types, frequencies, spectrum indexes) is a 64-bit integer: a corpus of more than
2^31 tokens is possible, and PostgreSQL's ``integer`` is 32 bits (SQLite stores any integer in 64).
Timestamps are aware datetimes in UTC on every backend (``timestamptz`` on PostgreSQL).
"""

from __future__ import annotations

from datetime import UTC, datetime

from sqlalchemy import BigInteger, Boolean, Column, ForeignKey, Integer, LargeBinary, String, Text, false
from sqlmodel import Field, SQLModel
from sqlmodel.sql.sqltypes import UTCDateTime

# Keys that pages are ordered by compare by code point everywhere, as SQLite's BINARY collation does;
# a PostgreSQL database's default collation may be linguistic (en_US: "a" < "B" < "b").
CODE_POINT_STRING = String().with_variant(String(collation="C"), "postgresql")


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
    tokens: int = Field(sa_type=BigInteger)
    types: int = Field(sa_type=BigInteger)
    hapaxes: int = Field(sa_type=BigInteger)
    content_hash: str = Field(index=True)
    program_version: str
    text_order_json: str = Field(default="{}", sa_column=Column(Text, nullable=False, default="{}"))
    created_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)
    # The lab member who uploaded it (an Account id); None when counted by the command line, for the demo,
    # or before lab mode. Not a database foreign key: see migration 0002.
    owner_id: int | None = Field(default=None)
    # What the corpus was made from: "text", "word-counts", "spectrum" or "bundle" (None: text, before 0005),
    # and for a bundle where it came from (JSON: the kind of its data, name, exporting version...).
    source_kind: str | None = Field(default="text")
    origin_json: str | None = Field(default=None, sa_column=Column(Text, nullable=True))
    # How its texts were found (JSON: the separator and the empty texts skipped); None: a corpus without
    # texts (from counts or a spectrum, or stored before 0008).
    texts_json: str | None = Field(default=None, sa_column=Column(Text, nullable=True))


class IssuedCorpusId(SQLModel, table=True):
    """The corpus ids issued so far (only the newest row is kept): a new corpus takes the next id of this
    table's sequence, which never goes back (SQLite AUTOINCREMENT, a PostgreSQL sequence), so an id once
    used is never given to another corpus, even after the corpus that had the largest id is deleted."""

    __tablename__ = "issued_corpus_id"
    __table_args__ = {"sqlite_autoincrement": True}

    id: int | None = Field(default=None, primary_key=True)


class WordCount(SQLModel, table=True):
    """How often each type (word) occurs in a corpus."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    word: str = Field(primary_key=True, sa_type=CODE_POINT_STRING)
    count: int = Field(sa_type=BigInteger)


class CorpusText(SQLModel, table=True):
    """One text of a corpus (a file, or a part of one between separators): its name, tokens, types and
    word counts. The words are given by their ranks in the corpus's word list in code-point order, stored
    as gaps between ascending ranks (uint32) and with their counts (int64), each little-endian and
    zlib-compressed (``app.ingest.texts.TextCounts.packed``): a few bytes per distinct word of a text."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    position: int = Field(primary_key=True, sa_type=BigInteger)
    name: str = Field(sa_column=Column(Text, nullable=False))
    tokens: int = Field(sa_type=BigInteger)
    types: int = Field(sa_type=BigInteger)
    word_ranks: bytes = Field(sa_column=Column(LargeBinary, nullable=False))
    word_counts: bytes = Field(sa_column=Column(LargeBinary, nullable=False))


class SpectrumRow(SQLModel, table=True):
    """V_m: the number of types occurring exactly m times."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    m: int = Field(primary_key=True, sa_type=BigInteger)
    vm: int = Field(sa_type=BigInteger)


class GrowthPoint(SQLModel, table=True):
    """Exact text-order type growth: V after the first ``tokens`` tokens."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    tokens: int = Field(primary_key=True, sa_type=BigInteger)
    types: int = Field(sa_type=BigInteger)


class PrefixSpectrumRow(SQLModel, table=True):
    """Spectrum of the first share of the text (for text-order backtests)."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    share: str = Field(primary_key=True, sa_type=CODE_POINT_STRING)
    m: int = Field(primary_key=True, sa_type=BigInteger)
    vm: int = Field(sa_type=BigInteger)
    prefix_tokens: int = Field(sa_type=BigInteger)


class CachedResult(SQLModel, table=True):
    """A computed result (fits, backtests, richness) cached as JSON for one corpus."""

    corpus_id: int = Field(sa_column=_corpus_fk())
    kind: str = Field(primary_key=True)
    program_version: str
    payload_json: str = Field(sa_column=Column(Text, nullable=False))
    created_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)


class SavedComparison(SQLModel, table=True):
    """A comparison permalink: its corpora, settings and the numbers it showed."""

    slug: str = Field(primary_key=True)
    corpus_ids_json: str = Field(sa_column=Column(Text, nullable=False))
    settings_json: str = Field(sa_column=Column(Text, nullable=False))
    snapshot_json: str = Field(sa_column=Column(Text, nullable=False))
    program_version: str
    created_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)
    # The member who saved it (an Account id, None outside lab mode), and whether anyone with the link may see
    # it without signing in (statistics and plots only, never word lists).
    creator_id: int | None = Field(default=None)
    # Each saved corpus as it was when saved (JSON list of id, owner_id, content_hash, created_at): publishing
    # checks these, not whatever the ids hold today (None: saved before revision 0006).
    corpora_json: str | None = Field(default=None, sa_column=Column(Text, nullable=True))
    public: bool = Field(default=False, sa_column=Column(Boolean, nullable=False, server_default=false()))


class Account(SQLModel, table=True):
    """A lab member who signs in: the password is kept only as a scrypt hash (app.store.accounts)."""

    id: int | None = Field(default=None, primary_key=True)
    name: str = Field(unique=True, index=True)
    password_hash: str
    is_admin: bool = Field(default=False)
    created_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)


class ApiToken(SQLModel, table=True):
    """An API token of a member, kept only as the SHA-256 of the token (the token is shown once)."""

    id: int | None = Field(default=None, primary_key=True)
    account_id: int = Field(
        sa_column=Column(Integer, ForeignKey("account.id", ondelete="CASCADE"), nullable=False, index=True)
    )
    token_hash: str = Field(unique=True, index=True)
    created_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)


class BackgroundTask(SQLModel, table=True):
    """Work that takes time (counting an upload, fitting a corpus's models), kept in the store so that any
    server process can run it, report its progress and tell every other process its outcome.

    ``state`` goes queued -> running -> done or failed; ``stage`` names the step under way and ``done`` of
    ``total`` its progress (bytes while counting). ``dedupe_key`` makes enqueuing idempotent (one model
    report per corpus and program version, one load per demo file). ``owner`` is "host:pid" of the process
    running it and ``heartbeat_at`` its last sign of life, so a task left by a crashed process can be told
    apart from one still running. ``member`` is whom the task works for (fair shares between members) and
    ``claimed_at`` when it was last taken (see ``app.store.tasks.claim_next``)."""

    id: str = Field(primary_key=True)
    kind: str = Field(index=True)
    dedupe_key: str | None = Field(default=None, unique=True)
    state: str = Field(default="queued", index=True)
    stage: str = Field(default="queued")
    done: int = Field(default=0, sa_type=BigInteger)
    total: int = Field(default=0, sa_type=BigInteger)
    size_hint: int = Field(default=0, sa_type=BigInteger)
    priority: int = Field(default=0)
    corpus_id: int | None = Field(default=None, index=True)
    message: str | None = Field(default=None, sa_column=Column(Text, nullable=True))
    params_json: str = Field(default="{}", sa_column=Column(Text, nullable=False, default="{}"))
    owner: str | None = Field(default=None)
    created_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)
    updated_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)
    heartbeat_at: datetime | None = Field(default=None, sa_type=UTCDateTime)
    member: str | None = Field(default=None)
    claimed_at: datetime | None = Field(default=None, sa_type=UTCDateTime, index=True)


class LabSession(SQLModel, table=True):
    """A signed-in browser: the session cookie holds a random id, the store only its SHA-256. Deleting the
    row ends the session in every server process (sign-out, password change, expiry)."""

    id_hash: str = Field(primary_key=True)
    account_id: int = Field(
        sa_column=Column(Integer, ForeignKey("account.id", ondelete="CASCADE"), nullable=False, index=True)
    )
    created_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)
    expires_at: datetime = Field(sa_type=UTCDateTime)


class SignInFailures(SQLModel, table=True):
    """Failed sign-ins counted per key ("pair <name> <address>" or "address <address>"), shared by every
    server process (app.store.signins)."""

    key: str = Field(primary_key=True)
    failures: int = Field(default=0)
    last_failure_at: datetime = Field(default_factory=_utcnow, sa_type=UTCDateTime)
