"""Batch repository: submission, counts, cancellation and the end of a batch.

Submission happens inside the caller's single transaction (an error anywhere
rolls the whole batch back); `DocumentSink` adds document rows a slice at a
time so a large upload never sits in memory. Chunk leasing lives in
`store.leases`, result reading in `store.batch_results`.

Batch states: queued -> running -> done | failed, and queued/running ->
cancelled. A batch ends "failed" only when not one document could be processed
(all of them failed); otherwise it is "done", with its failed documents listed.
"""

from __future__ import annotations

import secrets
from collections.abc import Callable
from dataclasses import asdict
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import delete, func, insert, or_, select, update
from sqlalchemy.orm import Session

from service.batches.documents import InputDocument
from service.batches.status import BatchCounts, status_document
from service.store.audit import record_audit
from service.store.errors import Conflict, NotFound
from service.store.evidence import evidence_watermark
from service.store.inventories import get_inventory
from service.store.models import (
    TERMINAL_BATCH_STATES,
    Batch,
    BatchChunk,
    BatchDocument,
    BatchResult,
    Team,
    WebhookAttempt,
)

INSERT_ROWS = 500


def new_batch_id() -> str:
    return secrets.token_hex(12)


def start_batch(
    session: Session,
    team_id: int,
    *,
    inventory_name: str,
    submitted_by: str,
    chunk_size: int,
    options: dict[str, Any],
    callback_url: str | None = None,
    idempotency_key: str | None = None,
    batch_url: Callable[[str], str] | None = None,
) -> Batch:
    """Create the batch row pinned to the current inventory version and evidence watermark.

    Flushed at once, so a clashing idempotency key fails here (IntegrityError),
    before any document is read.
    """
    inventory = get_inventory(session, team_id, inventory_name)
    batch_id = new_batch_id()
    batch = Batch(
        id=batch_id,
        team_id=team_id,
        inventory_id=inventory.id,
        inventory_name=inventory.name,
        inventory_version=inventory.version,
        evidence_watermark=evidence_watermark(session, inventory.id),
        state="queued",
        options=options,
        chunk_size=chunk_size,
        document_count=0,
        occurrence_count=0,
        submitted_by=submitted_by,
        idempotency_key=idempotency_key,
        callback_url=callback_url,
        base_url=batch_url(batch_id) if batch_url else "",
        webhook_state="none",
        webhook_attempts=0,
    )
    session.add(batch)
    session.flush()
    return batch


class DocumentSink:
    """Adds a new batch's documents in submission order, INSERT_ROWS rows at a time."""

    def __init__(self, session: Session, batch: Batch) -> None:
        self.session = session
        self.batch = batch
        self.count = 0
        self.occurrences = 0
        self._rows: list[dict[str, Any]] = []

    def add(self, document: InputDocument, occurrences: int) -> None:
        self._rows.append(
            {
                "batch_id": self.batch.id,
                "position": self.count,
                "chunk_index": self.count // self.batch.chunk_size,
                "document_id": document.doc_id,
                "fields": document.fields_json(),
                "document_metadata": document.metadata,
                "occurrence_count": occurrences,
                "state": "pending",
                "attempts": 0,
            }
        )
        self.count += 1
        self.occurrences += occurrences
        if len(self._rows) >= INSERT_ROWS:
            self.flush()

    def flush(self) -> None:
        if self._rows:
            self.session.execute(insert(BatchDocument), self._rows)
            self._rows = []

    def close(self, request_digest: str | None, now: datetime) -> Batch:
        """Write the last rows, one chunk row per `chunk_size` documents, and the totals."""
        self.flush()
        chunks = -(-self.count // self.batch.chunk_size)
        for first in range(0, chunks, INSERT_ROWS):
            self.session.execute(
                insert(BatchChunk),
                [
                    {
                        "batch_id": self.batch.id,
                        "chunk_index": index,
                        "state": "pending",
                        "attempts": 0,
                        "available_at": now,
                    }
                    for index in range(first, min(chunks, first + INSERT_ROWS))
                ],
            )
        self.batch.document_count = self.count
        self.batch.occurrence_count = self.occurrences
        self.batch.request_digest = request_digest
        self.session.flush()
        return self.batch


def schedule_webhook(batch: Batch, now: datetime, event: str = "batch.finished") -> None:
    """Make a notice (completion, or reviewed results) due now, if it has a callback URL."""
    if batch.callback_url:
        batch.webhook_state = "pending"
        batch.webhook_event = event
        batch.webhook_next_attempt_at = now


def get_batch(session: Session, team_id: int, batch_id: str, *, for_update: bool = False) -> Batch:
    """The team's batch; another team's is NotFound, exactly like a missing one."""
    query = select(Batch).where(Batch.team_id == team_id, Batch.id == batch_id)
    if for_update:
        query = query.with_for_update()
    batch = session.scalars(query).one_or_none()
    if batch is None:
        raise NotFound(f"batch '{batch_id}' does not exist")
    return batch


def find_by_idempotency_key(
    session: Session, team_id: int, key_id: str, idempotency_key: str
) -> Batch | None:
    return session.scalars(
        select(Batch).where(
            Batch.team_id == team_id,
            Batch.submitted_by == key_id,
            Batch.idempotency_key == idempotency_key,
        )
    ).one_or_none()


def batch_counts(session: Session, batch: Batch) -> BatchCounts:
    if batch.kept_counts is not None:  # purged: the rows are gone, their counts were kept
        return BatchCounts(**batch.kept_counts)
    documents = dict(
        session.execute(
            select(BatchDocument.state, func.count())
            .where(BatchDocument.batch_id == batch.id)
            .group_by(BatchDocument.state)
        ).all()
    )
    results = dict(
        session.execute(
            select(BatchResult.status, func.count())
            .where(BatchResult.batch_id == batch.id)
            .group_by(BatchResult.status)
        ).all()
    )
    return BatchCounts(
        documents=batch.document_count,
        processed_documents=int(documents.get("done", 0)),
        failed_documents=int(documents.get("failed", 0)),
        cancelled_documents=int(documents.get("cancelled", 0)),
        pending_documents=int(documents.get("pending", 0)),
        occurrences=batch.occurrence_count,
        processed_occurrences=int(sum(results.values())),
        assigned=int(results.get("assigned", 0)),
        review=int(results.get("review", 0)),
        abstained=int(results.get("abstained", 0)),
        reviewed=int(results.get("reviewed", 0)),
    )


def webhook_attempts(session: Session, batch_id: str) -> list[WebhookAttempt]:
    return list(
        session.scalars(
            select(WebhookAttempt)
            .where(WebhookAttempt.batch_id == batch_id)
            .order_by(WebhookAttempt.attempt, WebhookAttempt.id)
        )
    )


def cancel_batch(session: Session, team_id: int, batch_id: str, now: datetime) -> Batch:
    """Stop a queued or running batch: no chunk is processed or written after this commits.

    A chunk a worker is busy with loses its lease, so that worker's write is
    refused; results already written stay. Cancelling a cancelled batch is a
    no-op; a finished one is a Conflict.
    """
    batch = get_batch(session, team_id, batch_id, for_update=True)
    if batch.state == "cancelled":
        return batch
    if batch.state in TERMINAL_BATCH_STATES:
        raise Conflict(f"batch '{batch_id}' has already ended ({batch.state})")
    session.execute(
        update(BatchChunk)
        .where(BatchChunk.batch_id == batch_id, BatchChunk.state.in_(("pending", "leased")))
        .values(state="cancelled", lease_token=None, lease_owner=None, finished_at=now)
    )
    session.execute(
        update(BatchDocument)
        .where(BatchDocument.batch_id == batch_id, BatchDocument.state == "pending")
        .values(state="cancelled", finished_at=now)
    )
    batch.state = "cancelled"
    batch.finished_at = now
    schedule_webhook(batch, now)
    session.flush()
    return batch


def mark_running(session: Session, batch_id: str, now: datetime) -> None:
    """queued -> running when a first chunk is claimed (no-op otherwise)."""
    session.execute(
        update(Batch)
        .where(Batch.id == batch_id, Batch.state == "queued")
        .values(state="running", started_at=now)
    )


def finish_if_complete(session: Session, batch: Batch, now: datetime) -> bool:
    """End `batch` (locked by the caller) once no chunk is left to do; True if it ended."""
    if batch.state in TERMINAL_BATCH_STATES:
        return False
    open_chunks = session.scalar(
        select(func.count())
        .select_from(BatchChunk)
        .where(BatchChunk.batch_id == batch.id, BatchChunk.state.in_(("pending", "leased")))
    )
    if open_chunks:
        return False
    states = dict(
        session.execute(
            select(BatchDocument.state, func.count())
            .where(BatchDocument.batch_id == batch.id)
            .group_by(BatchDocument.state)
        ).all()
    )
    if not states.get("done") and states.get("failed"):
        first_error = session.scalar(
            select(BatchDocument.error)
            .where(BatchDocument.batch_id == batch.id, BatchDocument.state == "failed")
            .order_by(BatchDocument.position)
            .limit(1)
        )
        batch.state = "failed"
        batch.error = f"no document could be processed; the first error was: {first_error}"
    else:
        batch.state = "done"
    batch.started_at = batch.started_at or now
    batch.finished_at = now
    schedule_webhook(batch, now)
    session.flush()
    return True


def describe(session: Session, batch: Batch, url: str) -> dict[str, Any]:
    """The status document of `batch`, whose own URL is `url`."""
    return status_document(
        batch, batch_counts(session, batch), webhook_attempts(session, batch.id), url=url
    )


def list_batches(
    session: Session,
    team_id: int,
    *,
    state: str | None = None,
    inventory: str | None = None,
    created_after: datetime | None = None,
    before: tuple[datetime, str] | None = None,
    limit: int,
) -> tuple[list[Batch], tuple[datetime, str] | None]:
    """The team's batches, newest first, after the (created_at, id) key `before`; and the
    key of the next page (None on the last)."""
    query = select(Batch).where(Batch.team_id == team_id)
    if state is not None:
        query = query.where(Batch.state == state)
    if inventory is not None:
        query = query.where(Batch.inventory_name == inventory)
    if created_after is not None:
        query = query.where(Batch.created_at > created_after)
    if before is not None:
        at, batch_id = before
        query = query.where(
            or_(Batch.created_at < at, (Batch.created_at == at) & (Batch.id < batch_id))
        )
    rows = list(
        session.scalars(query.order_by(Batch.created_at.desc(), Batch.id.desc()).limit(limit + 1))
    )
    more = len(rows) > limit
    rows = rows[:limit]
    return rows, ((rows[-1].created_at, rows[-1].id) if more and rows else None)


def _purge_rows(session: Session, batch: Batch, now: datetime) -> dict[str, int]:
    """Delete a batch's documents, chunks and results, keeping its counts; what was deleted."""
    counts = batch_counts(session, batch)
    deleted = {
        "documents": session.execute(
            delete(BatchDocument).where(BatchDocument.batch_id == batch.id)
        ).rowcount,  # type: ignore[attr-defined]
        "results": session.execute(
            delete(BatchResult).where(BatchResult.batch_id == batch.id)
        ).rowcount,  # type: ignore[attr-defined]
    }
    session.execute(delete(BatchChunk).where(BatchChunk.batch_id == batch.id))
    batch.kept_counts = asdict(counts)
    batch.purged_at = now
    session.flush()
    return deleted


def purge_batch(
    session: Session, team_id: int, batch_id: str, now: datetime, *, key_id: str | None
) -> Batch:
    """Delete the batch's documents and results now (cancelling it first if it runs);
    counts stay. Purging a purged batch changes nothing. Audited."""
    batch = get_batch(session, team_id, batch_id, for_update=True)
    if batch.purged_at is not None:
        return batch
    if batch.state not in TERMINAL_BATCH_STATES:
        cancel_batch(session, team_id, batch_id, now)
    deleted = _purge_rows(session, batch, now)
    record_audit(session, team_id, key_id, "batch.purge", batch.id, {"why": "request", **deleted})
    return batch


def purge_expired(session: Session, now: datetime, *, limit: int = 20) -> int:
    """Purge up to `limit` finished batches older than their team's retention; how many.

    Run by the worker. A batch counts from when it finished; the audit line has
    no key (the service did it) and says why.
    """
    purged = 0
    teams = session.scalars(select(Team).where(Team.retention_days.is_not(None)))
    for team in list(teams):
        cutoff = now - timedelta(days=team.retention_days or 0)
        due = session.scalars(
            select(Batch)
            .where(
                Batch.team_id == team.id,
                Batch.state.in_(TERMINAL_BATCH_STATES),
                Batch.purged_at.is_(None),
                Batch.finished_at < cutoff,
            )
            .order_by(Batch.finished_at)
            .limit(limit - purged)
            .with_for_update(skip_locked=True)
        )
        for batch in list(due):
            deleted = _purge_rows(session, batch, now)
            record_audit(
                session,
                team.id,
                None,
                "batch.purge",
                batch.id,
                {"why": "retention", "retention_days": team.retention_days, **deleted},
            )
            purged += 1
        if purged >= limit:
            break
    return purged
