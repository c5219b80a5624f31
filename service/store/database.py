"""Engines, sessions and the migration gate.

SQLite is the embedded default; PostgreSQL serves teams and many workers. The
same models and migrations run on both, so this module only smooths the
dialect differences that matter at run time (foreign keys, WAL, busy waits).
"""

from __future__ import annotations

import threading
import weakref
from collections.abc import Iterator
from contextlib import contextmanager
from functools import lru_cache
from pathlib import Path
from typing import Any

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings

MIGRATIONS_DIR = Path(__file__).resolve().parent.parent.parent / "migrations"


READ_ONLY_OPTION = "whichsense_read_only"
# How long a writer waits at the in-process gate before leaving it to SQLite's own
# busy wait (a thread that already holds the gate must not wait on itself forever).
WRITE_GATE_WAIT_SECONDS = 30.0


class DatabaseNotMigrated(RuntimeError):
    """The schema is missing or older than this code; `whichsense db upgrade` fixes it."""


_WRITE_GATES: weakref.WeakKeyDictionary[Engine, threading.Lock] = weakref.WeakKeyDictionary()
_READ_ONLY: weakref.WeakKeyDictionary[sessionmaker[Session], sessionmaker[Session]] = (
    weakref.WeakKeyDictionary()
)


def write_gate(engine: Engine) -> threading.Lock | None:
    """The lock this process's writers to a SQLite `engine` queue on (None: not SQLite)."""
    return _WRITE_GATES.get(engine)


def _configure_sqlite(engine: Engine) -> None:
    gate = _WRITE_GATES.setdefault(engine, threading.Lock())

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection, _record) -> None:  # type: ignore[no-untyped-def]
        # Let Python's sqlite3 stop issuing its own BEGIN so we control it.
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        cursor.execute("PRAGMA foreign_keys=ON")
        cursor.execute("PRAGMA busy_timeout=30000")
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA synchronous=NORMAL")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn) -> None:  # type: ignore[no-untyped-def]
        if conn.get_execution_options().get(READ_ONLY_OPTION):
            # Deferred: under WAL a reader sees the last commit and never waits for
            # the writer, so status reads stay fast while batches are written.
            conn.exec_driver_sql("BEGIN")
            return
        # Writers of this process queue here, blocked rather than polling: SQLite's busy
        # handler sleeps up to 100 ms between tries, so a newcomer can take the lock
        # again and again ahead of a request that has waited for seconds.
        raw = conn.connection.dbapi_connection
        if gate.acquire(timeout=WRITE_GATE_WAIT_SECONDS):
            holders.add(raw)
        try:
            # IMMEDIATE takes the write lock up front: one claimer at a time, no
            # deadlock-prone lock upgrades between the API and the worker.
            conn.exec_driver_sql("BEGIN IMMEDIATE")
        except BaseException:
            _leave(raw)
            raise

    # The DBAPI connections whose transaction holds the gate (the pool's `info` is
    # reset when a connection is invalidated, so the mark cannot live there).
    holders: set[Any] = set()

    def _leave(raw: Any) -> None:
        try:
            holders.remove(raw)
        except KeyError:
            return
        gate.release()

    def _leave_connection(conn: Any) -> None:
        try:
            raw = conn.connection.dbapi_connection
        except SQLAlchemyError:
            return  # invalidated: the pool's invalidate event frees the gate
        _leave(raw)

    @event.listens_for(engine, "commit")
    def _on_commit(conn) -> None:  # type: ignore[no-untyped-def]
        _leave_connection(conn)

    @event.listens_for(engine, "rollback")
    def _on_rollback(conn) -> None:  # type: ignore[no-untyped-def]
        _leave_connection(conn)

    @event.listens_for(engine, "checkin")
    def _on_checkin(dbapi_connection, _record) -> None:  # type: ignore[no-untyped-def]
        _leave(dbapi_connection)  # a connection returned mid-transaction

    @event.listens_for(engine, "invalidate")
    def _on_invalidate(dbapi_connection, _record, _exception) -> None:  # type: ignore[no-untyped-def]
        _leave(dbapi_connection)  # a lost connection


def make_engine(url: str) -> Engine:
    """An engine for `url`, with SQLite tuned for one writer and many readers."""
    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        database = parsed.database
        if database and database != ":memory:":
            Path(database).expanduser().parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": 30})
        _configure_sqlite(engine)
        return engine
    return create_engine(url, pool_pre_ping=True, pool_size=10, max_overflow=20)


@lru_cache(maxsize=8)
def engine_for(url: str) -> Engine:
    """One engine (and pool) per URL per process."""
    return make_engine(url)


def session_factory(url: str) -> sessionmaker[Session]:
    return sessionmaker(engine_for(url), expire_on_commit=False)


def read_only(sessions: sessionmaker[Session]) -> sessionmaker[Session]:
    """`sessions` for work that only reads: on SQLite their transactions are deferred
    (no BEGIN IMMEDIATE, no place at the write gate), so under WAL they read the last
    commit without waiting for a writer and never make a writer wait."""
    bind = sessions.kw.get("bind")
    if not isinstance(bind, Engine):
        raise TypeError("read_only needs sessions bound to one engine")
    if bind.get_execution_options().get(READ_ONLY_OPTION):
        return sessions
    reads = _READ_ONLY.get(sessions)
    if reads is None:  # one per factory: a worker asks on every poll
        reads = sessionmaker(
            **{**sessions.kw, "bind": bind.execution_options(**{READ_ONLY_OPTION: True})}
        )
        _READ_ONLY[sessions] = reads
    return reads


def read_session_factory(url: str) -> sessionmaker[Session]:
    """Sessions for requests that only read (on SQLite they skip the write lock)."""
    return read_only(session_factory(url))


@contextmanager
def session_scope(settings: Settings) -> Iterator[Session]:
    """A session that commits on success and rolls back on any error."""
    with session_scope_for(settings.database_url) as session:
        yield session


@contextmanager
def session_scope_for(url: str) -> Iterator[Session]:
    """`session_scope` for a database URL."""
    session = session_factory(url)()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()


def alembic_config(url: str) -> Config:
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    config.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return config


def upgrade(url: str, revision: str = "head") -> None:
    """Bring the schema at `url` up to `revision`."""
    command.upgrade(alembic_config(url), revision)


def head_revision() -> str | None:
    return ScriptDirectory.from_config(alembic_config("sqlite://")).get_current_head()


def current_revision(engine: Engine) -> str | None:
    with engine.connect() as connection:
        return MigrationContext.configure(connection).get_current_revision()


def require_migrated(url: str) -> None:
    """Raise DatabaseNotMigrated unless the schema at `url` is at the head revision."""
    current = current_revision(engine_for(url))
    head = head_revision()
    if current != head:
        found = current or "no schema"
        raise DatabaseNotMigrated(
            f"database {make_url(url).render_as_string(hide_password=True)} is at {found}, "
            f"this whichsense needs {head}: run `whichsense db upgrade`"
        )
