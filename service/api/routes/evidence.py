"""Labeled evidence for an inventory: occurrences whose sense a person or corpus settled."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Depends
from pydantic import Field
from sqlalchemy.orm import Session

from service.api.deps import Caller, admin_key, any_key, get_session, get_settings_dep
from service.api.problems import ProblemError
from service.api.schemas import Strict
from service.config import Settings
from service.engine import OccurrenceFinder
from service.engine.types import Evidence, InventorySpec
from service.store import evidence as evidence_repo
from service.store.inventories import get_inventory, load_inventory_spec
from service.tagging.engines import shared_engines

router = APIRouter(prefix="/v1", tags=["evidence"])


class LabeledOccurrenceIn(Strict):
    """One labeled occurrence: `text[start:end]` is the term, `sense` its sense id."""

    text: str = Field(min_length=1, max_length=20_000)
    start: int = Field(ge=0)
    end: int = Field(gt=0)
    term: str = Field(min_length=1, max_length=200)
    sense: str = Field(min_length=1, max_length=200)
    # Carried over from a labeled-occurrence file line (README, Formats); not stored.
    id: str | None = Field(default=None, max_length=200)
    document_id: str | None = Field(default=None, max_length=200)


class EvidenceIn(Strict):
    occurrences: list[LabeledOccurrenceIn] = Field(min_length=1, max_length=10_000)


@router.post("/inventories/{name}/evidence", status_code=201)
def add_evidence(
    name: str,
    body: EvidenceIn,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(admin_key),
) -> dict[str, int]:
    """Add labeled occurrences; all or nothing (one bad item refuses the whole body)."""
    spec = load_inventory_spec(session, caller.team_id, name)
    finder = shared_engines().finder(settings.database_url, spec)
    items = [
        Evidence(0, item.term, item.sense, item.text, item.start, item.end, "import")
        for item in body.occurrences
    ]
    _check_against_inventory(spec, body.occurrences)
    _check_spans(finder, items)
    added = evidence_repo.add_evidence(
        session, caller.team_id, name, items, finder=finder, key_id=caller.key_id
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


def _check_spans(finder: OccurrenceFinder, items: list[Evidence]) -> None:
    """422 naming every item whose span the tagging finder does not find as its term."""
    errors = []
    for index, item in enumerate(items):
        problem = evidence_repo.span_problem(finder, item)
        if problem is not None:
            errors.append({"pointer": f"/occurrences/{index}", "index": index, "detail": problem})
    if errors:
        raise ProblemError(
            422,
            f"{len(errors)} labeled occurrence(s) do not mark their term; nothing was stored",
            kind="span-not-an-occurrence",
            errors=errors,
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
