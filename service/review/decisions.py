"""Decisions: stored with who, when and which inventory version; each one becomes evidence,
advances the term's prototypes incrementally, re-scores the term's pending items and
rewrites the batch result (the machine's first answer is kept beside the human one).

`record_decision` and `undo_last` write in the caller's transaction; the caller commits
and then calls `rescore_term`, which reads the committed evidence through the process's
engine cache (an engine must never hold evidence a rollback removed).
"""

from __future__ import annotations

import copy
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import numpy as np
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.batches.repository import schedule_webhook
from service.config import Settings
from service.engine import Disambiguator, OccurrenceResult, SpanQuery
from service.engine.assignment import Assignment
from service.engine.types import Document, InventorySpec
from service.inventory.document import parse_inventory_document
from service.review.queue import (
    CLAIM_SECONDS,
    auto_resolve,
    claim_is_live,
    field_text,
    pending_items,
    queue_share,
    refresh_usefulness,
    vector_from_bytes,
)
from service.store.audit import record_audit
from service.store.clock import as_utc_or_none, database_now
from service.store.errors import Conflict, NotFound
from service.store.evidence import evidence_watermark
from service.store.inventories import current_document
from service.store.models import (
    TERMINAL_BATCH_STATES,
    Batch,
    BatchDocument,
    BatchResult,
    EvidenceRecord,
    Inventory,
    ReviewDecision,
    ReviewItem,
)
from service.tagging.engines import Pin, shared_engines, tag_pinned

MACHINE_FIELDS = ("sense_id", "tags", "confidence", "margin", "status", "candidates")
REVIEW_KEYS = ("machine_answer", "review", "rescored")
REVIEWED_EVENT = "batch.reviewed"


class DecisionInvalid(ValueError):
    """The decision names a sense the item's term does not have (a 422 at the HTTP edge)."""


def current_spec(session: Session, inventory: Inventory) -> InventorySpec:
    return parse_inventory_document(current_document(session, inventory), version=inventory.version)


def _machine_answer(result: dict[str, Any]) -> dict[str, Any]:
    kept = result.get("machine_answer")
    if isinstance(kept, dict):
        return kept
    return {name: copy.deepcopy(result.get(name)) for name in MACHINE_FIELDS}


def _restore(row: BatchResult) -> None:
    """Put the machine's first answer back (undo)."""
    result = dict(row.result)
    machine = result.get("machine_answer")
    if isinstance(machine, dict):
        result.update(machine)
    for key in REVIEW_KEYS:
        result.pop(key, None)
    row.result = result
    row.status = str(result.get("status"))
    row.sense_id = result.get("sense_id")
    row.confidence = float(result.get("confidence") or 0.0)


def _time(value: datetime) -> str:
    moment = as_utc_or_none(value)
    assert moment is not None
    return moment.isoformat().replace("+00:00", "Z")


def _sense_tags(spec: InventorySpec, sense_id: str | None) -> list[str]:
    for term in spec.terms:
        for sense in term.senses:
            if sense.sense_id == sense_id:
                return list(sense.tags)
    return []


def record_decision(
    session: Session,
    item: ReviewItem,
    key_id: str,
    sense_id: str | None,
    *,
    curator: bool = False,
) -> ReviewDecision:
    """Decide `item` (sense_id None: none of these senses fits).

    The item must be pending and not under another reviewer's live claim; a curator
    creating a sense may also decide items already marked "none of these".
    """
    now = database_now(session)
    allowed = ("pending", "missing") if curator else ("pending",)
    if item.state not in allowed:
        raise Conflict(f"review item {item.id} is already {item.state}")
    if not curator and claim_is_live(item, now) and item.claimed_by != key_id:
        raise Conflict(f"review item {item.id} is claimed by another reviewer")
    inventory = session.get(Inventory, item.inventory_id)
    if inventory is None:
        raise NotFound(f"review item {item.id} does not exist")
    spec = current_spec(session, inventory)
    try:
        senses = [sense.sense_id for sense in spec.term(item.term).senses]
    except KeyError:
        raise Conflict(f"term '{item.term}' is no longer in inventory '{inventory.name}'") from None
    if sense_id is not None and sense_id not in senses:
        raise DecisionInvalid(
            f"'{sense_id}' is not a sense of '{item.term}'; choose one of {', '.join(senses)}"
        )
    row = session.get(BatchResult, item.result_id)
    if row is None:
        raise NotFound(f"review item {item.id} does not exist")
    evidence_id = None
    if sense_id is not None:
        document = session.scalars(
            select(BatchDocument).where(
                BatchDocument.batch_id == row.batch_id,
                BatchDocument.document_id == row.document_id,
            )
        ).one()
        # Inserted here rather than through add_evidence: undo needs this row's id.
        evidence = EvidenceRecord(
            inventory_id=inventory.id,
            term=item.term,
            sense_key=sense_id,
            text=field_text(document.fields, row.field),
            start=int(row.result["start"]),
            end=int(row.result["end"]),
            source="review",
        )
        session.add(evidence)
        session.flush()
        evidence_id = evidence.id
    machine = _machine_answer(row.result)
    decision = ReviewDecision(
        team_id=item.team_id,
        item_id=item.id,
        inventory_id=inventory.id,
        inventory_version=inventory.version,
        key_id=key_id,
        term=item.term,
        sense_id=sense_id,
        machine_sense_id=machine.get("sense_id"),
        machine_status=str(machine.get("status")),
        evidence_id=evidence_id,
        created_at=now,
    )
    session.add(decision)
    item.state = "decided" if sense_id is not None else "missing"
    item.claimed_by = None
    item.claim_expires_at = None
    session.flush()
    result = dict(row.result)
    result["machine_answer"] = machine
    result.pop("rescored", None)
    result.update(
        status="reviewed",
        sense_id=sense_id,
        tags=_sense_tags(spec, sense_id),
        review={
            "decision_id": decision.id,
            "decided_by": key_id,
            "decided_at": _time(now),
            "inventory_version": inventory.version,
            "none_of_these": sense_id is None,
        },
    )
    row.result = result
    row.status = "reviewed"
    row.sense_id = sense_id
    refresh_usefulness(session, item.team_id, item.inventory_id, item.term)
    decision.queue_share = queue_share(session, item.team_id, item.inventory_id)
    decision.evidence_count = int(
        session.scalar(
            select(func.count())
            .select_from(EvidenceRecord)
            .where(EvidenceRecord.inventory_id == inventory.id)
        )
        or 0
    )
    record_audit(
        session,
        item.team_id,
        key_id,
        "review.decide",
        f"review-item/{item.id}",
        {
            "decision_id": decision.id,
            "inventory": inventory.name,
            "inventory_version": inventory.version,
            "term": item.term,
            "sense_id": sense_id,
            "machine_sense_id": decision.machine_sense_id,
            "batch_id": row.batch_id,
            "evidence_id": evidence_id,
        },
    )
    announce_reviewed(session, row.batch_id)
    session.flush()
    return decision


def announce_reviewed(session: Session, batch_id: str) -> None:
    """Announce reviewed results through the batch's webhook (`batch.reviewed`), once the
    batch has ended and its own notice is not still waiting; the body is built when it is
    sent, so one notice covers every decision made until then."""
    batch = session.get(Batch, batch_id)
    if batch is None or batch.state not in TERMINAL_BATCH_STATES:
        return
    if batch.webhook_state == "pending":
        return
    schedule_webhook(batch, database_now(session), event=REVIEWED_EVENT)


def undo_last(session: Session, team_id: int, key_id: str) -> ReviewDecision:
    """Take back this reviewer's latest decision: its evidence row goes, the item returns to
    the queue claimed by the reviewer, and items that decision had resolved come back too."""
    decision = session.scalars(
        select(ReviewDecision)
        .where(
            ReviewDecision.team_id == team_id,
            ReviewDecision.key_id == key_id,
            ReviewDecision.undone_at.is_(None),
        )
        .order_by(ReviewDecision.id.desc())
        .limit(1)
    ).first()
    if decision is None:
        raise NotFound("there is no decision of yours to undo")
    now = database_now(session)
    decision.undone_at = now
    if decision.evidence_id is not None:
        evidence = session.get(EvidenceRecord, decision.evidence_id)
        if evidence is not None:
            session.delete(evidence)
    item = session.get(ReviewItem, decision.item_id)
    if item is None:
        raise NotFound("the decided item no longer exists")
    item.state = "pending"
    item.claimed_by = key_id
    item.claim_expires_at = now + timedelta(seconds=CLAIM_SECONDS)
    for resolved in session.scalars(
        select(ReviewItem).where(ReviewItem.resolved_by_decision == decision.id)
    ):
        resolved.state = "pending"
        resolved.resolved_by_decision = None
        result_row = session.get(BatchResult, resolved.result_id)
        if result_row is not None:
            _restore(result_row)
    row = session.get(BatchResult, item.result_id)
    if row is not None:
        _restore(row)
    record_audit(
        session,
        team_id,
        key_id,
        "review.undo",
        f"review-item/{item.id}",
        {"decision_id": decision.id, "sense_id": decision.sense_id},
    )
    session.flush()
    refresh_usefulness(session, team_id, item.inventory_id, item.term)
    inventory = session.get(Inventory, item.inventory_id)
    if inventory is not None:
        # The engine cache only grows prototypes; with evidence taken away it must rebuild.
        shared_engines().forget(inventory.id)
    return decision


@dataclass(frozen=True)
class Rescored:
    """What re-scoring the term's pending items did."""

    rescored: int
    resolved: list[int]


RESCORE_DOCUMENTS = 200  # documents re-tagged per decision; further items use their vectors


def _assignment(result: OccurrenceResult) -> Assignment:
    return Assignment(result.sense_id, result.confidence, result.margin, result.status,
                      result.candidates, result.missing_sense_p)


def _answers_by_tagging(
    session: Session, get_engine: Any, items: list[ReviewItem]
) -> dict[int, Assignment]:
    """Re-tag the documents of (the first RESCORE_DOCUMENTS of) `items` with the engine a
    new batch would get, document consistency included; item id -> its new answer."""
    rows = {i.id: session.get(BatchResult, i.result_id) for i in items}
    wanted: list[tuple[str, str]] = []
    for item in items:
        key = (item.batch_id, item.document_id)
        if key not in wanted and len(wanted) < RESCORE_DOCUMENTS:
            wanted.append(key)
    documents = []
    for batch_id, document_id in wanted:
        stored = session.scalars(
            select(BatchDocument).where(
                BatchDocument.batch_id == batch_id, BatchDocument.document_id == document_id
            )
        ).one_or_none()
        if stored is not None:
            fields = tuple((str(name), str(text)) for name, text in stored.fields)
            documents.append(Document(doc_id=f"{batch_id}/{document_id}", fields=fields))
    found: dict[tuple[str, str, int, int], Assignment] = {}
    for tagged in tag_pinned(get_engine, documents, rationale=False):
        for occurrence in tagged.occurrences:
            found[(tagged.document_id, occurrence.field, occurrence.start, occurrence.end)] = (
                _assignment(occurrence)
            )
    answers: dict[int, Assignment] = {}
    for item in items:
        row = rows[item.id]
        if row is None:
            continue
        found_key = (
            f"{item.batch_id}/{item.document_id}",
            row.field,
            row.result["start"],
            row.result["end"],
        )
        if found_key in found:
            answers[item.id] = found[found_key]
    return answers


def answers_from_vectors(
    disambiguator: Disambiguator, term: str, items: Sequence[ReviewItem]
) -> dict[int, Assignment]:
    """Item id -> its answer from its stored vectors, scored as a batch scores an
    occurrence (alignment, hubness penalty, sentence channel, fitted temperature,
    guaranteed threshold, missing-sense test), document consistency aside. Items
    without a window sentence vector while the sentence channel is on are left out:
    their served score cannot be reproduced. Call it under the engine's lock."""
    channel = disambiguator.prototypes.sentences
    usable = [i for i in items if not channel or i.sentence_vector is not None]
    if not usable:
        return {}
    vectors = np.stack([vector_from_bytes(i.vector) for i in usable])
    sentences = np.stack([
        vector_from_bytes(i.sentence_vector) for i in usable if i.sentence_vector is not None
    ]) if channel else None
    queries = [SpanQuery("", 0, 0, term, document_id=f"item-{i.id}") for i in usable]
    results = disambiguator.classify_vectors(queries, vectors, sentences)
    return {queued.id: _assignment(r) for queued, r in zip(usable, results, strict=True)}


def rescore_term(
    session: Session, settings: Settings, item: ReviewItem, decision_id: int | None
) -> Rescored:
    """Re-score the term's pending items against prototypes advanced by the new evidence.

    Their documents are tagged again by the engine a new batch would get (the prototypes
    advanced in place, document consistency included), so a re-scored answer is the one a
    fresh batch would return; items past RESCORE_DOCUMENTS are scored from their stored
    vectors. Items that come out `assigned` leave the queue when the inventory's
    auto-resolve setting is on (their batch result then carries the re-scored answer).
    """
    inventory = session.get(Inventory, item.inventory_id)
    if inventory is None:
        return Rescored(0, [])
    items = pending_items(session, item.team_id, item.inventory_id, item.term)
    if not items:
        return Rescored(0, [])
    pin = Pin(inventory.id, inventory.version, evidence_watermark(session, inventory.id))
    engine = shared_engines().engine(session, settings, pin)
    spec = engine.disambiguator.inventory
    book = engine.disambiguator.prototypes
    if item.term not in book.terms():
        return Rescored(0, [])
    answers = _answers_by_tagging(
        session, lambda: shared_engines().engine(session, settings, pin), items
    )
    rest = [i for i in items if i.id not in answers]
    if rest:
        with engine.lock:
            answers.update(answers_from_vectors(engine.disambiguator, item.term, rest))
    resolve = auto_resolve(session, inventory.id)
    now = database_now(session)
    resolved = []
    for queued in items:
        answer = answers.get(queued.id)
        if answer is None:  # made before sentence vectors were kept: left as it was
            continue
        queued.confidence = float(answer.confidence)
        queued.margin = float(answer.margin)
        if resolve and answer.status == "assigned" and not claim_is_live(queued, now):
            queued.state = "resolved"
            queued.resolved_by_decision = decision_id
            result_row = session.get(BatchResult, queued.result_id)
            if result_row is not None:
                result = dict(result_row.result)
                result["machine_answer"] = _machine_answer(result)
                result.update(
                    status="assigned",
                    sense_id=answer.sense_id,
                    tags=_sense_tags(spec, answer.sense_id),
                    confidence=round(answer.confidence, 4),
                    margin=round(answer.margin, 4),
                    candidates=[c.to_json() for c in answer.candidates],
                    rescored={"decision_id": decision_id, "evidence_watermark": pin.watermark},
                )
                result_row.result = result
                result_row.status = "assigned"
                result_row.sense_id = answer.sense_id
                result_row.confidence = float(answer.confidence)
            resolved.append(queued.id)
    session.flush()
    refresh_usefulness(session, item.team_id, item.inventory_id, item.term)
    if decision_id is not None:
        decision = session.get(ReviewDecision, decision_id)
        if decision is not None:  # the share as this decision left it, resolutions included
            decision.queue_share = queue_share(session, item.team_id, item.inventory_id)
    session.flush()
    return Rescored(len(answers), resolved)


def decision_json(decision: ReviewDecision, inventory_name: str) -> dict[str, Any]:
    """One decision as the API and the JSON Lines export write it."""
    return {
        "id": decision.id,
        "item_id": decision.item_id,
        "inventory": inventory_name,
        "inventory_version": decision.inventory_version,
        "term": decision.term,
        "sense_id": decision.sense_id,
        "none_of_these": decision.sense_id is None,
        "machine_sense_id": decision.machine_sense_id,
        "machine_status": decision.machine_status,
        "reviewer_key": decision.key_id,
        "evidence_id": decision.evidence_id,
        "decided_at": _time(decision.created_at),
        "undone_at": _time(decision.undone_at) if decision.undone_at else None,
    }


def list_decisions(
    session: Session,
    team_id: int,
    *,
    inventory: str | None = None,
    after: int = 0,
    limit: int | None = 100,
) -> Iterator[tuple[ReviewDecision, str]]:
    query = (
        select(ReviewDecision, Inventory.name)
        .join(Inventory, Inventory.id == ReviewDecision.inventory_id)
        .where(ReviewDecision.team_id == team_id, ReviewDecision.id > after)
    )
    if inventory is not None:
        query = query.where(Inventory.name == inventory)
    query = query.order_by(ReviewDecision.id)
    if limit is not None:
        query = query.limit(limit)
    yield from ((decision, name) for decision, name in session.execute(query))
