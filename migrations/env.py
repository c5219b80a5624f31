"""Alembic environment: runs migrations online against the configured URL."""

from __future__ import annotations

from alembic import context

from service.config import get_settings
from service.store.database import make_engine
from service.store.models import Base

config = context.config
target_metadata = Base.metadata


def _url() -> str:
    return config.get_main_option("sqlalchemy.url") or get_settings().database_url


def run_offline() -> None:
    context.configure(url=_url(), target_metadata=target_metadata, literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()


def run_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        context.configure(connection=connection, target_metadata=target_metadata)
        with context.begin_transaction():
            context.run_migrations()
        return
    engine = make_engine(_url())
    with engine.connect() as conn:
        sqlite = conn.dialect.name == "sqlite"
        if sqlite:
            # Batch mode rebuilds a table by copy, drop and rename; with foreign keys
            # on, the drop would cascade into every child row. Off for the
            # migration (outside any transaction, as SQLite requires), checked after.
            conn.connection.dbapi_connection.execute("PRAGMA foreign_keys=OFF")  # type: ignore[union-attr]
        context.configure(
            connection=conn,
            target_metadata=target_metadata,
            render_as_batch=conn.dialect.name == "sqlite",
        )
        with context.begin_transaction():
            context.run_migrations()
        if sqlite:
            broken = conn.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
            conn.rollback()
            if broken:
                raise RuntimeError(f"the migration left rows without a parent: {broken[:5]}")
    engine.dispose()


if context.is_offline_mode():
    run_offline()
else:
    run_online()
