"""How far an inventory's answers can be trusted, and a guarded calibration.

GET /v1/inventories/{name}/quality reports what the engine fitted from the
inventory's own labels (examples, evidence, review decisions; cross-fitted):
calibration error, the review threshold and the accuracy it guarantees, the
expected review share, the missing-sense false-flag rate and the labels behind
each. It is computed by the same cached engine that tags, so it is re-fitted
whenever evidence arrives.

POST /v1/inventories/{name}/calibrate is `whichsense calibrate`: it stores a
fitted temperature only from enough labels and only when held-out calibration
does not get worse; `?dry_run=true` shows the figures without storing.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Depends, Query
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from service.api.deps import Caller, admin_key, any_key, get_session, get_settings_dep
from service.api.problems import ProblemError
from service.config import Settings
from service.engine import DEFAULT_TEMPERATURE, propose_calibration
from service.store.evidence import evidence_watermark
from service.store.inventories import edit_inventory, get_inventory
from service.tagging.engines import Pin, PinnedEngine, shared_engines

router = APIRouter(prefix="/v1", tags=["inventories"])


def _engine(
    session: Session, settings: Settings, team_id: int, name: str
) -> tuple[Pin, PinnedEngine]:
    inventory = get_inventory(session, team_id, name)
    pin = Pin(inventory.id, inventory.version, evidence_watermark(session, inventory.id))
    engine = shared_engines().engine(session, settings, pin)
    session.rollback()  # hold no transaction while the engine works
    return pin, engine


def _quality(session: Session, settings: Settings, team_id: int, name: str) -> dict[str, Any]:
    pin, engine = _engine(session, settings, team_id, name)
    return {
        "inventory": {"name": name, "version": pin.version},
        "evidence_watermark": pin.watermark,
        **engine.disambiguator.trust.to_json(),
    }


@router.get(
    "/inventories/{name}/quality",
    summary="Calibration error, guaranteed accuracy, review share and missing-sense rate",
)
async def get_quality(
    name: str,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(any_key),
) -> dict[str, Any]:
    return await run_in_threadpool(_quality, session, settings, caller.team_id, name)


def _calibrate(
    session: Session, settings: Settings, caller: Caller, name: str, dry_run: bool
) -> dict[str, Any]:
    pin, engine = _engine(session, settings, caller.team_id, name)
    spec = engine.disambiguator.inventory
    with engine.lock:
        proposal = propose_calibration(
            engine.disambiguator.prototypes, spec.settings.temperature or DEFAULT_TEMPERATURE
        )
    answer: dict[str, Any] = {
        "inventory": {"name": name, "version": pin.version},
        "dry_run": dry_run,
        **proposal.to_json(),
        "stored_version": None,
    }
    if dry_run:
        return answer
    if not proposal.accepted:
        raise ProblemError(
            409, f"not stored: {proposal.refused}", kind="calibration-refused", calibration=answer
        )
    inventory = edit_inventory(
        session,
        caller.team_id,
        name,
        lambda document: document["settings"].update(temperature=proposal.temperature),
        key_id=caller.key_id,
    )
    answer["stored_version"] = inventory.version
    session.commit()
    return answer


@router.post(
    "/inventories/{name}/calibrate",
    summary="Fit the confidence temperature on the inventory's labels (guarded; dry_run shows it)",
)
async def calibrate(
    name: str,
    dry_run: bool = Query(default=False, description="show the fit without storing it"),
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(admin_key),
) -> dict[str, Any]:
    return await run_in_threadpool(_calibrate, session, settings, caller, name, dry_run)
