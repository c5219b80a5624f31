"""Migrations build the schema the models describe, on SQLite and on PostgreSQL."""

from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import inspect

from service.store import database
from service.store.models import Base
from tests.conftest import create_postgres_database, drop_postgres_database


def _assert_matches_models(url: str) -> None:
    engine = database.engine_for(url)
    with engine.connect() as connection:
        context = MigrationContext.configure(connection)
        assert compare_metadata(context, Base.metadata) == []
        assert context.get_current_revision() == database.head_revision()
    assert set(inspect(engine).get_table_names()) >= {t.name for t in Base.metadata.sorted_tables}


def test_sqlite_upgrade_downgrade_upgrade(tmp_path):
    url = f"sqlite:///{tmp_path / 'm.db'}"
    database.upgrade(url)
    _assert_matches_models(url)
    database.upgrade(url, "head")  # idempotent
    from alembic import command

    command.downgrade(database.alembic_config(url), "base")
    assert database.current_revision(database.engine_for(url)) is None
    database.upgrade(url)
    _assert_matches_models(url)


def test_postgres_fresh_database_upgrade(postgres_admin_url):
    url = create_postgres_database(postgres_admin_url)
    try:
        database.upgrade(url)
        _assert_matches_models(url)
    finally:
        drop_postgres_database(postgres_admin_url, url)


def _fill_single_tenant_0002(url: str) -> str:
    """A database at 0002 with a key, an inventory (rows, version, evidence) and a batch,
    written as that schema's code would; returns the key's token."""
    import hashlib

    from sqlalchemy import text

    database.upgrade(url, "0002")
    secret = "s3cret-for-the-migration-test"
    now = "2026-12-01 10:00:00"
    statements = [
        "INSERT INTO api_keys (id, key_id, secret_hash, scope, label, signing_secret, created_at)"
        f" VALUES (1, 'abc123', '{hashlib.sha256(secret.encode()).hexdigest()}', 'admin', 'old',"
        f" 'sign', '{now}')",
        "INSERT INTO inventories (id, name, description, version, review_threshold,"
        f" abstain_threshold, created_at, updated_at) VALUES (1, 'shop', '', 1, 0.5, 0.2,"
        f" '{now}', '{now}')",
        "INSERT INTO inventory_versions (id, inventory_id, version, document, created_at)"
        f" VALUES (1, 1, 1, '{{}}', '{now}')",
        "INSERT INTO terms (id, inventory_id, term, folded, aliases, case_rule, inflect, position)"
        " VALUES (1, 1, 'bass', 'bass', '[]', 'insensitive', true, 0)",
        "INSERT INTO senses (id, inventory_id, term_id, sense_key, gloss, tags, position)"
        " VALUES (1, 1, 1, 'bass.fish', 'a fish', '[]', 0)",
        "INSERT INTO evidence (id, inventory_id, term, sense_key, text, start_offset, end_offset,"
        f" source, created_at) VALUES (1, 1, 'bass', 'bass.fish', 'a bass', 2, 6, 'import',"
        f" '{now}')",
        "INSERT INTO batches (id, inventory_id, inventory_name, inventory_version,"
        " evidence_watermark, state, options, chunk_size, document_count, occurrence_count,"
        " submitted_by, base_url, webhook_state, webhook_attempts, created_at) VALUES"
        f" ('b1', 1, 'shop', 1, 1, 'done', '{{}}', 10, 1, 1, 'abc123', '', 'none', 0, '{now}')",
        "INSERT INTO batch_documents (id, batch_id, position, chunk_index, document_id, fields,"
        " metadata, occurrence_count, state, attempts) VALUES (1, 'b1', 0, 0, 'd1', '[]', '{}',"
        " 1, 'done', 1)",
        "INSERT INTO batch_results (id, batch_id, document_position, document_id, field,"
        " occurrence_index, term, sense_id, status, confidence, result) VALUES"
        " (1, 'b1', 0, 'd1', 'text', 0, 'bass', 'bass.fish', 'assigned', 0.9, '{}')",
    ]
    with database.engine_for(url).begin() as conn:
        for statement in statements:
            conn.execute(text(statement))
    return f"ws_abc123_{secret}"


def _assert_single_tenant_rows_moved_to_default(url: str, token: str) -> None:
    from sqlalchemy import func, select

    from service.store.keys import authenticate
    from service.store.models import (
        ApiKey,
        Batch,
        BatchDocument,
        BatchResult,
        EvidenceRecord,
        Inventory,
        Sense,
        Team,
        Term,
    )
    from service.store.teams import create_team

    _assert_matches_models(url)
    with database.session_scope_for(url) as session:
        teams = session.scalars(select(Team)).all()
        assert [t.name for t in teams] == ["default"]
        default = teams[0].id
        for model in (ApiKey, Inventory, Batch):
            assert session.scalars(select(model.team_id)).all() == [default]
        # Nothing cascaded away while the tables were rebuilt.
        for model in (Term, Sense, EvidenceRecord, BatchDocument, BatchResult):
            assert session.scalar(select(func.count()).select_from(model)) == 1
        key = authenticate(session, token)
        assert key is not None and key.team_id == default
        other = create_team(session, "second")  # the id sequence continues after the default
        assert other.id != default
        session.add(
            Inventory(
                id=2, team_id=other.id, name="shop", review_threshold=0.5, abstain_threshold=0.2
            )
        )
        session.flush()  # the same name in another team is allowed now


def test_sqlite_single_tenant_0002_database_moves_into_team_default(tmp_path):
    url = f"sqlite:///{tmp_path / 'old.db'}"
    token = _fill_single_tenant_0002(url)
    database.upgrade(url)
    _assert_single_tenant_rows_moved_to_default(url, token)


def test_postgres_single_tenant_0002_database_moves_into_team_default(postgres_admin_url):
    url = create_postgres_database(postgres_admin_url)
    try:
        token = _fill_single_tenant_0002(url)
        database.upgrade(url)
        _assert_single_tenant_rows_moved_to_default(url, token)
    finally:
        drop_postgres_database(postgres_admin_url, url)
