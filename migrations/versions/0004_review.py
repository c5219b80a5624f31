"""Review queue: items with their context vectors, decisions, settings, browser sessions.

Revision ID: 0004_review
Revises: 0003_teams
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004_review"
down_revision = "0003_teams"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("batches") as batch:
        batch.add_column(
            sa.Column(
                "webhook_event",
                sa.String(length=32),
                nullable=False,
                server_default="batch.finished",
            )
        )
    op.create_table(
        "review_items",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("team_id", sa.Integer(), nullable=False),
        sa.Column(
            "result_id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False
        ),
        sa.Column("batch_id", sa.String(length=32), nullable=False),
        sa.Column("inventory_id", sa.Integer(), nullable=False),
        sa.Column("term", sa.String(length=200), nullable=False),
        sa.Column("document_id", sa.String(length=200), nullable=False),
        sa.Column("machine_status", sa.String(length=16), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("confidence", sa.Float(), nullable=False),
        sa.Column("margin", sa.Float(), nullable=False),
        sa.Column("usefulness", sa.Float(), nullable=False),
        sa.Column("vector", sa.LargeBinary(), nullable=False),
        sa.Column("claimed_by", sa.String(length=32), nullable=True),
        sa.Column("claim_expires_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("resolved_by_decision", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["result_id"], ["batch_results.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["team_id"], ["teams.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["batch_id"], ["batches.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["inventory_id"], ["inventories.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("result_id"),
    )
    op.create_index(
        "ix_review_items_queue", "review_items", ["team_id", "state", "inventory_id", "term"]
    )
    op.create_index("ix_review_items_batch", "review_items", ["batch_id", "state"])

    op.create_table(
        "review_decisions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("team_id", sa.Integer(), nullable=False),
        sa.Column("item_id", sa.Integer(), nullable=False),
        sa.Column("inventory_id", sa.Integer(), nullable=False),
        sa.Column("inventory_version", sa.Integer(), nullable=False),
        sa.Column("key_id", sa.String(length=32), nullable=False),
        sa.Column("term", sa.String(length=200), nullable=False),
        sa.Column("sense_id", sa.String(length=200), nullable=True),
        sa.Column("machine_sense_id", sa.String(length=200), nullable=True),
        sa.Column("machine_status", sa.String(length=16), nullable=False),
        sa.Column("evidence_id", sa.Integer(), nullable=True),
        sa.Column("queue_share", sa.Float(), nullable=False),
        sa.Column("evidence_count", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("undone_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["item_id"], ["review_items.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["team_id"], ["teams.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["inventory_id"], ["inventories.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index("ix_review_decisions_team", "review_decisions", ["team_id", "id"])
    op.create_index("ix_review_decisions_item", "review_decisions", ["item_id"])

    op.create_table(
        "review_settings",
        sa.Column("inventory_id", sa.Integer(), nullable=False),
        sa.Column("auto_resolve", sa.Boolean(), nullable=False),
        sa.ForeignKeyConstraint(["inventory_id"], ["inventories.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("inventory_id"),
    )
    op.create_table(
        "web_sessions",
        sa.Column("id", sa.String(length=64), nullable=False),
        sa.Column("key_id", sa.String(length=32), nullable=False),
        sa.Column("team_id", sa.Integer(), nullable=False),
        sa.Column("scope", sa.String(length=16), nullable=False),
        sa.Column("csrf_token", sa.String(length=64), nullable=False),
        sa.Column("skipped", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("ended_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["team_id"], ["teams.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_table(
        "web_secrets",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("secret", sa.String(length=128), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id"),
    )


def downgrade() -> None:
    with op.batch_alter_table("batches") as batch:
        batch.drop_column("webhook_event")
    op.drop_table("web_secrets")
    op.drop_table("web_sessions")
    op.drop_table("review_settings")
    op.drop_index("ix_review_decisions_item", table_name="review_decisions")
    op.drop_index("ix_review_decisions_team", table_name="review_decisions")
    op.drop_table("review_decisions")
    op.drop_index("ix_review_items_batch", table_name="review_items")
    op.drop_index("ix_review_items_queue", table_name="review_items")
    op.drop_table("review_items")
