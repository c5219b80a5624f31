"""Teams: every key, inventory and batch belongs to one team; an audit log; retention.

Existing rows (a single-tenant database) all go into a team named `default`, so
existing keys keep working and see exactly what they saw before. Inventory
names become unique per team instead of globally.

Revision ID: 0003_teams
Revises: 0002
Create Date: 2026-12-04
"""

from __future__ import annotations

from datetime import UTC, datetime

import sqlalchemy as sa
from alembic import op

revision = "0003_teams"
down_revision = "0002"
branch_labels = None
depends_on = None

OWNED = ("api_keys", "inventories", "batches")
# Name the unnamed UNIQUE(name) of 0001 so SQLite's batch mode can drop it.
_NAMING = {"uq": "uq_%(table_name)s_%(column_0_name)s"}


def _old_name_unique() -> str:
    """What 0001's unnamed UNIQUE(name) on inventories is called on this database."""
    if op.get_bind().dialect.name == "sqlite":
        return "uq_inventories_name"
    for constraint in sa.inspect(op.get_bind()).get_unique_constraints("inventories"):
        if constraint["column_names"] == ["name"]:
            return str(constraint["name"])
    raise RuntimeError("inventories has no UNIQUE(name) constraint to replace")


def upgrade() -> None:
    teams = op.create_table(
        "teams",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=64), nullable=False),
        sa.Column("retention_days", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("name"),
    )
    op.create_table(
        "audit_events",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("team_id", sa.Integer(), nullable=False),
        sa.Column("key_id", sa.String(length=32), nullable=True),
        sa.Column("action", sa.String(length=64), nullable=False),
        sa.Column("subject", sa.String(length=300), nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["team_id"], ["teams.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index("ix_audit_events_team", "audit_events", ["team_id", "id"])

    bind = op.get_bind()
    existing = sum(
        bind.execute(sa.text(f"SELECT COUNT(*) FROM {table}")).scalar_one() for table in OWNED
    )
    default_id = None
    if existing:
        op.bulk_insert(
            teams,
            [{"id": 1, "name": "default", "retention_days": None, "created_at": datetime.now(UTC)}],
        )
        default_id = 1

    for table in OWNED:
        op.add_column(table, sa.Column("team_id", sa.Integer(), nullable=True))
        if default_id is not None:
            op.execute(sa.text(f"UPDATE {table} SET team_id = {default_id}"))
    if bind.dialect.name == "postgresql" and default_id is not None:
        op.execute(sa.text("SELECT setval('teams_id_seq', (SELECT MAX(id) FROM teams))"))

    old_unique = _old_name_unique()
    for table in OWNED:
        with op.batch_alter_table(table, naming_convention=_NAMING) as batch:
            batch.alter_column("team_id", existing_type=sa.Integer(), nullable=False)
            batch.create_foreign_key(
                f"fk_{table}_team_id_teams", "teams", ["team_id"], ["id"], ondelete="CASCADE"
            )
            if table == "inventories":
                batch.drop_constraint(old_unique, type_="unique")
                batch.create_unique_constraint("uq_inventories_team_name", ["team_id", "name"])
    with op.batch_alter_table("batches") as batch:
        batch.add_column(sa.Column("purged_at", sa.DateTime(timezone=True), nullable=True))
        batch.add_column(sa.Column("kept_counts", sa.JSON(), nullable=True))
    op.create_index("ix_batches_team_created", "batches", ["team_id", "created_at", "id"])
    # base_url held the API's root; it now holds the batch's own URL, which the API
    # names (the batch wing no longer spells out a route path).
    op.execute(sa.text("UPDATE batches SET base_url = base_url || '/v1/batches/' || id"))


def downgrade() -> None:
    op.drop_index("ix_batches_team_created", table_name="batches")
    op.execute(
        sa.text(
            "UPDATE batches SET base_url = substr(base_url, 1, length(base_url) - length(id) - 12)"
        )
    )
    with op.batch_alter_table("batches") as batch:
        batch.drop_column("kept_counts")
        batch.drop_column("purged_at")
    for table in OWNED:
        with op.batch_alter_table(table) as batch:
            if table == "inventories":
                batch.drop_constraint("uq_inventories_team_name", type_="unique")
                batch.create_unique_constraint("uq_inventories_name", ["name"])
            batch.drop_constraint(f"fk_{table}_team_id_teams", type_="foreignkey")
            batch.drop_column("team_id")
    op.drop_index("ix_audit_events_team", table_name="audit_events")
    op.drop_table("audit_events")
    op.drop_table("teams")
