"""Synchronous tagging of a handful of short documents, for interactive use and tests.

Same documents, limits and result objects as batches, but nothing is stored:
the answer comes back in the response. The engine for the current inventory
version and evidence watermark comes from the process-wide cache, so only the
first request after a change pays for building it.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Depends, Request
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from service.api.bodies import decode_json_object
from service.api.deps import Caller, get_session, get_settings_dep, ingest_key
from service.api.problems import ProblemError
from service.api.schemas import documents_body_schema
from service.batches.documents import DocumentInvalid, InputDocument, parse_document
from service.batches.intake import parse_options
from service.config import Settings
from service.store.evidence import evidence_watermark
from service.store.inventories import get_inventory
from service.tagging.engines import Pin, PinnedEngine, shared_engines, tag_pinned

router = APIRouter(prefix="/v1", tags=["disambiguate"])

_BODY = {
    "requestBody": {
        "required": True,
        "content": {"application/json": {"schema": documents_body_schema()}},
    }
}


def _parse(raw: bytes, settings: Settings) -> tuple[str, list[InputDocument], dict[str, Any]]:
    data = decode_json_object(raw, "an object with 'inventory' and 'documents'")
    unknown = sorted(set(data) - {"inventory", "documents", "options"})
    if unknown:
        raise ProblemError(422, f"unknown member(s): {', '.join(unknown)}")
    inventory = data.get("inventory")
    if not isinstance(inventory, str) or not inventory:
        raise ProblemError(422, "'inventory' must name an inventory")
    items = data.get("documents")
    if not isinstance(items, list) or not items:
        raise ProblemError(422, "'documents' must be a non-empty list of documents")
    if len(items) > settings.max_sync_documents:
        raise ProblemError(
            413,
            f"{len(items)} documents; this endpoint takes at most {settings.max_sync_documents} "
            "(submit a batch for more)",
            limit="max_sync_documents",
        )
    documents: list[InputDocument] = []
    seen: set[str] = set()
    for index, item in enumerate(items):
        where: dict[str, Any] = {"index": index, "pointer": f"/documents/{index}"}
        try:
            document = parse_document(item, max_document_bytes=settings.max_document_bytes)
        except DocumentInvalid as exc:
            if exc.limit is not None:
                raise ProblemError(
                    413, f"document {index}: {exc}", limit=exc.limit, **where
                ) from None
            raise ProblemError(
                422, f"document {index}: {exc}", kind="invalid-document", **where
            ) from None
        if document.doc_id in seen:
            raise ProblemError(
                422,
                f"document {index}: id {document.doc_id!r} is used twice",
                kind="duplicate-document-id",
                **where,
            )
        seen.add(document.doc_id)
        documents.append(document)
    return inventory, documents, parse_options(data.get("options"))


def _tag(
    session: Session,
    settings: Settings,
    team_id: int,
    inventory_name: str,
    documents: list[InputDocument],
    options: dict[str, Any],
) -> dict[str, Any]:
    engines = shared_engines()
    inventory = get_inventory(session, team_id, inventory_name)
    name = inventory.name
    pin = Pin(inventory.id, inventory.version, evidence_watermark(session, inventory.id))
    spec = engines.spec(session, settings.database_url, pin.inventory_id, pin.version)
    finder = engines.finder(settings.database_url, spec)
    limit = settings.max_occurrences_per_document
    for index, document in enumerate(documents):
        found = len(finder.find(document.to_engine()))
        if found > limit:
            raise ProblemError(
                422,
                f"document {index}: {document.doc_id!r} has {found} occurrences; "
                f"the limit is {limit}",
                limit="max_occurrences_per_document",
                index=index,
                pointer=f"/documents/{index}",
            )

    def engine() -> PinnedEngine:
        found = engines.engine(session, settings, pin, spec)
        session.rollback()  # hold no transaction (on SQLite: no write lock) while tagging
        return found

    tagged = tag_pinned(
        engine, [d.to_engine() for d in documents], rationale=bool(options["rationale"])
    )
    return {
        "inventory": {"name": name, "version": pin.version},
        "evidence_watermark": pin.watermark,
        "results": [occurrence.to_json() for result in tagged for occurrence in result.occurrences],
    }


@router.post(
    "/disambiguate",
    openapi_extra=_BODY,
    summary="Tag a few short documents now (at most WHICHSENSE_MAX_SYNC_DOCUMENTS)",
)
async def disambiguate(
    request: Request,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(ingest_key),
) -> dict[str, Any]:
    raw = await request.body()
    inventory, documents, options = _parse(raw, settings)
    return await run_in_threadpool(
        _tag, session, settings, caller.team_id, inventory, documents, options
    )
