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
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


def utcnow() -> datetime:
    return datetime.now(UTC)


class Base(DeclarativeBase):
    pass


class Inventory(Base):
    __tablename__ = "inventories"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(64), unique=True)
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
    term_id: Mapped[int] = mapped_column(ForeignKey("terms.id", ondelete="CASCADE"))
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
    sense_id: Mapped[int] = mapped_column(ForeignKey("senses.id", ondelete="CASCADE"))
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
    secret_hash: Mapped[str] = mapped_column(String(64))
    scope: Mapped[str] = mapped_column(String(16))
    label: Mapped[str] = mapped_column(String(200), default="")
    signing_secret: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    revoked_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
