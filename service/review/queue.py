"""The queue: which batch results wait for a person, in what order, and who holds which.

Items are made from batch results of status review or abstained the first time a
team's queue is read (`sync_queue`); each keeps its occurrence's context and
window sentence vectors, so a decision re-scores the term's other pending items
without encoding them again. Claims are short leases: a reviewer's claim keeps
others off the item until it expires, and an expired claim returns the item to everybody.
"""

from __future__ import annotations

import threading
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Literal

import numpy as np
from sqlalchemy import func, or_, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.config import Settings
from service.review.ranking import information_density
from service.store.clock import as_utc_or_none, database_now
from service.store.errors import NotFound
from service.store.models import (
    Batch,
    BatchDocument,
    BatchResult,
    Inventory,
    ReviewItem,
    ReviewSettings,
)
from service.tagging.engines import shared_engines

QUEUE_STATUSES = ("review", "abstained")
CLAIM_SECONDS = 300
SYNC_LIMIT = 2_000
MAX_CLAIM = 50
Order = Literal["useful", "confidence", "margin"]
ORDERS: tuple[Order, ...] = ("useful", "confidence", "margin")

# Tokenizers must not run on two threads at once; this keeps queue encodings in line.
_ENCODE_LOCK = threading.Lock()


@dataclass(frozen=True)
class QueueFilter:
    inventory: str | None = None
    term: str | None = None
    batch: str | None = None


def vector_to_bytes(vector: np.ndarray) -> bytes:
    return np.asarray(vector, dtype="<f4").tobytes()


def vector_from_bytes(data: bytes) -> np.ndarray:
    return np.frombuffer(data, dtype="<f4")


def field_text(fields: Sequence[Sequence[str]], name: str) -> str:
    for field_name, text in fields:
        if field_name == name:
            return text
    return ""


def sync_queue(session: Session, settings: Settings, team_id: int) -> int:
    """Make queue items of the team's review and abstained results that have none yet."""
    rows = session.execute(
        select(BatchResult, Batch.inventory_id)
        .join(Batch, Batch.id == BatchResult.batch_id)
        .outerjoin(ReviewItem, ReviewItem.result_id == BatchResult.id)
        .where(
            Batch.team_id == team_id,
            BatchResult.status.in_(QUEUE_STATUSES),
            ReviewItem.id.is_(None),
        )
        .order_by(BatchResult.id)
        .limit(SYNC_LIMIT)
    ).all()
    if not rows:
        return 0
    wanted = {(r.BatchResult.batch_id, r.BatchResult.document_id) for r in rows}
    documents: dict[tuple[str, str], list[list[str]]] = {}
    for batch_id in {b for b, _ in wanted}:
        names = [d for b, d in wanted if b == batch_id]
        for doc in session.scalars(
            select(BatchDocument).where(
                BatchDocument.batch_id == batch_id, BatchDocument.document_id.in_(names)
            )
        ):
            documents[(batch_id, doc.document_id)] = doc.fields
    spans = []
    for row in rows:
        result = row.BatchResult
        text = field_text(documents.get((result.batch_id, result.document_id), []), result.field)
        spans.append((text, int(result.result["start"]), int(result.result["end"])))
    encoder = shared_engines().encoder(settings)
    with _ENCODE_LOCK:  # one forward pass gives both vectors
        vectors, sentences = encoder.encode_spans_with_windows(spans)
    touched: set[tuple[int, str]] = set()
    for row, vector, sentence in zip(rows, vectors, sentences, strict=True):
        result = row.BatchResult
        try:
            with session.begin_nested():
                session.add(
                    ReviewItem(
                        team_id=team_id,
                        result_id=result.id,
                        batch_id=result.batch_id,
                        inventory_id=row.inventory_id,
                        term=result.term,
                        document_id=result.document_id,
                        machine_status=result.status,
                        state="pending",
                        confidence=float(result.confidence),
                        margin=float(result.result.get("margin", 0.0)),
                        usefulness=0.0,
                        vector=vector_to_bytes(vector),
                        sentence_vector=vector_to_bytes(sentence),
                    )
                )
        except IntegrityError:  # another request made this item meanwhile
            continue
        touched.add((row.inventory_id, result.term))
    for inventory_id, term in touched:
        refresh_usefulness(session, team_id, inventory_id, term)
    session.flush()
    return len(rows)


def pending_items(session: Session, team_id: int, inventory_id: int, term: str) -> list[ReviewItem]:
    return list(
        session.scalars(
            select(ReviewItem)
            .where(
                ReviewItem.team_id == team_id,
                ReviewItem.inventory_id == inventory_id,
                ReviewItem.term == term,
                ReviewItem.state == "pending",
            )
            .order_by(ReviewItem.id)
        )
    )


def refresh_usefulness(session: Session, team_id: int, inventory_id: int, term: str) -> None:
    """Recompute information density for the term's pending items (it depends on the pool)."""
    items = pending_items(session, team_id, inventory_id, term)
    if not items:
        return
    vectors = np.stack([vector_from_bytes(item.vector) for item in items])
    scores = information_density(vectors, np.array([item.confidence for item in items]))
    for item, score in zip(items, scores, strict=True):
        item.usefulness = float(score)


def _filtered(query, session: Session, team_id: int, chosen: QueueFilter):  # type: ignore[no-untyped-def]
    query = query.where(ReviewItem.team_id == team_id)
    if chosen.inventory is not None:
        query = query.join(Inventory, Inventory.id == ReviewItem.inventory_id).where(
            Inventory.name == chosen.inventory
        )
    if chosen.term is not None:
        query = query.where(ReviewItem.term == chosen.term)
    if chosen.batch is not None:
        query = query.where(ReviewItem.batch_id == chosen.batch)
    return query


def _ordered(query, order: Order):  # type: ignore[no-untyped-def]
    if order == "confidence":
        return query.order_by(ReviewItem.confidence, ReviewItem.id)
    if order == "margin":
        return query.order_by(ReviewItem.margin, ReviewItem.id)
    return query.order_by(ReviewItem.usefulness.desc(), ReviewItem.id)


def claim_items(
    session: Session,
    team_id: int,
    key_id: str,
    chosen: QueueFilter,
    *,
    order: Order = "useful",
    count: int = 1,
    exclude: Sequence[int] = (),
    claim_seconds: float = CLAIM_SECONDS,
) -> list[ReviewItem]:
    """Up to `count` pending items for `key_id`: its own live claims first, then free ones.

    Free means never claimed or claimed under an expired lease. On PostgreSQL the
    rows are locked with SKIP LOCKED, so two reviewers claiming at once get
    different items; SQLite serialises writers, which has the same effect.
    """
    count = max(1, min(count, MAX_CLAIM))
    now = database_now(session)
    expires = now + timedelta(seconds=claim_seconds)
    base = select(ReviewItem).where(ReviewItem.state == "pending")
    if exclude:
        base = base.where(ReviewItem.id.not_in(list(exclude)))
    held = list(
        session.scalars(
            _ordered(
                _filtered(base, session, team_id, chosen).where(
                    ReviewItem.claimed_by == key_id, ReviewItem.claim_expires_at > now
                ),
                order,
            ).limit(count)
        )
    )
    free_query = _filtered(base, session, team_id, chosen).where(
        or_(ReviewItem.claimed_by.is_(None), ReviewItem.claim_expires_at <= now)
    )
    free = (
        list(
            session.scalars(
                _ordered(free_query, order)
                .limit(count - len(held))
                .with_for_update(skip_locked=True, of=ReviewItem)
            )
        )
        if len(held) < count
        else []
    )
    for item in [*held, *free]:
        item.claimed_by = key_id
        item.claim_expires_at = expires
    session.flush()
    return [*held, *free]


def release_claim(session: Session, item: ReviewItem, key_id: str) -> None:
    if item.claimed_by == key_id:
        item.claimed_by = None
        item.claim_expires_at = None
        session.flush()


def claim_is_live(item: ReviewItem, now: datetime) -> bool:
    expires = as_utc_or_none(item.claim_expires_at)
    return item.claimed_by is not None and expires is not None and expires > now


def get_item(session: Session, team_id: int, item_id: int) -> ReviewItem:
    """The team's item; another team's item is as missing as one that does not exist."""
    item = session.get(ReviewItem, item_id)
    if item is None or item.team_id != team_id:
        raise NotFound(f"review item {item_id} does not exist")
    return item


def auto_resolve(session: Session, inventory_id: int) -> bool:
    """Whether items a decision makes confident leave the queue (default: yes)."""
    row = session.get(ReviewSettings, inventory_id)
    return True if row is None else bool(row.auto_resolve)


def set_auto_resolve(session: Session, inventory_id: int, value: bool) -> None:
    row = session.get(ReviewSettings, inventory_id)
    if row is None:
        session.add(ReviewSettings(inventory_id=inventory_id, auto_resolve=value))
    else:
        row.auto_resolve = value
    session.flush()


@dataclass(frozen=True)
class Counts:
    """Pending items per term and per batch (after the filter), for the queue page."""

    total: int
    per_term: list[tuple[str, str, int]]  # (inventory, term, pending)
    per_batch: list[tuple[str, str, int]]  # (batch id, inventory, pending)


def queue_counts(session: Session, team_id: int, chosen: QueueFilter) -> Counts:
    base = select(Inventory.name, ReviewItem.term, ReviewItem.batch_id, func.count()).join(
        Inventory, Inventory.id == ReviewItem.inventory_id
    )
    base = base.where(ReviewItem.team_id == team_id, ReviewItem.state == "pending")
    if chosen.inventory is not None:
        base = base.where(Inventory.name == chosen.inventory)
    if chosen.term is not None:
        base = base.where(ReviewItem.term == chosen.term)
    if chosen.batch is not None:
        base = base.where(ReviewItem.batch_id == chosen.batch)
    rows = session.execute(
        base.group_by(Inventory.name, ReviewItem.term, ReviewItem.batch_id)
    ).all()
    terms: dict[tuple[str, str], int] = defaultdict(int)
    batches: dict[tuple[str, str], int] = defaultdict(int)
    for inventory, term, batch_id, n in rows:
        terms[(inventory, term)] += int(n)
        batches[(batch_id, inventory)] += int(n)
    return Counts(
        total=sum(terms.values()),
        per_term=sorted(((i, t, n) for (i, t), n in terms.items()), key=lambda r: (-r[2], r[1])),
        per_batch=sorted(((b, i, n) for (b, i), n in batches.items()), key=lambda r: (-r[2], r[0])),
    )


def list_queue(
    session: Session, team_id: int, chosen: QueueFilter, order: Order, limit: int = 50
) -> list[ReviewItem]:
    query = _filtered(
        select(ReviewItem).where(ReviewItem.state == "pending"), session, team_id, chosen
    )
    return list(session.scalars(_ordered(query, order).limit(limit)))


def team_inventories(session: Session, team_id: int) -> list[str]:
    """Names of inventories that have queue items of this team (for the filter choices)."""
    return list(
        session.scalars(
            select(Inventory.name)
            .join(ReviewItem, ReviewItem.inventory_id == Inventory.id)
            .where(ReviewItem.team_id == team_id)
            .distinct()
            .order_by(Inventory.name)
        )
    )


def queue_share(session: Session, team_id: int, inventory_id: int) -> float:
    """Pending items over all results of the team's batches of this inventory."""
    total = session.scalar(
        select(func.count())
        .select_from(BatchResult)
        .join(Batch, Batch.id == BatchResult.batch_id)
        .where(Batch.team_id == team_id, Batch.inventory_id == inventory_id)
    )
    pending = session.scalar(
        select(func.count())
        .select_from(ReviewItem)
        .where(
            ReviewItem.team_id == team_id,
            ReviewItem.inventory_id == inventory_id,
            ReviewItem.state == "pending",
        )
    )
    return float(pending or 0) / float(total) if total else 0.0


def now_for(session: Session) -> datetime:
    return database_now(session)
