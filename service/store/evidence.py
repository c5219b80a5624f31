"""Labeled evidence: append-only rows that sharpen prototypes without retraining."""

from __future__ import annotations

from collections.abc import Iterable

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.engine.types import Evidence
from service.store.audit import record_audit
from service.store.errors import Conflict
from service.store.inventories import get_inventory, load_inventory_spec
from service.store.models import EvidenceRecord

INSERT_BATCH = 2_000


def add_evidence(
    session: Session,
    team_id: int,
    inventory_name: str,
    evidences: Iterable[Evidence],
    *,
    key_id: str | None = None,
) -> int:
    """Store evidence for known terms and senses; returns how many rows were added.

    Evidence naming a sense the inventory lacks is refused as a whole (Conflict)
    so an import never half-lands.
    """
    inventory = get_inventory(session, team_id, inventory_name)
    spec = load_inventory_spec(session, team_id, inventory_name)
    known = {(term.term, sense.sense_id) for term in spec.terms for sense in term.senses}
    added = 0
    pending: list[EvidenceRecord] = []
    for item in evidences:
        if (item.term, item.sense_id) not in known:
            raise Conflict(
                f"evidence for term '{item.term}' names sense '{item.sense_id}', "
                f"which inventory '{inventory_name}' does not have"
            )
        if not 0 <= item.start < item.end <= len(item.text):
            raise Conflict(f"evidence offsets {item.start}..{item.end} fall outside its text")
        pending.append(
            EvidenceRecord(
                inventory_id=inventory.id,
                term=item.term,
                sense_key=item.sense_id,
                text=item.text,
                start=item.start,
                end=item.end,
                source=item.source,
            )
        )
        if len(pending) >= INSERT_BATCH:
            session.add_all(pending)
            session.flush()
            added += len(pending)
            pending = []
    session.add_all(pending)
    session.flush()
    added += len(pending)
    record_audit(session, team_id, key_id, "evidence.add", inventory_name, {"added": added})
    return added


def evidence_watermark(session: Session, inventory_id: int) -> int:
    """The highest evidence id of an inventory (0 if none): what a batch pins."""
    value = session.scalar(
        select(func.max(EvidenceRecord.id)).where(EvidenceRecord.inventory_id == inventory_id)
    )
    return int(value or 0)


def load_evidence(
    session: Session, inventory_id: int, *, after: int = 0, until: int | None = None
) -> list[Evidence]:
    """Evidence with ids in (after, until], oldest first, as engine values."""
    query = select(EvidenceRecord).where(
        EvidenceRecord.inventory_id == inventory_id, EvidenceRecord.id > after
    )
    if until is not None:
        query = query.where(EvidenceRecord.id <= until)
    return [
        Evidence(
            evidence_id=row.id,
            term=row.term,
            sense_id=row.sense_key,
            text=row.text,
            start=row.start,
            end=row.end,
            source=row.source,  # type: ignore[arg-type]
        )
        for row in session.scalars(query.order_by(EvidenceRecord.id))
    ]


def count_evidence(session: Session, inventory_id: int) -> dict[str, int]:
    """Evidence per sense id, for the inventory summary."""
    rows = session.execute(
        select(EvidenceRecord.sense_key, func.count())
        .where(EvidenceRecord.inventory_id == inventory_id)
        .group_by(EvidenceRecord.sense_key)
    )
    return {sense: int(count) for sense, count in rows}
