"""Labeled evidence for an inventory: occurrences whose sense a person or corpus settled."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Depends
from pydantic import BaseModel, Field
from sqlalchemy.orm import Session

from service.api.deps import Caller, admin_key, any_key, get_session
from service.api.problems import ProblemError
from service.engine.types import Evidence, InventorySpec
from service.store import evidence as evidence_repo
from service.store.inventories import get_inventory, load_inventory_spec

router = APIRouter(prefix="/v1", tags=["evidence"])


class LabeledOccurrenceIn(BaseModel):
    """One labeled occurrence: `text[start:end]` is the term, `sense` its sense id."""

    text: str = Field(min_length=1, max_length=20_000)
    start: int = Field(ge=0)
    end: int = Field(gt=0)
    term: str = Field(min_length=1, max_length=200)
    sense: str = Field(min_length=1, max_length=200)


class EvidenceIn(BaseModel):
    occurrences: list[LabeledOccurrenceIn] = Field(min_length=1, max_length=10_000)


@router.post("/inventories/{name}/evidence", status_code=201)
def add_evidence(
    name: str,
    body: EvidenceIn,
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> dict[str, int]:
    """Add labeled occurrences; all or nothing (one bad item refuses the whole body)."""
    _check_against_inventory(load_inventory_spec(session, caller.team_id, name), body.occurrences)
    added = evidence_repo.add_evidence(
        session,
        caller.team_id,
        name,
        (
            Evidence(0, item.term, item.sense, item.text, item.start, item.end, "import")
            for item in body.occurrences
        ),
        key_id=caller.key_id,
    )
    session.commit()
    return {"added": added}


def _check_against_inventory(spec: InventorySpec, items: list[LabeledOccurrenceIn]) -> None:
    """422 naming every item whose term, sense or offsets do not fit the inventory."""
    senses = {term.term: {s.sense_id for s in term.senses} for term in spec.terms}
    errors = []
    for index, item in enumerate(items):
        if item.term not in senses:
            errors.append(
                {
                    "pointer": f"/occurrences/{index}/term",
                    "detail": f"'{item.term}' is not a term of inventory '{spec.name}'",
                }
            )
        elif item.sense not in senses[item.term]:
            errors.append(
                {
                    "pointer": f"/occurrences/{index}/sense",
                    "detail": f"'{item.sense}' is not a sense of '{item.term}'",
                }
            )
        if not item.start < item.end <= len(item.text):
            errors.append(
                {
                    "pointer": f"/occurrences/{index}/end",
                    "detail": f"offsets {item.start}..{item.end} fall outside the text",
                }
            )
    if errors:
        raise ProblemError(
            422, f"{len(errors)} labeled occurrence problem(s); nothing was stored", errors=errors
        )


@router.get("/inventories/{name}/evidence")
def count_evidence(
    name: str, session: Session = Depends(get_session), caller: Caller = Depends(any_key)
) -> dict[str, Any]:
    """How much evidence each sense has, and the watermark a new batch would pin."""
    inventory = get_inventory(session, caller.team_id, name)
    return {
        "per_sense": evidence_repo.count_evidence(session, inventory.id),
        "watermark": evidence_repo.evidence_watermark(session, inventory.id),
    }
