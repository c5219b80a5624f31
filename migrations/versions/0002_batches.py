"""Batches: documents, leased chunks, results and webhook attempts.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "batches",
        sa.Column("id", sa.String(length=32), nullable=False),
        sa.Column("inventory_id", sa.Integer(), nullable=False),
        sa.Column("inventory_name", sa.String(length=64), nullable=False),
        sa.Column("inventory_version", sa.Integer(), nullable=False),
        sa.Column("evidence_watermark", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("options", sa.JSON(), nullable=False),
        sa.Column("chunk_size", sa.Integer(), nullable=False),
        sa.Column("document_count", sa.Integer(), nullable=False),
        sa.Column("occurrence_count", sa.Integer(), nullable=False),
        sa.Column("submitted_by", sa.String(length=32), nullable=False),
        sa.Column("idempotency_key", sa.String(length=200), nullable=True),
        sa.Column("request_digest", sa.String(length=64), nullable=True),
        sa.Column("base_url", sa.String(length=500), nullable=False),
        sa.Column("callback_url", sa.Text(), nullable=True),
        sa.Column("webhook_state", sa.String(length=16), nullable=False),
        sa.Column("webhook_attempts", sa.Integer(), nullable=False),
        sa.Column("webhook_next_attempt_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["inventory_id"], ["inventories.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("submitted_by", "idempotency_key"),
    )
    op.create_index("ix_batches_state_created", "batches", ["state", "created_at"])
    op.create_index(
        "ix_batches_webhook_due", "batches", ["webhook_state", "webhook_next_attempt_at"]
    )

    op.create_table(
        "batch_documents",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("batch_id", sa.String(length=32), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("chunk_index", sa.Integer(), nullable=False),
        sa.Column("document_id", sa.String(length=200), nullable=False),
        sa.Column("fields", sa.JSON(), nullable=False),
        sa.Column("metadata", sa.JSON(), nullable=False),
        sa.Column("occurrence_count", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["batch_id"], ["batches.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("batch_id", "document_id"),
        sa.UniqueConstraint("batch_id", "position"),
    )
    op.create_index("ix_batch_documents_chunk", "batch_documents", ["batch_id", "chunk_index"])
    op.create_index("ix_batch_documents_state", "batch_documents", ["batch_id", "state"])

    op.create_table(
        "batch_chunks",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("batch_id", sa.String(length=32), nullable=False),
        sa.Column("chunk_index", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("available_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("lease_owner", sa.String(length=200), nullable=True),
        sa.Column("lease_token", sa.String(length=32), nullable=True),
        sa.Column("last_error", sa.Text(), nullable=True),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["batch_id"], ["batches.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("batch_id", "chunk_index"),
    )
    op.create_index("ix_batch_chunks_due", "batch_chunks", ["state", "available_at"])

    op.create_table(
        "batch_results",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("batch_id", sa.String(length=32), nullable=False),
        sa.Column("document_position", sa.Integer(), nullable=False),
        sa.Column("document_id", sa.String(length=200), nullable=False),
        sa.Column("field", sa.String(length=100), nullable=False),
        sa.Column("occurrence_index", sa.Integer(), nullable=False),
        sa.Column("term", sa.String(length=200), nullable=False),
        sa.Column("sense_id", sa.String(length=200), nullable=True),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("confidence", sa.Float(), nullable=False),
        sa.Column("result", sa.JSON(), nullable=False),
        sa.ForeignKeyConstraint(["batch_id"], ["batches.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("batch_id", "document_id", "field", "occurrence_index"),
    )
    op.create_index(
        "ix_batch_results_order", "batch_results", ["batch_id", "document_position", "id"]
    )
    op.create_index("ix_batch_results_status", "batch_results", ["batch_id", "status"])

    op.create_table(
        "webhook_attempts",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("batch_id", sa.String(length=32), nullable=False),
        sa.Column("attempt", sa.Integer(), nullable=False),
        sa.Column("attempted_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("status_code", sa.Integer(), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("duration_seconds", sa.Float(), nullable=False),
        sa.ForeignKeyConstraint(["batch_id"], ["batches.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index("ix_webhook_attempts_batch", "webhook_attempts", ["batch_id", "attempt"])


def downgrade() -> None:
    op.drop_index("ix_webhook_attempts_batch", table_name="webhook_attempts")
    op.drop_table("webhook_attempts")
    op.drop_index("ix_batch_results_status", table_name="batch_results")
    op.drop_index("ix_batch_results_order", table_name="batch_results")
    op.drop_table("batch_results")
    op.drop_index("ix_batch_chunks_due", table_name="batch_chunks")
    op.drop_table("batch_chunks")
    op.drop_index("ix_batch_documents_state", table_name="batch_documents")
    op.drop_index("ix_batch_documents_chunk", table_name="batch_documents")
    op.drop_table("batch_documents")
    op.drop_index("ix_batches_webhook_due", table_name="batches")
    op.drop_index("ix_batches_state_created", table_name="batches")
    op.drop_table("batches")
