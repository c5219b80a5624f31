"""Indexes on the foreign keys an inventory edit cascades through.

Deleting a term deletes its senses and their examples by ON DELETE CASCADE;
without an index on `senses.term_id` and `sense_examples.sense_id` every such
delete scans the whole table, which made one edit of a 10,000-term inventory slow.

Revision ID: 0005_cascade_indexes
Revises: 0004_review
Create Date: 2026-12-04
"""

from __future__ import annotations

from alembic import op

revision = "0005_cascade_indexes"
down_revision = "0004_review"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_index("ix_senses_term_id", "senses", ["term_id"])
    op.create_index("ix_sense_examples_sense_id", "sense_examples", ["sense_id"])


def downgrade() -> None:
    op.drop_index("ix_sense_examples_sense_id", table_name="sense_examples")
    op.drop_index("ix_senses_term_id", table_name="senses")
