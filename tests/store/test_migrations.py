"""Migrations build the schema the models describe, on SQLite and on PostgreSQL."""

from __future__ import annotations

import pytest
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


@pytest.mark.slow
def test_postgres_fresh_database_upgrade(postgres_admin_url):
    url = create_postgres_database(postgres_admin_url)
    try:
        database.upgrade(url)
        _assert_matches_models(url)
    finally:
        drop_postgres_database(postgres_admin_url, url)
