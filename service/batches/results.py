"""Reading a batch's output: results pages, per-document summaries, failed documents.

Every listing is keyset-paginated on positions that never move (document
position, then result id), so pages never repeat a row. Chunks finish out of
order, though: while a batch is running, a result can land behind a cursor
already passed. Page a finished batch for a complete read (the README says so).

Each function takes the `Batch` row, which only a team-scoped lookup
(`batches.get_batch(session, team_id, ...)`) hands out: no team, no rows.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, or_, select
from sqlalchemy.orm import Session

from service.batches.summaries import SenseTally, summarise
from service.store.errors import NotFound
from service.store.inventories import version_document
from service.store.models import Batch, BatchDocument, BatchResult, Inventory


@dataclass(frozen=True)
class ResultFilter:
    status: str | None = None
    term: str | None = None
    sense: str | None = None
    min_confidence: float | None = None
    max_confidence: float | None = None


def results_page(
    session: Session,
    batch: Batch,
    chosen: ResultFilter,
    *,
    after: tuple[int, int] | None,
    limit: int,
) -> tuple[list[dict[str, Any]], tuple[int, int] | None]:
    """Up to `limit` results after the (document position, id) `after`; and the next key."""
    query = select(BatchResult.document_position, BatchResult.id, BatchResult.result).where(
        BatchResult.batch_id == batch.id
    )
    if chosen.status is not None:
        query = query.where(BatchResult.status == chosen.status)
    if chosen.term is not None:
        query = query.where(BatchResult.term == chosen.term)
    if chosen.sense is not None:
        query = query.where(BatchResult.sense_id == chosen.sense)
    if chosen.min_confidence is not None:
        query = query.where(BatchResult.confidence >= chosen.min_confidence)
    if chosen.max_confidence is not None:
        query = query.where(BatchResult.confidence <= chosen.max_confidence)
    if after is not None:
        query = query.where(
            or_(
                BatchResult.document_position > after[0],
                (BatchResult.document_position == after[0]) & (BatchResult.id > after[1]),
            )
        )
    rows = session.execute(
        query.order_by(BatchResult.document_position, BatchResult.id).limit(limit + 1)
    ).all()
    more = len(rows) > limit
    rows = rows[:limit]
    results = [row.result for row in rows]
    following = (rows[-1].document_position, rows[-1].id) if more and rows else None
    return results, following


def documents_page(
    session: Session,
    batch: Batch,
    *,
    after: int | None,
    limit: int,
    state: str | None = None,
) -> tuple[list[BatchDocument], int | None]:
    """Documents in submission order after position `after` (optionally of one state)."""
    query = select(BatchDocument).where(BatchDocument.batch_id == batch.id)
    if state is not None:
        query = query.where(BatchDocument.state == state)
    if after is not None:
        query = query.where(BatchDocument.position > after)
    rows = list(session.scalars(query.order_by(BatchDocument.position).limit(limit + 1)))
    more = len(rows) > limit
    rows = rows[:limit]
    return rows, (rows[-1].position if more and rows else None)


def find_document(session: Session, batch: Batch, document_id: str) -> BatchDocument:
    document = session.scalars(
        select(BatchDocument).where(
            BatchDocument.batch_id == batch.id, BatchDocument.document_id == document_id
        )
    ).one_or_none()
    if document is None:
        raise NotFound(f"batch '{batch.id}' has no document '{document_id}'")
    return document


def summaries(
    session: Session,
    batch: Batch,
    documents: Sequence[BatchDocument],
    tags: Mapping[str, Sequence[str]],
) -> list[dict[str, Any]]:
    """The summary of each document (see `service.batches.summaries`), in the given order."""
    if not documents:
        return []
    tallies: dict[str, list[SenseTally]] = defaultdict(list)
    positions = [d.position for d in documents]
    rows = session.execute(
        select(
            BatchResult.document_id,
            BatchResult.term,
            BatchResult.sense_id,
            BatchResult.status,
            func.count(),
            func.max(BatchResult.confidence),
        )
        .where(
            BatchResult.batch_id == batch.id,
            BatchResult.document_position.between(min(positions), max(positions)),
        )
        .group_by(
            BatchResult.document_id, BatchResult.term, BatchResult.sense_id, BatchResult.status
        )
    )
    for document_id, term, sense_id, status, count, best in rows:
        tallies[document_id].append(
            SenseTally(term, sense_id, status, int(count), float(best or 0.0))
        )
    return [
        {
            "document_id": d.document_id,
            "position": d.position,
            "state": d.state,
            "error": d.error,
            "metadata": d.document_metadata,
            "inventory": {"name": batch.inventory_name, "version": batch.inventory_version},
            **summarise(tallies.get(d.document_id, ()), tags),
        }
        for d in documents
    ]


def sense_tags(document: Mapping[str, Any]) -> dict[str, list[str]]:
    """sense id -> tags, from an inventory version document."""
    return {
        sense["id"]: list(sense.get("tags", ()))
        for term in document.get("terms", ())
        for sense in term.get("senses", ())
    }


def batch_tags(session: Session, batch: Batch) -> dict[str, list[str]]:
    """sense id -> tags, from the inventory version the batch is pinned to."""
    inventory = session.get_one(Inventory, batch.inventory_id)
    return sense_tags(version_document(session, inventory, batch.inventory_version))
