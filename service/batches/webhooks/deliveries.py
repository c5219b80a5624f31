"""Webhook deliveries as rows: due, claimed (by pushing the due time past the
timeout), recorded. A worker that dies mid-POST leaves the delivery due again,
so delivery is at least once; receivers de-duplicate on the batch id."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.batches.repository import batch_counts
from service.batches.status import webhook_body
from service.store.clock import database_now
from service.store.models import ApiKey, Batch, WebhookAttempt


@dataclass(frozen=True)
class DueWebhook:
    batch_id: str
    url: str
    attempt: int
    key_id: str
    signing_secret: str
    body: dict[str, Any]


def _due(now: datetime) -> Any:
    return (Batch.webhook_state == "pending") & (Batch.webhook_next_attempt_at <= now)


def webhook_due(session: Session) -> bool:
    """Whether some delivery is due (a read: checking an empty queue writes nothing)."""
    now = database_now(session)
    return session.scalar(select(Batch.id).where(_due(now)).limit(1)) is not None


def claim_due_webhook(session: Session, claim_seconds: float) -> DueWebhook | None:
    """The oldest due delivery, pushed `claim_seconds` ahead so no other worker takes it."""
    now = database_now(session)
    batch = session.scalars(
        select(Batch)
        .where(_due(now))
        .order_by(Batch.webhook_next_attempt_at)
        .limit(1)
        .with_for_update(skip_locked=True)
    ).first()
    if batch is None:
        return None
    secret = session.scalar(
        select(ApiKey.signing_secret).where(ApiKey.key_id == batch.submitted_by)
    )
    batch.webhook_attempts += 1
    batch.webhook_next_attempt_at = now + timedelta(seconds=claim_seconds)
    body = webhook_body(batch, batch_counts(session, batch))
    session.flush()
    return DueWebhook(
        batch_id=batch.id,
        url=batch.callback_url or "",
        attempt=batch.webhook_attempts,
        key_id=batch.submitted_by,
        signing_secret=secret or "",
        body=body,
    )


def record_webhook_attempt(
    session: Session,
    due: DueWebhook,
    *,
    status_code: int | None,
    error: str | None,
    duration_seconds: float,
    delivered: bool,
    retry_in: float | None,
) -> None:
    """Log the attempt; then delivered, failed for good (retry_in None), or due again later."""
    now = database_now(session)
    session.add(
        WebhookAttempt(
            batch_id=due.batch_id,
            attempt=due.attempt,
            attempted_at=now,
            status_code=status_code,
            error=error,
            duration_seconds=duration_seconds,
        )
    )
    batch = session.scalars(
        select(Batch).where(Batch.id == due.batch_id).with_for_update()
    ).one_or_none()
    if batch is None:
        return
    if delivered and batch.webhook_state != "delivered":
        batch.webhook_state = "delivered"  # a success always counts, even from a late attempt
        batch.webhook_next_attempt_at = None
        session.flush()
        return
    if batch.webhook_state != "pending" or batch.webhook_attempts != due.attempt:
        # Another worker claimed a later attempt (or the delivery ended) while this one was
        # slow: its failure is logged above but must not reschedule or overwrite the state.
        session.flush()
        return
    if delivered:
        batch.webhook_state = "delivered"
        batch.webhook_next_attempt_at = None
    elif retry_in is None:
        batch.webhook_state = "failed"
        batch.webhook_next_attempt_at = None
    else:
        batch.webhook_next_attempt_at = now + timedelta(seconds=retry_in)
    session.flush()
