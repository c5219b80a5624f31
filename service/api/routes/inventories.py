"""Inventories, their versions, terms, senses and examples.

Every write goes through `edit_inventory`, so each one yields a new version;
edits of one term, sense or example say which term they touched, so only that
term is validated and rewritten. They run off the event loop and are not
committed when the client has gone. Reads of old versions come from snapshots.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Depends, Request, Response
from fastapi.responses import JSONResponse
from sqlalchemy import func, select
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from service.api.bodies import decode_json_object, decode_utf8, media_type, refuse_nul
from service.api.deps import Caller, admin_key, any_key, get_session, get_settings_dep
from service.api.problems import ProblemError
from service.api.schemas import (
    ExampleIn,
    ExampleOut,
    InventoryPatch,
    InventorySummary,
    SenseIn,
    SensePatch,
    TermIn,
    TermPatch,
    VersionInfo,
)
from service.api.validators import ExampleIndex, OptionalVersion, VersionNumber
from service.config import Settings
from service.inventory.csv_format import read_inventory_csv, write_inventory_csv
from service.inventory.document import fold, inventory_schema
from service.store import inventories as repo
from service.store.models import Inventory, InventoryVersion, Sense, Term

router = APIRouter(prefix="/v1", tags=["inventories"])

_DOCUMENT_BODY = {
    "requestBody": {
        "required": True,
        "content": {
            "application/json": {"schema": {"$ref": "#/components/schemas/InventoryDocument"}},
            "text/csv": {"schema": {"type": "string"}},
        },
    }
}


def _summary(session: Session, inventory: Inventory) -> InventorySummary:
    """Counts from the rows (no snapshot decoding: cheap on large inventories)."""
    terms = session.scalar(
        select(func.count()).select_from(Term).where(Term.inventory_id == inventory.id)
    )
    senses = session.scalar(
        select(func.count()).select_from(Sense).where(Sense.inventory_id == inventory.id)
    )
    return InventorySummary(
        name=inventory.name,
        version=inventory.version,
        description=inventory.description,
        terms=int(terms or 0),
        senses=int(senses or 0),
        settings={
            "review_threshold": inventory.review_threshold,
            "abstain_threshold": inventory.abstain_threshold,
            "temperature": inventory.temperature,
        },
        updated_at=inventory.updated_at,
    )


async def _read_document(request: Request, name: str | None) -> dict[str, Any]:
    """The inventory document in the body: JSON, or CSV (then `name` comes from the URL)."""
    media = media_type(request.headers.get("content-type"))
    raw = await request.body()
    if media == "text/csv":
        if not name:
            raise ProblemError(422, "a CSV inventory needs ?name=<inventory name>")
        text = decode_utf8(raw)
        refuse_nul(text, "the CSV body")
        return read_inventory_csv(text, name)
    if media != "application/json" and not media.endswith("+json"):
        raise ProblemError(415, f"send application/json or text/csv, not {media}")
    return decode_json_object(raw, "an inventory document (a JSON object)")


async def _commit_unless_gone(request: Request, session: Session) -> None:
    """Commit, unless the client went away while the edit ran: then nothing is kept."""
    if await request.is_disconnected():
        await run_in_threadpool(session.rollback)
        # Nobody reads this answer; it keeps the rollback out of the error log.
        raise ProblemError(400, "the client disconnected; nothing was stored")
    await run_in_threadpool(session.commit)


async def _edit(
    request: Request,
    session: Session,
    settings: Settings,
    caller: Caller,
    name: str,
    change: repo.Change,
    *,
    commit: bool = True,
) -> Inventory:
    """Run one edit off the event loop under the store's lock and time bounds."""
    inventory = await run_in_threadpool(
        repo.edit_inventory,
        session,
        caller.team_id,
        name,
        change,
        key_id=caller.key_id,
        settings=settings,
    )
    if commit:
        await _commit_unless_gone(request, session)
    return inventory


def _export(document: dict[str, Any], request: Request) -> Response:
    if "text/csv" in request.headers.get("accept", ""):
        return Response(write_inventory_csv(document), media_type="text/csv; charset=utf-8")
    return JSONResponse(document)


@router.get("/schemas/inventory", summary="JSON Schema of the inventory document")
def get_inventory_schema() -> JSONResponse:
    return JSONResponse(inventory_schema(), media_type="application/schema+json")


@router.get("/inventories", response_model=list[InventorySummary])
def list_inventories(
    session: Session = Depends(get_session), caller: Caller = Depends(any_key)
) -> list[InventorySummary]:
    return [
        _summary(session, inventory) for inventory in repo.list_inventories(session, caller.team_id)
    ]


@router.post(
    "/inventories",
    status_code=201,
    response_model=InventorySummary,
    openapi_extra=_DOCUMENT_BODY,
    summary="Create an inventory from a JSON document or a CSV (one row per sense)",
)
async def create_inventory(
    request: Request,
    response: Response,
    name: str | None = None,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> InventorySummary:
    document = await _read_document(request, name)
    inventory = await run_in_threadpool(
        repo.create_inventory,
        session,
        caller.team_id,
        document,
        defaults=settings.inventory_defaults(),
        key_id=caller.key_id,
        settings=settings,
    )
    summary = await run_in_threadpool(_summary, session, inventory)
    await _commit_unless_gone(request, session)
    response.headers["Location"] = f"/v1/inventories/{inventory.name}"
    return summary


@router.get("/inventories/{name}", response_model=InventorySummary)
def get_inventory(
    name: str, session: Session = Depends(get_session), caller: Caller = Depends(any_key)
) -> InventorySummary:
    return _summary(session, repo.get_inventory(session, caller.team_id, name))


@router.patch("/inventories/{name}", response_model=InventorySummary)
async def patch_inventory(
    name: str,
    patch: InventoryPatch,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> InventorySummary:
    def change(document: dict[str, Any]) -> set[str]:
        if patch.description is not None:
            document["description"] = patch.description
        if patch.settings is not None:
            document["settings"].update(patch.settings.model_dump(exclude_unset=True))
        return set()  # no term touched

    inventory = await _edit(request, session, settings, caller, name, change, commit=False)
    summary = await run_in_threadpool(_summary, session, inventory)
    await _commit_unless_gone(request, session)
    return summary


@router.delete("/inventories/{name}", status_code=204)
def delete_inventory(
    name: str, session: Session = Depends(get_session), caller: Caller = Depends(admin_key)
) -> Response:
    repo.delete_inventory(session, caller.team_id, name, key_id=caller.key_id)
    session.commit()
    return Response(status_code=204)


@router.get(
    "/inventories/{name}/document",
    summary="Export the whole inventory (JSON, or CSV with Accept: text/csv)",
)
def export_inventory(
    name: str,
    request: Request,
    version: OptionalVersion = None,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> Response:
    inventory = repo.get_inventory(session, caller.team_id, name)
    chosen = inventory.version if version is None else version
    return _export(repo.version_document(session, inventory, chosen), request)


@router.put(
    "/inventories/{name}/document",
    response_model=InventorySummary,
    openapi_extra=_DOCUMENT_BODY,
    summary="Replace the whole inventory; a new version",
)
async def replace_inventory(
    name: str,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> InventorySummary:
    document = await _read_document(request, name)
    if document.get("name", name) != name:
        raise ProblemError(409, f"the document names '{document.get('name')}', not '{name}'")
    document["name"] = name
    inventory = await run_in_threadpool(
        repo.replace_inventory,
        session,
        caller.team_id,
        name,
        document,
        key_id=caller.key_id,
        settings=settings,
    )
    summary = await run_in_threadpool(_summary, session, inventory)
    await _commit_unless_gone(request, session)
    return summary


@router.get("/inventories/{name}/versions", response_model=list[VersionInfo])
def list_versions(
    name: str, session: Session = Depends(get_session), caller: Caller = Depends(any_key)
) -> list[VersionInfo]:
    inventory = repo.get_inventory(session, caller.team_id, name)
    rows = session.execute(
        select(InventoryVersion.version, InventoryVersion.created_at)
        .where(InventoryVersion.inventory_id == inventory.id)
        .order_by(InventoryVersion.version)
    )
    return [VersionInfo(version=v, created_at=c) for v, c in rows]


@router.get("/inventories/{name}/versions/{version}", summary="The document at one version")
def get_version(
    name: str,
    version: VersionNumber,
    request: Request,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> Response:
    inventory = repo.get_inventory(session, caller.team_id, name)
    return _export(repo.version_document(session, inventory, version), request)


# Terms ---------------------------------------------------------------------------------------


@router.get("/inventories/{name}/terms")
def list_terms(
    name: str, session: Session = Depends(get_session), caller: Caller = Depends(any_key)
) -> list[dict[str, Any]]:
    return repo.current_document(session, repo.get_inventory(session, caller.team_id, name))[
        "terms"
    ]


@router.post("/inventories/{name}/terms", status_code=201)
async def add_term(
    name: str,
    term: TermIn,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> dict[str, Any]:
    def change(document: dict[str, Any]) -> set[str]:
        document["terms"].append(term.model_dump())
        return {fold(term.term)}

    await _edit(request, session, settings, caller, name, change)
    return term.model_dump()


@router.get("/inventories/{name}/terms/{term}")
def get_term(
    name: str, term: str, session: Session = Depends(get_session), caller: Caller = Depends(any_key)
) -> dict[str, Any]:
    return repo.find_term(
        repo.current_document(session, repo.get_inventory(session, caller.team_id, name)), term
    )


@router.patch("/inventories/{name}/terms/{term}")
async def patch_term(
    name: str,
    term: str,
    patch: TermPatch,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> dict[str, Any]:
    changed: dict[str, Any] = {}

    def change(document: dict[str, Any]) -> set[str]:
        entry = repo.find_term(document, term)
        entry.update(patch.model_dump(exclude_unset=True))
        changed.update(entry)
        return {fold(entry["term"])}

    await _edit(request, session, settings, caller, name, change)
    return changed


@router.delete("/inventories/{name}/terms/{term}", status_code=204)
async def delete_term(
    name: str,
    term: str,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> Response:
    def change(document: dict[str, Any]) -> set[str]:
        entry = repo.find_term(document, term)
        document["terms"].remove(entry)
        return {fold(entry["term"])}

    await _edit(request, session, settings, caller, name, change)
    return Response(status_code=204)


# Senses --------------------------------------------------------------------------------------


@router.post("/inventories/{name}/terms/{term}/senses", status_code=201)
async def add_sense(
    name: str,
    term: str,
    sense: SenseIn,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> dict[str, Any]:
    def change(document: dict[str, Any]) -> set[str]:
        entry = repo.find_term(document, term)
        entry["senses"].append(sense.model_dump())
        return {fold(entry["term"])}

    await _edit(request, session, settings, caller, name, change)
    return sense.model_dump()


@router.get("/inventories/{name}/senses/{sense_id}")
def get_sense(
    name: str,
    sense_id: str,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> dict[str, Any]:
    document = repo.current_document(session, repo.get_inventory(session, caller.team_id, name))
    term, sense = repo.find_sense(document, sense_id)
    return {**sense, "term": term["term"]}


@router.patch("/inventories/{name}/senses/{sense_id}")
async def patch_sense(
    name: str,
    sense_id: str,
    patch: SensePatch,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> dict[str, Any]:
    changed: dict[str, Any] = {}

    def change(document: dict[str, Any]) -> set[str]:
        entry, sense = repo.find_sense(document, sense_id)
        sense.update(patch.model_dump(exclude_unset=True))
        changed.update(sense)
        return {fold(entry["term"])}

    await _edit(request, session, settings, caller, name, change)
    return changed


@router.delete("/inventories/{name}/senses/{sense_id}", status_code=204)
async def delete_sense(
    name: str,
    sense_id: str,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> Response:
    def change(document: dict[str, Any]) -> set[str]:
        term, sense = repo.find_sense(document, sense_id)
        term["senses"].remove(sense)
        return {fold(term["term"])}

    await _edit(request, session, settings, caller, name, change)
    return Response(status_code=204)


# Examples ------------------------------------------------------------------------------------


@router.get("/inventories/{name}/senses/{sense_id}/examples", response_model=list[ExampleOut])
def list_examples(
    name: str,
    sense_id: str,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> list[ExampleOut]:
    document = repo.current_document(session, repo.get_inventory(session, caller.team_id, name))
    _, sense = repo.find_sense(document, sense_id)
    return [ExampleOut(index=i, text=t) for i, t in enumerate(sense.get("examples", []))]


@router.post(
    "/inventories/{name}/senses/{sense_id}/examples", status_code=201, response_model=ExampleOut
)
async def add_example(
    name: str,
    sense_id: str,
    example: ExampleIn,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> ExampleOut:
    position: list[int] = []

    def change(document: dict[str, Any]) -> set[str]:
        term, sense = repo.find_sense(document, sense_id)
        sense.setdefault("examples", []).append(example.text)
        position.append(len(sense["examples"]) - 1)
        return {fold(term["term"])}

    await _edit(request, session, settings, caller, name, change)
    return ExampleOut(index=position[0], text=example.text)


def _example_at(sense: dict[str, Any], index: int) -> None:
    if not 0 <= index < len(sense.get("examples", [])):
        raise ProblemError(404, f"sense '{sense['id']}' has no example {index}")


@router.put("/inventories/{name}/senses/{sense_id}/examples/{index}", response_model=ExampleOut)
async def replace_example(
    name: str,
    sense_id: str,
    index: ExampleIndex,
    example: ExampleIn,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> ExampleOut:
    def change(document: dict[str, Any]) -> set[str]:
        term, sense = repo.find_sense(document, sense_id)
        _example_at(sense, index)
        sense["examples"][index] = example.text
        return {fold(term["term"])}

    await _edit(request, session, settings, caller, name, change)
    return ExampleOut(index=index, text=example.text)


@router.delete("/inventories/{name}/senses/{sense_id}/examples/{index}", status_code=204)
async def delete_example(
    name: str,
    sense_id: str,
    index: ExampleIndex,
    request: Request,
    settings: Settings = Depends(get_settings_dep),
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> Response:
    def change(document: dict[str, Any]) -> set[str]:
        term, sense = repo.find_sense(document, sense_id)
        _example_at(sense, index)
        del sense["examples"][index]
        return {fold(term["term"])}

    await _edit(request, session, settings, caller, name, change)
    return Response(status_code=204)
