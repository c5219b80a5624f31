"""Chunk leases: how many workers share one queue without losing or repeating work.

- Claim: the oldest chunk that is pending and due, or leased with an expired
  lease, is taken with `SELECT ... FOR UPDATE SKIP LOCKED` (PostgreSQL: workers
  never wait on each other's candidate rows) and given a fresh random token and
  an expiry. On SQLite every transaction is BEGIN IMMEDIATE, so one claimer
  runs at a time and the same statement is safe without SKIP LOCKED.
- Heartbeat: the holder pushes the expiry forward while it works.
- Write: results go in with `hold_lease`, which locks the batch row and then
  the chunk row and checks the token is still ours; a worker whose lease was
  taken over (or whose batch was cancelled) gets LeaseLost and writes nothing.
  Locks are always taken batch first, then chunk, so writers cannot deadlock.
- Release: a chunk with documents left to retry goes back to pending with a
  due time in the future (backoff); a worker that stops on SIGTERM refunds the
  attempt it was counted for.

Times come from `database_now`, i.e. PostgreSQL's clock on PostgreSQL.
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import func, insert, select, update
from sqlalchemy.orm import Session, sessionmaker

from service.batches.repository import finish_if_complete, mark_running
from service.store.clock import database_now
from service.store.database import read_only
from service.store.models import Batch, BatchChunk, BatchDocument, BatchResult


class LeaseLost(RuntimeError):
    """The chunk is no longer leased to us (expired and reclaimed, or cancelled)."""


@dataclass(frozen=True)
class Claim:
    """A leased chunk and the pinning of its batch."""

    chunk_id: int
    batch_id: str
    chunk_index: int
    token: str
    owner: str
    attempts: int
    inventory_id: int
    inventory_name: str
    inventory_version: int
    evidence_watermark: int
    options: dict[str, Any] = field(default_factory=dict)


def _due(now: datetime) -> Any:
    return BatchChunk.state.in_(("pending", "leased")) & (BatchChunk.available_at <= now)


def chunk_due(session: Session) -> bool:
    """Whether some chunk is due for a claim (a read: an idle poll writes nothing)."""
    now = database_now(session)
    return session.scalar(select(BatchChunk.id).where(_due(now)).limit(1)) is not None


def claim_chunk(session: Session, owner: str, lease_seconds: float) -> Claim | None:
    """Lease the next due chunk to `owner`, or None when there is nothing to do."""
    now = database_now(session)
    chunk = session.scalars(
        select(BatchChunk)
        .where(_due(now))
        .order_by(BatchChunk.id)
        .limit(1)
        .with_for_update(skip_locked=True)
    ).first()
    if chunk is None:
        return None
    chunk.state = "leased"
    chunk.lease_owner = owner[:200]
    chunk.lease_token = secrets.token_hex(16)
    chunk.attempts += 1
    chunk.available_at = now + timedelta(seconds=lease_seconds)
    batch = session.get_one(Batch, chunk.batch_id)
    session.flush()
    return Claim(
        chunk_id=chunk.id,
        batch_id=chunk.batch_id,
        chunk_index=chunk.chunk_index,
        token=chunk.lease_token,
        owner=owner,
        attempts=chunk.attempts,
        inventory_id=batch.inventory_id,
        inventory_name=batch.inventory_name,
        inventory_version=batch.inventory_version,
        evidence_watermark=batch.evidence_watermark,
        options=dict(batch.options or {}),
    )


def claim_next(sessions: sessionmaker[Session], owner: str, lease_seconds: float) -> Claim | None:
    """Lease the next due chunk and mark its batch running, in two short transactions
    (the batch row is never locked after a chunk row, so no deadlock with `hold_lease`).
    Whether anything is due is read first, so polling an empty queue takes no write lock."""
    with read_only(sessions)() as session:
        due = chunk_due(session)
        session.rollback()
    if not due:
        return None
    with sessions.begin() as session:
        claim = claim_chunk(session, owner, lease_seconds)
    if claim is not None:
        with sessions.begin() as session:
            mark_running(session, claim.batch_id, database_now(session))
    return claim


def _held(claim: Claim) -> Any:
    return (
        (BatchChunk.id == claim.chunk_id)
        & (BatchChunk.lease_token == claim.token)
        & (BatchChunk.state == "leased")
    )


def extend_lease(session: Session, claim: Claim, lease_seconds: float) -> bool:
    """Push the expiry `lease_seconds` ahead; False if the lease is no longer ours."""
    now = database_now(session)
    result = session.execute(
        update(BatchChunk)
        .where(_held(claim))
        .values(available_at=now + timedelta(seconds=lease_seconds))
    )
    return result.rowcount == 1  # type: ignore[attr-defined]


def release_chunk(
    session: Session,
    claim: Claim,
    *,
    delay_seconds: float,
    error: str | None = None,
    refund_attempt: bool = False,
) -> bool:
    """Give the chunk back (due after `delay_seconds`); False if it was not ours any more."""
    now = database_now(session)
    result = session.execute(
        update(BatchChunk)
        .where(_held(claim))
        .values(
            state="pending",
            lease_owner=None,
            lease_token=None,
            available_at=now + timedelta(seconds=delay_seconds),
            last_error=error,
            attempts=BatchChunk.attempts - (1 if refund_attempt else 0),
        )
    )
    return result.rowcount == 1  # type: ignore[attr-defined]


def hold_lease(session: Session, claim: Claim) -> tuple[Batch, BatchChunk]:
    """Lock the batch, then the chunk, and check the lease is still ours (else LeaseLost)."""
    batch = session.scalars(
        select(Batch).where(Batch.id == claim.batch_id).with_for_update()
    ).one_or_none()
    chunk = session.scalars(select(BatchChunk).where(_held(claim)).with_for_update()).one_or_none()
    if batch is None or chunk is None:
        raise LeaseLost(f"chunk {claim.chunk_id} of batch {claim.batch_id} is no longer ours")
    return batch, chunk


@dataclass(frozen=True)
class PendingDocument:
    """A document to process, as plain values (it outlives the session that read it)."""

    row_id: int
    batch_id: str
    position: int
    document_id: str
    fields: list[Any]
    attempts: int

    @classmethod
    def of(cls, row: BatchDocument) -> PendingDocument:
        return cls(row.id, row.batch_id, row.position, row.document_id, row.fields, row.attempts)


def pending_documents(session: Session, claim: Claim) -> list[PendingDocument]:
    rows = session.scalars(
        select(BatchDocument)
        .where(
            BatchDocument.batch_id == claim.batch_id,
            BatchDocument.chunk_index == claim.chunk_index,
            BatchDocument.state == "pending",
        )
        .order_by(BatchDocument.position)
    )
    return [PendingDocument.of(row) for row in rows]


def write_document_results(
    session: Session,
    document: PendingDocument,
    results: list[dict[str, Any]],
    now: datetime,
) -> bool:
    """Store a document's results and mark it done (caller holds the lease).

    Only a still-pending document is written, in the transaction that flips it
    to done, so the same results can never be stored twice; the unique key on
    (batch, document, field, occurrence) backs this up.
    """
    flipped = session.execute(
        update(BatchDocument)
        .where(BatchDocument.id == document.row_id, BatchDocument.state == "pending")
        .values(state="done", error=None, finished_at=now)
    )
    if flipped.rowcount != 1:  # type: ignore[attr-defined]
        return False
    if results:
        session.execute(
            insert(BatchResult),
            [
                {
                    "batch_id": document.batch_id,
                    "document_position": document.position,
                    "document_id": document.document_id,
                    "field": result["field"],
                    "occurrence_index": result["occurrence_index"],
                    "term": result["term"],
                    "sense_id": result["sense_id"],
                    "status": result["status"],
                    "confidence": float(result["confidence"]),
                    "result": result,
                }
                for result in results
            ],
        )
    return True


def start_document_attempt(
    session: Session, document_id: int, max_attempts: int, now: datetime
) -> PendingDocument | None:
    """Count one more try at a pending document before trying it (caller holds the lease).

    Counting first means a document that kills its worker is still counted, so
    it cannot take the chunk down forever: once out of tries it is failed here
    and None is returned (as for a document that is no longer pending).
    """
    document = session.scalars(
        select(BatchDocument).where(BatchDocument.id == document_id).with_for_update()
    ).one_or_none()
    if document is None or document.state != "pending":
        return None
    if fail_exhausted_document(session, document, max_attempts, now):
        return None
    document.attempts += 1
    session.flush()
    return PendingDocument.of(document)


def record_document_error(
    session: Session,
    document_id: int,
    error: str,
    *,
    permanent: bool,
    max_attempts: int,
    now: datetime,
) -> bool:
    """Keep the error; fail the document for good if permanent or out of attempts.

    Returns True when the document is now failed.
    """
    document = session.get(BatchDocument, document_id, with_for_update=True)
    if document is None or document.state != "pending":
        return False
    document.error = error[:4000]
    if permanent or document.attempts >= max_attempts:
        document.state = "failed"
        document.finished_at = now
    session.flush()
    return document.state == "failed"


def fail_exhausted_document(
    session: Session, document: BatchDocument, max_attempts: int, now: datetime
) -> bool:
    """Fail a document whose tries ran out (its worker kept dying); True if failed."""
    if document.state != "pending" or document.attempts < max_attempts:
        return False
    document.state = "failed"
    document.finished_at = now
    document.error = (
        f"gave up after {document.attempts} attempts"
        + (
            f"; last error: {document.error}"
            if document.error
            else "; the worker stopped each time"
        )
    )[:4000]
    session.flush()
    return True


def complete_chunk(session: Session, batch: Batch, chunk: BatchChunk) -> bool:
    """Mark the chunk done if none of its documents is pending; end the batch if it was the
    last. Returns False (chunk left leased) when documents remain."""
    now = database_now(session)
    left = session.scalar(
        select(func.count())
        .select_from(BatchDocument)
        .where(
            BatchDocument.batch_id == chunk.batch_id,
            BatchDocument.chunk_index == chunk.chunk_index,
            BatchDocument.state == "pending",
        )
    )
    if left:
        return False
    chunk.state = "done"
    chunk.lease_token = None  # the owner stays, to show who did the work
    chunk.finished_at = now
    session.flush()
    finish_if_complete(session, batch, now)
    return True
