"""SQLite writers of one process queue at a gate; every way a transaction ends frees it."""

from __future__ import annotations

import pytest
from sqlalchemy import text
from sqlalchemy.exc import IntegrityError

from service.store import database
from service.store.teams import create_team


@pytest.fixture()
def sqlite_url(tmp_path) -> str:
    url = f"sqlite:///{tmp_path / 'gate.db'}"
    database.upgrade(url)
    return url


def test_a_write_transaction_holds_the_gate_until_commit(sqlite_url):
    gate = database.write_gate(database.engine_for(sqlite_url))
    assert gate is not None and not gate.locked()
    session = database.session_factory(sqlite_url)()
    create_team(session, "one")
    session.flush()
    assert gate.locked()
    session.commit()
    assert not gate.locked()
    session.close()


def test_reads_never_take_the_gate(sqlite_url):
    gate = database.write_gate(database.engine_for(sqlite_url))
    assert gate is not None
    with database.read_session_factory(sqlite_url)() as session:
        session.execute(text("SELECT count(*) FROM teams")).scalar_one()
        assert not gate.locked()


def test_a_failed_or_abandoned_transaction_frees_the_gate(sqlite_url):
    gate = database.write_gate(database.engine_for(sqlite_url))
    assert gate is not None
    with database.session_scope_for(sqlite_url) as session:
        create_team(session, "taken")
    session = database.session_factory(sqlite_url)()
    with pytest.raises(IntegrityError):
        session.execute(text("INSERT INTO teams (name, created_at) VALUES ('taken', '2026-01-01')"))
    session.rollback()
    assert not gate.locked()
    session.execute(text("SELECT 1"))
    assert gate.locked()
    session.close()  # returned to the pool mid-transaction
    assert not gate.locked()
    session = database.session_factory(sqlite_url)()
    session.execute(text("SELECT 1"))
    assert gate.locked()
    session.invalidate()  # the connection is dropped, not rolled back
    assert not gate.locked()


def test_postgres_has_no_gate(postgres_url):
    assert database.write_gate(database.engine_for(postgres_url)) is None
