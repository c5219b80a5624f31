"""One clock for leases and retries: the database's when there are many machines.

Leases are compared across workers on different hosts, so on PostgreSQL the
time comes from the server (`now()`, the transaction's start) and host clock
skew cannot make a live lease look expired. SQLite is one host, so its clock is
this process's. SQLite hands datetimes back without a zone; `as_utc` restores it.
"""

from __future__ import annotations

from datetime import UTC, datetime

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.store.models import utcnow


def database_now(session: Session) -> datetime:
    """The current time as the database sees it, timezone-aware (UTC)."""
    if session.get_bind().dialect.name == "postgresql":
        value = session.scalar(select(func.now()))
        if isinstance(value, datetime):
            return as_utc(value)
    return utcnow()


def as_utc(value: datetime) -> datetime:
    """`value` as an aware UTC datetime (naive values are taken as UTC)."""
    if value.tzinfo is None:
        return value.replace(tzinfo=UTC)
    return value.astimezone(UTC)


def as_utc_or_none(value: datetime | None) -> datetime | None:
    return None if value is None else as_utc(value)


def rfc3339(value: datetime) -> str:
    """`value` as RFC 3339 in UTC with a `Z`, the one form every answer uses for times
    (SQLite's naive values and PostgreSQL's aware ones would otherwise print differently)."""
    return as_utc(value).isoformat().replace("+00:00", "Z")
