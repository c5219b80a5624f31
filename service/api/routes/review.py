"""The review queue over HTTP, for teams whose reviewers use their own tools: claim items,
decide, release, undo, list and export decisions. Keys of scope `review` or `admin`."""

from __future__ import annotations

import json
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Path, Query, Request, Response
from pydantic import BaseModel, Field
from sqlalchemy.orm import Session

from service.api.deps import Caller, admin_key, get_session, get_settings_dep, review_key
from service.api.problems import ProblemError
from service.config import Settings
from service.review import decisions as review_decisions
from service.review.queue import (
    CLAIM_SECONDS,
    MAX_CLAIM,
    QueueFilter,
    auto_resolve,
    claim_items,
    get_item,
    release_claim,
    set_auto_resolve,
    sync_queue,
)
from service.review.views import item_json
from service.store.audit import record_audit
from service.store.inventories import get_inventory
from service.store.models import Inventory

router = APIRouter(prefix="/v1/review", tags=["review"])

_PROBLEMS: dict[int | str, dict[str, Any]] = {
    401: {"description": "no or unknown API key"},
    403: {"description": "the key's scope is not review or admin"},
}


MAX_ID = 2_147_483_647  # ids are 32-bit integers in every database we run on
ItemId = Annotated[int, Path(ge=1, le=MAX_ID)]
Text = Annotated[str, Field(pattern=r"^[^\x00]*$")]  # PostgreSQL refuses NUL in text


class ClaimIn(BaseModel):
    """Which items to claim: up to `count`, optionally of one inventory, term or batch."""

    count: int = Field(default=1, ge=1, le=MAX_CLAIM)
    inventory: Text | None = Field(default=None, max_length=64)
    term: Text | None = Field(default=None, max_length=200)
    batch: Text | None = Field(default=None, max_length=32)
    order: Literal["useful", "confidence", "margin"] = "useful"
    exclude: list[Annotated[int, Field(ge=1, le=MAX_ID)]] = Field(
        default_factory=list, max_length=1000
    )


class DecisionIn(BaseModel):
    """The chosen sense id, or null when none of the term's senses fits."""

    sense_id: Text | None = Field(max_length=200)


def run_decision(
    session: Session,
    settings: Settings,
    team_id: int,
    key_id: str,
    item_id: ItemId,
    sense_id: str | None,
) -> dict[str, Any]:
    """Decide, commit, then re-score the term (shared by the API and the pages)."""
    item = get_item(session, team_id, item_id)
    try:
        decision = review_decisions.record_decision(session, item, key_id, sense_id)
    except review_decisions.DecisionInvalid as exc:
        raise ProblemError(422, str(exc)) from None
    inventory = session.get(Inventory, item.inventory_id)
    body = review_decisions.decision_json(decision, inventory.name if inventory else "")
    session.commit()
    outcome = review_decisions.rescore_term(session, settings, item, decision.id)
    session.commit()
    return {"decision": body, "rescored": outcome.rescored, "resolved": outcome.resolved}


def run_undo(session: Session, settings: Settings, team_id: int, key_id: str) -> dict[str, Any]:
    decision = review_decisions.undo_last(session, team_id, key_id)
    inventory = session.get(Inventory, decision.inventory_id)
    body = review_decisions.decision_json(decision, inventory.name if inventory else "")
    session.commit()
    item = get_item(session, team_id, decision.item_id)
    outcome = review_decisions.rescore_term(session, settings, item, None)
    session.commit()
    return {"decision": body, "rescored": outcome.rescored}


@router.post("/claims", responses=_PROBLEMS)
def claim(
    body: ClaimIn,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(review_key),
) -> dict[str, Any]:
    """Claim the next items (most useful first by default) under a short lease.

    Items this key already holds come back first; nobody else gets them until
    the claim expires (`claim_seconds`) or they are decided or released.
    """
    sync_queue(session, settings, caller.team_id)
    session.commit()
    items = claim_items(
        session,
        caller.team_id,
        caller.key_id,
        QueueFilter(body.inventory, body.term, body.batch),
        order=body.order,
        count=body.count,
        exclude=body.exclude,
    )
    payload = [item_json(session, item) for item in items]
    session.commit()
    return {"items": payload, "claim_seconds": CLAIM_SECONDS}


@router.get("/items/{item_id}", responses={**_PROBLEMS, 404: {"description": "no such item"}})
def read_item(
    item_id: ItemId,
    session: Session = Depends(get_session),
    caller: Caller = Depends(review_key),
) -> dict[str, Any]:
    """One queue item with its batch result (candidates, rationale)."""
    return item_json(session, get_item(session, caller.team_id, item_id))


@router.delete(
    "/items/{item_id}/claim",
    status_code=204,
    responses={**_PROBLEMS, 404: {"description": "no such item"}},
)
def release(
    item_id: ItemId,
    session: Session = Depends(get_session),
    caller: Caller = Depends(review_key),
) -> Response:
    """Give a claimed item back (skip it)."""
    release_claim(session, get_item(session, caller.team_id, item_id), caller.key_id)
    session.commit()
    return Response(status_code=204)


@router.post(
    "/items/{item_id}/decision",
    status_code=201,
    responses={
        **_PROBLEMS,
        404: {"description": "no such item"},
        409: {"description": "already decided, or claimed by another reviewer"},
        422: {"description": "the sense is not one of the term's"},
    },
)
def decide(
    item_id: ItemId,
    body: DecisionIn,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(review_key),
) -> dict[str, Any]:
    """Record a decision: it becomes evidence, re-scores the term's pending items (those
    made confident leave the queue) and updates the batch result (status `reviewed`)."""
    return run_decision(session, settings, caller.team_id, caller.key_id, item_id, body.sense_id)


@router.post("/undo", responses={**_PROBLEMS, 404: {"description": "nothing to undo"}})
def undo(
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(review_key),
) -> dict[str, Any]:
    """Take back this key's latest decision; the item returns to the queue, claimed by it."""
    return run_undo(session, settings, caller.team_id, caller.key_id)


@router.get(
    "/decisions",
    responses={
        **_PROBLEMS,
        200: {"content": {"application/x-ndjson": {}}, "description": "decisions"},
    },
)
def decisions(
    request: Request,
    inventory: str | None = Query(default=None, max_length=64, pattern=r"^[^\x00]*$"),
    after: int = Query(default=0, ge=0, le=MAX_ID),
    limit: int = Query(default=100, ge=1, le=1000),
    session: Session = Depends(get_session),
    caller: Caller = Depends(review_key),
) -> Any:
    """The audit trail of decisions (undone ones included, marked), oldest first.

    With `Accept: application/x-ndjson` every decision from `after` on streams as JSON Lines.
    """
    if "application/x-ndjson" in request.headers.get("accept", ""):
        rows = list(
            review_decisions.list_decisions(
                session, caller.team_id, inventory=inventory, after=after, limit=None
            )
        )
        text = "".join(
            json.dumps(review_decisions.decision_json(d, name)) + "\n" for d, name in rows
        )
        return Response(text, media_type="application/x-ndjson")
    page = list(
        review_decisions.list_decisions(
            session, caller.team_id, inventory=inventory, after=after, limit=limit
        )
    )
    return {
        "decisions": [review_decisions.decision_json(d, name) for d, name in page],
        "next_after": page[-1][0].id if len(page) == limit else None,
    }


class QueueSettingsIn(BaseModel):
    """Whether items a decision makes confident leave the queue on their own."""

    auto_resolve: bool


@router.get(
    "/settings/{inventory}", responses={**_PROBLEMS, 404: {"description": "no such inventory"}}
)
def read_queue_settings(
    inventory: Annotated[str, Path(max_length=64, pattern=r"^[^\x00]*$")],
    session: Session = Depends(get_session),
    caller: Caller = Depends(review_key),
) -> dict[str, Any]:
    """The inventory's queue settings."""
    found = get_inventory(session, caller.team_id, inventory)
    return {"inventory": found.name, "auto_resolve": auto_resolve(session, found.id)}


@router.put(
    "/settings/{inventory}", responses={**_PROBLEMS, 404: {"description": "no such inventory"}}
)
def write_queue_settings(
    inventory: Annotated[str, Path(max_length=64, pattern=r"^[^\x00]*$")],
    body: QueueSettingsIn,
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> dict[str, Any]:
    """Change the inventory's queue settings (admin)."""
    found = get_inventory(session, caller.team_id, inventory)
    set_auto_resolve(session, found.id, body.auto_resolve)
    record_audit(
        session,
        caller.team_id,
        caller.key_id,
        "review.settings",
        found.name,
        {"auto_resolve": body.auto_resolve},
    )
    session.commit()
    return {"inventory": found.name, "auto_resolve": body.auto_resolve}
