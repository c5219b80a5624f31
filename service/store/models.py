"""Typed SQLAlchemy 2.0 models for everything whichsense keeps.

The editable inventory lives in normalised rows (terms, senses, examples) so
the database enforces uniqueness; every edit also writes an immutable
`InventoryVersion` snapshot, which is what batches pin and engines read.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


def utcnow() -> datetime:
    return datetime.now(UTC)


class Base(DeclarativeBase):
    pass


class Team(Base):
    """The owner of keys, inventories and batches; no key sees another team's rows."""

    __tablename__ = "teams"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(64), unique=True)
    retention_days: Mapped[int | None] = mapped_column(Integer, nullable=True)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class AuditEvent(Base):
    """Who (key id, or None for the operator's CLI) did what to which subject, and when."""

    __tablename__ = "audit_events"
    __table_args__ = (Index("ix_audit_events_team", "team_id", "id"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"))
    key_id: Mapped[str | None] = mapped_column(String(32), nullable=True)
    action: Mapped[str] = mapped_column(String(64))
    subject: Mapped[str] = mapped_column(String(300))
    detail: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class Inventory(Base):
    __tablename__ = "inventories"
    __table_args__ = (UniqueConstraint("team_id", "name", name="uq_inventories_team_name"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"))
    name: Mapped[str] = mapped_column(String(64))
    description: Mapped[str] = mapped_column(Text, default="")
    version: Mapped[int] = mapped_column(Integer, default=1)
    review_threshold: Mapped[float] = mapped_column(Float)
    abstain_threshold: Mapped[float] = mapped_column(Float)
    temperature: Mapped[float | None] = mapped_column(Float, nullable=True)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)

    terms: Mapped[list[Term]] = relationship(
        back_populates="inventory",
        cascade="all, delete-orphan",
        order_by="Term.position",
    )


class InventoryVersion(Base):
    """The whole inventory document as it stood at one version; never changes."""

    __tablename__ = "inventory_versions"
    __table_args__ = (UniqueConstraint("inventory_id", "version"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    inventory_id: Mapped[int] = mapped_column(ForeignKey("inventories.id", ondelete="CASCADE"))
    version: Mapped[int] = mapped_column(Integer)
    document: Mapped[dict[str, Any]] = mapped_column(JSON)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class Term(Base):
    __tablename__ = "terms"
    __table_args__ = (UniqueConstraint("inventory_id", "folded"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    inventory_id: Mapped[int] = mapped_column(ForeignKey("inventories.id", ondelete="CASCADE"))
    term: Mapped[str] = mapped_column(String(200))
    folded: Mapped[str] = mapped_column(String(200))
    aliases: Mapped[list[Any]] = mapped_column(JSON, default=list)
    case_rule: Mapped[str] = mapped_column(String(16), default="insensitive")
    pos: Mapped[str | None] = mapped_column(String(1), nullable=True)
    inflect: Mapped[bool] = mapped_column(default=True)
    position: Mapped[int] = mapped_column(Integer, default=0)

    inventory: Mapped[Inventory] = relationship(back_populates="terms")
    senses: Mapped[list[Sense]] = relationship(
        back_populates="term",
        cascade="all, delete-orphan",
        order_by="Sense.position",
    )


class Sense(Base):
    __tablename__ = "senses"
    __table_args__ = (UniqueConstraint("inventory_id", "sense_key"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    inventory_id: Mapped[int] = mapped_column(ForeignKey("inventories.id", ondelete="CASCADE"))
    # Indexed: deleting a term cascades to its senses (else a scan of every sense).
    term_id: Mapped[int] = mapped_column(ForeignKey("terms.id", ondelete="CASCADE"), index=True)
    sense_key: Mapped[str] = mapped_column(String(200))
    gloss: Mapped[str] = mapped_column(Text)
    tags: Mapped[list[Any]] = mapped_column(JSON, default=list)
    position: Mapped[int] = mapped_column(Integer, default=0)

    term: Mapped[Term] = relationship(back_populates="senses")
    examples: Mapped[list[SenseExample]] = relationship(
        back_populates="sense",
        cascade="all, delete-orphan",
        order_by="SenseExample.position",
    )


class SenseExample(Base):
    __tablename__ = "sense_examples"

    id: Mapped[int] = mapped_column(primary_key=True)
    # Indexed: deleting a sense cascades to its examples (else a scan of every example).
    sense_id: Mapped[int] = mapped_column(ForeignKey("senses.id", ondelete="CASCADE"), index=True)
    text: Mapped[str] = mapped_column(Text)
    position: Mapped[int] = mapped_column(Integer, default=0)

    sense: Mapped[Sense] = relationship(back_populates="examples")


class EvidenceRecord(Base):
    """A labeled occurrence (corpus label or review decision); append-only.

    Evidence is not versioned with the inventory: a batch pins the highest
    evidence id it may use, so adding evidence never rewrites a snapshot.
    """

    __tablename__ = "evidence"
    __table_args__ = (Index("ix_evidence_inventory_term", "inventory_id", "term"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    inventory_id: Mapped[int] = mapped_column(ForeignKey("inventories.id", ondelete="CASCADE"))
    term: Mapped[str] = mapped_column(String(200))
    sense_key: Mapped[str] = mapped_column(String(200))
    text: Mapped[str] = mapped_column(Text)
    start: Mapped[int] = mapped_column("start_offset", Integer)
    end: Mapped[int] = mapped_column("end_offset", Integer)
    source: Mapped[str] = mapped_column(String(16))
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class ApiKey(Base):
    """An API key: only a hash of the secret is kept; the signing secret signs webhooks."""

    __tablename__ = "api_keys"

    id: Mapped[int] = mapped_column(primary_key=True)
    key_id: Mapped[str] = mapped_column(String(32), unique=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"))
    secret_hash: Mapped[str] = mapped_column(String(64))
    scope: Mapped[str] = mapped_column(String(16))
    label: Mapped[str] = mapped_column(String(200), default="")
    signing_secret: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    revoked_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)


# Batches ---------------------------------------------------------------------------------------
#
# A batch is pinned at submission to one inventory version and one evidence
# watermark, so its results never depend on when a worker got to it. Documents
# are stored with the batch and grouped into chunks; a chunk is what a worker
# leases. A result row is unique per (batch, document, field, occurrence), and
# is written in the same transaction that marks its document done under a
# still-held lease, so re-running a chunk can never duplicate a result.

BATCH_STATES = ("queued", "running", "done", "failed", "cancelled")
TERMINAL_BATCH_STATES = ("done", "failed", "cancelled")


class Batch(Base):
    """One submission: its pinning, its idempotency record and its webhook progress."""

    __tablename__ = "batches"
    __table_args__ = (
        UniqueConstraint("submitted_by", "idempotency_key"),
        Index("ix_batches_state_created", "state", "created_at"),
        Index("ix_batches_webhook_due", "webhook_state", "webhook_next_attempt_at"),
        Index("ix_batches_team_created", "team_id", "created_at", "id"),
    )

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"))
    inventory_id: Mapped[int] = mapped_column(ForeignKey("inventories.id", ondelete="CASCADE"))
    inventory_name: Mapped[str] = mapped_column(String(64))
    inventory_version: Mapped[int] = mapped_column(Integer)
    evidence_watermark: Mapped[int] = mapped_column(Integer)
    state: Mapped[str] = mapped_column(String(16), default="queued")
    options: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    chunk_size: Mapped[int] = mapped_column(Integer)
    document_count: Mapped[int] = mapped_column(Integer, default=0)
    occurrence_count: Mapped[int] = mapped_column(Integer, default=0)
    submitted_by: Mapped[str] = mapped_column(String(32))
    idempotency_key: Mapped[str | None] = mapped_column(String(200), nullable=True)
    request_digest: Mapped[str | None] = mapped_column(String(64), nullable=True)
    # The batch's own absolute URL as the API named it at submission (the webhook's links).
    base_url: Mapped[str] = mapped_column(String(500), default="")
    callback_url: Mapped[str | None] = mapped_column(Text, nullable=True)
    webhook_state: Mapped[str] = mapped_column(String(16), default="none")
    webhook_event: Mapped[str] = mapped_column(
        String(32), default="batch.finished", server_default="batch.finished"
    )
    webhook_attempts: Mapped[int] = mapped_column(Integer, default=0)
    webhook_next_attempt_at: Mapped[datetime | None] = mapped_column(
        DateTime(timezone=True), nullable=True
    )
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    started_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    finished_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    # Set when the documents and results were deleted (retention or purge); the
    # counts as they stood then stay readable.
    purged_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    kept_counts: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)


class BatchDocument(Base):
    """A submitted document, kept until its batch is deleted; `state` tracks its processing."""

    __tablename__ = "batch_documents"
    __table_args__ = (
        UniqueConstraint("batch_id", "document_id"),
        UniqueConstraint("batch_id", "position"),
        Index("ix_batch_documents_chunk", "batch_id", "chunk_index"),
        Index("ix_batch_documents_state", "batch_id", "state"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    batch_id: Mapped[str] = mapped_column(ForeignKey("batches.id", ondelete="CASCADE"))
    position: Mapped[int] = mapped_column(Integer)
    chunk_index: Mapped[int] = mapped_column(Integer)
    document_id: Mapped[str] = mapped_column(String(200))
    fields: Mapped[list[Any]] = mapped_column(JSON)
    document_metadata: Mapped[dict[str, Any]] = mapped_column("metadata", JSON, default=dict)
    occurrence_count: Mapped[int] = mapped_column(Integer, default=0)
    state: Mapped[str] = mapped_column(String(16), default="pending")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    finished_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)


class BatchChunk(Base):
    """The unit a worker leases.

    `available_at` means "may be tried from" while pending and "lease expires at"
    while leased, so one indexed comparison finds both new work and work whose
    worker died.
    """

    __tablename__ = "batch_chunks"
    __table_args__ = (
        UniqueConstraint("batch_id", "chunk_index"),
        Index("ix_batch_chunks_due", "state", "available_at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    batch_id: Mapped[str] = mapped_column(ForeignKey("batches.id", ondelete="CASCADE"))
    chunk_index: Mapped[int] = mapped_column(Integer)
    state: Mapped[str] = mapped_column(String(16), default="pending")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    available_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    lease_owner: Mapped[str | None] = mapped_column(String(200), nullable=True)
    lease_token: Mapped[str | None] = mapped_column(String(32), nullable=True)
    last_error: Mapped[str | None] = mapped_column(Text, nullable=True)
    finished_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)


class BatchResult(Base):
    """One occurrence's decision (the Result format), with columns for filtering."""

    __tablename__ = "batch_results"
    __table_args__ = (
        UniqueConstraint("batch_id", "document_id", "field", "occurrence_index"),
        Index("ix_batch_results_order", "batch_id", "document_position", "id"),
        Index("ix_batch_results_status", "batch_id", "status"),
    )

    id: Mapped[int] = mapped_column(
        BigInteger().with_variant(Integer(), "sqlite"), primary_key=True
    )
    batch_id: Mapped[str] = mapped_column(ForeignKey("batches.id", ondelete="CASCADE"))
    document_position: Mapped[int] = mapped_column(Integer)
    document_id: Mapped[str] = mapped_column(String(200))
    field: Mapped[str] = mapped_column(String(100))
    occurrence_index: Mapped[int] = mapped_column(Integer)
    term: Mapped[str] = mapped_column(String(200))
    sense_id: Mapped[str | None] = mapped_column(String(200), nullable=True)
    status: Mapped[str] = mapped_column(String(16))
    confidence: Mapped[float] = mapped_column(Float)
    result: Mapped[dict[str, Any]] = mapped_column(JSON)


class WebhookAttempt(Base):
    """One try at POSTing a batch's completion notice to its callback URL."""

    __tablename__ = "webhook_attempts"
    __table_args__ = (Index("ix_webhook_attempts_batch", "batch_id", "attempt"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    batch_id: Mapped[str] = mapped_column(ForeignKey("batches.id", ondelete="CASCADE"))
    attempt: Mapped[int] = mapped_column(Integer)
    attempted_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    status_code: Mapped[int | None] = mapped_column(Integer, nullable=True)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    duration_seconds: Mapped[float] = mapped_column(Float, default=0.0)


# Review queue ----------------------------------------------------------------------------------
#
# A review item is one batch result a person should look at (status review or abstained). Its
# context vector (and its window sentence vector, for inventories with the sentence channel) is
# kept so a decision can re-score the term's other pending items without encoding them again,
# and so "none of these" items can be clustered into new senses.

REVIEW_ITEM_STATES = ("pending", "decided", "missing", "resolved")


class ReviewItem(Base):
    """One queued occurrence: its machine answer's scores, its state and its claim."""

    __tablename__ = "review_items"
    __table_args__ = (
        UniqueConstraint("result_id"),
        Index("ix_review_items_queue", "team_id", "state", "inventory_id", "term"),
        Index("ix_review_items_batch", "batch_id", "state"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"))
    result_id: Mapped[int] = mapped_column(
        BigInteger().with_variant(Integer(), "sqlite"),
        ForeignKey("batch_results.id", ondelete="CASCADE"),
    )
    batch_id: Mapped[str] = mapped_column(ForeignKey("batches.id", ondelete="CASCADE"))
    inventory_id: Mapped[int] = mapped_column(ForeignKey("inventories.id", ondelete="CASCADE"))
    term: Mapped[str] = mapped_column(String(200))
    document_id: Mapped[str] = mapped_column(String(200))
    machine_status: Mapped[str] = mapped_column(String(16))
    state: Mapped[str] = mapped_column(String(16), default="pending")
    confidence: Mapped[float] = mapped_column(Float)
    margin: Mapped[float] = mapped_column(Float)
    usefulness: Mapped[float] = mapped_column(Float, default=0.0)
    vector: Mapped[bytes] = mapped_column(LargeBinary)
    sentence_vector: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    claimed_by: Mapped[str | None] = mapped_column(String(32), nullable=True)
    claim_expires_at: Mapped[datetime | None] = mapped_column(
        DateTime(timezone=True), nullable=True
    )
    resolved_by_decision: Mapped[int | None] = mapped_column(Integer, nullable=True)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class ReviewDecision(Base):
    """A reviewer's answer for one item; undone decisions stay, marked, for the audit trail."""

    __tablename__ = "review_decisions"
    __table_args__ = (
        Index("ix_review_decisions_team", "team_id", "id"),
        Index("ix_review_decisions_item", "item_id"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"))
    item_id: Mapped[int] = mapped_column(ForeignKey("review_items.id", ondelete="CASCADE"))
    inventory_id: Mapped[int] = mapped_column(ForeignKey("inventories.id", ondelete="CASCADE"))
    inventory_version: Mapped[int] = mapped_column(Integer)
    key_id: Mapped[str] = mapped_column(String(32))
    term: Mapped[str] = mapped_column(String(200))
    sense_id: Mapped[str | None] = mapped_column(String(200), nullable=True)
    machine_sense_id: Mapped[str | None] = mapped_column(String(200), nullable=True)
    machine_status: Mapped[str] = mapped_column(String(16))
    evidence_id: Mapped[int | None] = mapped_column(Integer, nullable=True)
    queue_share: Mapped[float] = mapped_column(Float, default=0.0)
    evidence_count: Mapped[int] = mapped_column(Integer, default=0)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    undone_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)


class ReviewSettings(Base):
    """Per-inventory queue settings (absent row: the defaults)."""

    __tablename__ = "review_settings"

    inventory_id: Mapped[int] = mapped_column(
        ForeignKey("inventories.id", ondelete="CASCADE"), primary_key=True
    )
    auto_resolve: Mapped[bool] = mapped_column(default=True)


class WebSession(Base):
    """A signed-in reviewer in a browser; the cookie carries the id, signed."""

    __tablename__ = "web_sessions"

    id: Mapped[str] = mapped_column(String(64), primary_key=True)
    key_id: Mapped[str] = mapped_column(String(32))
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"))
    scope: Mapped[str] = mapped_column(String(16))
    csrf_token: Mapped[str] = mapped_column(String(64))
    skipped: Mapped[list[Any]] = mapped_column(JSON, default=list)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    expires_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    ended_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)


class WebSecret(Base):
    """The server-side key that signs session cookies (one row, made on first use)."""

    __tablename__ = "web_secrets"

    id: Mapped[int] = mapped_column(primary_key=True)
    secret: Mapped[str] = mapped_column(String(128))
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
