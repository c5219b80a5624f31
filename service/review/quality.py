"""Quality figures per inventory: decisions per day, how often the machine's first answer
agreed with the reviewer, and how the queue share moved as evidence grew."""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from datetime import date

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.store.clock import as_utc
from service.store.models import ReviewDecision


@dataclass(frozen=True)
class Quality:
    decisions: int
    per_day: list[tuple[date, int]]
    agreement: float | None  # share of decisions where the machine's first answer was right
    agreed: int
    share_points: list[tuple[int, float]]  # (evidence count, queue share) after each decision


def machine_agreed(decision: ReviewDecision) -> bool:
    """The machine was right: same sense, or it abstained on an item no sense fits."""
    if decision.sense_id is None:
        return decision.machine_status == "abstained"
    return decision.machine_sense_id == decision.sense_id


def quality(session: Session, team_id: int, inventory_id: int) -> Quality:
    decisions = list(
        session.scalars(
            select(ReviewDecision)
            .where(
                ReviewDecision.team_id == team_id,
                ReviewDecision.inventory_id == inventory_id,
                ReviewDecision.undone_at.is_(None),
            )
            .order_by(ReviewDecision.id)
        )
    )
    days = Counter(as_utc(d.created_at).date() for d in decisions)
    agreed = sum(machine_agreed(d) for d in decisions)
    return Quality(
        decisions=len(decisions),
        per_day=sorted(days.items()),
        agreement=agreed / len(decisions) if decisions else None,
        agreed=agreed,
        share_points=[(d.evidence_count, d.queue_share) for d in decisions],
    )
