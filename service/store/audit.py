"""The audit log: who (key id; None for the operator's CLI or the worker) did what, when.

A line is written in the same transaction as the change it records, so the log
never claims a change that rolled back nor misses one that landed.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.store.clock import as_utc
from service.store.models import AuditEvent


def record_audit(
    session: Session,
    team_id: int,
    key_id: str | None,
    action: str,
    subject: str,
    detail: dict[str, Any] | None = None,
) -> AuditEvent:
    """Add one audit line to the caller's transaction (committed with the change)."""
    event = AuditEvent(
        team_id=team_id,
        key_id=key_id,
        action=action,
        subject=subject[:300],
        detail=detail or {},
    )
    session.add(event)
    session.flush()
    return event


def audit_page(
    session: Session,
    team_id: int,
    *,
    before: int | None,
    limit: int,
    action: str | None = None,
    since: datetime | None = None,
) -> tuple[list[AuditEvent], int | None]:
    """The team's audit lines, newest first, with ids below `before`; and the next key."""
    query = select(AuditEvent).where(AuditEvent.team_id == team_id)
    if before is not None:
        query = query.where(AuditEvent.id < before)
    if action is not None:
        query = query.where(AuditEvent.action == action)
    if since is not None:
        query = query.where(AuditEvent.created_at >= since)
    rows = list(session.scalars(query.order_by(AuditEvent.id.desc()).limit(limit + 1)))
    more = len(rows) > limit
    rows = rows[:limit]
    return rows, (rows[-1].id if more and rows else None)


def audit_json(event: AuditEvent) -> dict[str, Any]:
    return {
        "id": event.id,
        "at": as_utc(event.created_at).isoformat(),
        "key_id": event.key_id,
        "action": event.action,
        "subject": event.subject,
        "detail": event.detail,
    }
