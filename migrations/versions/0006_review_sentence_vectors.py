"""Review items keep their window sentence vector beside the token vector.

With an inventory's sentence channel on, the engine scores an occurrence from
both vectors; keeping both lets a decision re-score pending items, and the item
page rank senses, exactly as a batch would. Items made before this revision
have none (NULL) and are left as they were when the channel is on.

Revision ID: 0006_review_sentence_vectors
Revises: 0005_cascade_indexes
Create Date: 2026-12-05
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0006_review_sentence_vectors"
down_revision = "0005_cascade_indexes"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("review_items") as table:
        table.add_column(sa.Column("sentence_vector", sa.LargeBinary(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("review_items") as table:
        table.drop_column("sentence_vector")
