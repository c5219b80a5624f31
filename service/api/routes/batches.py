"""Batches: submit (JSON or streamed NDJSON), follow, cancel, and read results.

Submitting needs scope ingest; reading needs any key. `Idempotency-Key` makes a
retried submission safe: the same key with the same body (and query) answers
200 with the batch first created; with a different body, 409.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from typing import Any, Literal

from fastapi import APIRouter, Depends, Header, Query, Request, Response
from fastapi.responses import JSONResponse, StreamingResponse
from sqlalchemy.orm import Session, sessionmaker
from starlette.concurrency import run_in_threadpool

from service.api import queue_metrics
from service.api.deps import Caller, any_key, get_session, get_settings_dep, ingest_key
from service.api.intake import IdempotencyClash, Intake
from service.api.problems import ProblemError
from service.api.schemas import documents_body_schema
from service.batches.cursors import CursorInvalid, decode_cursor, encode_cursor
from service.batches.status import status_document
from service.config import Settings
from service.store import batch_results, batches
from service.store.clock import database_now
from service.store.inventories import get_inventory, version_document
from service.store.models import Batch

router = APIRouter(prefix="/v1", tags=["batches"])
queue_metrics.install()

NDJSON = "application/x-ndjson"
PAGE_DEFAULT = 100
PAGE_MAX = 1000
STREAM_PAGE = 500

_SUBMIT_BODY = {
    "requestBody": {
        "required": True,
        "content": {
            "application/json": {
                "schema": documents_body_schema(callback_url={"type": "string", "format": "uri"})
            },
            NDJSON: {
                "schema": {
                    "type": "string",
                    "description": "One JSON object per line: a header line "
                    '{"inventory", "callback_url"?, "options"?} unless ?inventory= is given, '
                    "then one document per line.",
                }
            },
        },
    }
}


def _status(session: Session, batch: Batch) -> dict[str, Any]:
    return status_document(
        batch, batches.batch_counts(session, batch), batches.webhook_attempts(session, batch.id)
    )


def _check_idempotency_key(value: str | None) -> str | None:
    if value is None:
        return None
    if not 1 <= len(value) <= 200 or not value.isprintable() or not value.isascii():
        raise ProblemError(422, "Idempotency-Key must be 1 to 200 printable ASCII characters")
    return value


async def _replay(intake: Intake, session: Session, existing: Batch) -> JSONResponse:
    digest = await intake.drain()
    if digest != existing.request_digest:
        raise ProblemError(
            409,
            "this Idempotency-Key was used with a different request body",
            kind="idempotency-key-reused",
            batch_id=existing.id,
        )
    body = await run_in_threadpool(_status, session, existing)
    return JSONResponse(
        body,
        status_code=200,
        headers={"Location": f"/v1/batches/{existing.id}", "Idempotent-Replayed": "true"},
    )


@router.post(
    "/batches",
    status_code=202,
    openapi_extra=_SUBMIT_BODY,
    summary="Submit documents for tagging (JSON, or NDJSON streamed to the database)",
    responses={200: {"description": "Idempotent replay of an earlier submission"}},
)
async def submit_batch(
    request: Request,
    inventory: str | None = Query(default=None, description="NDJSON only: the inventory"),
    callback_url: str | None = Query(default=None, description="NDJSON only: webhook URL"),
    idempotency_key: str | None = Header(default=None),
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    caller: Caller = Depends(ingest_key),
) -> JSONResponse:
    key = _check_idempotency_key(idempotency_key)
    intake = Intake(request, session, settings, key_id=caller.key_id, idempotency_key=key)
    await intake.spool_for_single_writer()
    if key is not None:
        existing = await run_in_threadpool(
            batches.find_by_idempotency_key, session, caller.key_id, key
        )
        if existing is not None:
            return await _replay(intake, session, existing)
    try:
        batch = await intake.read()
        await run_in_threadpool(session.commit)
    except IdempotencyClash:
        existing = await run_in_threadpool(
            batches.find_by_idempotency_key, session, caller.key_id, key or ""
        )
        if existing is None:
            raise ProblemError(
                409, "a submission with this Idempotency-Key is in progress"
            ) from None
        return await _replay(intake, session, existing)
    except BaseException:
        await run_in_threadpool(session.rollback)
        raise
    queue_metrics.SUBMITTED.labels("ndjson" if intake.media != "application/json" else "json").inc()
    body = await run_in_threadpool(_status, session, batch)
    return JSONResponse(body, status_code=202, headers={"Location": f"/v1/batches/{batch.id}"})


@router.get("/batches/{batch_id}", summary="State, counts, progress, timings, webhook attempts")
def get_batch(
    batch_id: str, session: Session = Depends(get_session), _caller: Any = Depends(any_key)
) -> dict[str, Any]:
    return _status(session, batches.get_batch(session, batch_id))


@router.delete(
    "/batches/{batch_id}",
    summary="Cancel: chunks not yet done are not processed; results so far stay",
)
def cancel_batch(
    batch_id: str, session: Session = Depends(get_session), _caller: Any = Depends(ingest_key)
) -> dict[str, Any]:
    batch = batches.cancel_batch(session, batch_id, database_now(session))
    session.commit()
    return _status(session, batch)


def _cursor(cursor: str | None, size: int) -> tuple[int, ...] | None:
    if cursor is None:
        return None
    try:
        return decode_cursor(cursor, size)
    except CursorInvalid as exc:
        raise ProblemError(422, str(exc), kind="invalid-cursor") from None


def _wants_ndjson(request: Request) -> bool:
    return NDJSON in request.headers.get("accept", "")


def _stream(
    sessions: sessionmaker[Session],
    page: Callable[[Session, Any], tuple[list[Any], Any]],
    start: Any,
) -> StreamingResponse:
    """NDJSON of every row from `start` on, one short transaction per page: a slow
    reader never holds a database lock or connection between pages."""

    def lines() -> Iterator[bytes]:
        after = start
        while True:
            with sessions() as session:
                rows, after = page(session, after)
                session.rollback()
            for row in rows:
                yield json.dumps(row, ensure_ascii=False).encode("utf-8") + b"\n"
            if after is None:
                return

    return StreamingResponse(lines(), media_type=NDJSON)


@router.get(
    "/batches/{batch_id}/results",
    summary="Results (cursor pages as JSON, or everything as NDJSON with Accept: "
    "application/x-ndjson)",
)
def list_results(
    batch_id: str,
    request: Request,
    status: Literal["assigned", "review", "abstained"] | None = None,
    term: str | None = None,
    sense: str | None = None,
    min_confidence: float | None = Query(default=None, ge=0, le=1),
    max_confidence: float | None = Query(default=None, ge=0, le=1),
    limit: int = Query(default=PAGE_DEFAULT, ge=1, le=PAGE_MAX),
    cursor: str | None = None,
    session: Session = Depends(get_session),
    _caller: Any = Depends(any_key),
) -> Response:
    batches.get_batch(session, batch_id)
    chosen = batch_results.ResultFilter(status, term, sense, min_confidence, max_confidence)
    after = _cursor(cursor, 2)
    if _wants_ndjson(request):
        session.rollback()

        def page(s: Session, position: Any) -> tuple[list[Any], Any]:
            return batch_results.results_page(
                s, batch_id, chosen, after=position, limit=STREAM_PAGE
            )

        return _stream(request.app.state.read_sessions, page, after)
    rows, following = batch_results.results_page(
        session,
        batch_id,
        chosen,
        after=after,
        limit=limit,  # type: ignore[arg-type]
    )
    return JSONResponse(
        {
            "results": rows,
            "next_cursor": encode_cursor(*following) if following is not None else None,
        }
    )


def _tags(session: Session, batch: Batch) -> dict[str, list[str]]:
    inventory = get_inventory(session, batch.inventory_name)
    return batch_results.sense_tags(version_document(session, inventory, batch.inventory_version))


@router.get(
    "/batches/{batch_id}/summaries",
    summary="Per-document summaries (senses found per term, counts, best confidence)",
)
def list_summaries(
    batch_id: str,
    request: Request,
    limit: int = Query(default=PAGE_DEFAULT, ge=1, le=PAGE_MAX),
    cursor: str | None = None,
    session: Session = Depends(get_session),
    _caller: Any = Depends(any_key),
) -> Response:
    batch = batches.get_batch(session, batch_id)
    tags = _tags(session, batch)
    after = _cursor(cursor, 1)
    start = after[0] if after is not None else None

    def page(s: Session, position: Any, size: int = STREAM_PAGE) -> tuple[list[Any], Any]:
        documents, following = batch_results.documents_page(s, batch_id, after=position, limit=size)
        return batch_results.summaries(s, batch, documents, tags), following

    if _wants_ndjson(request):
        session.rollback()
        return _stream(request.app.state.read_sessions, page, start)
    rows, following = page(session, start, limit)
    return JSONResponse(
        {
            "summaries": rows,
            "next_cursor": encode_cursor(following) if following is not None else None,
        }
    )


@router.get(
    "/batches/{batch_id}/documents/{document_id}/summary",
    summary="One document's summary: per term, the senses found, counts, best confidence",
)
def document_summary(
    batch_id: str,
    document_id: str,
    session: Session = Depends(get_session),
    _caller: Any = Depends(any_key),
) -> dict[str, Any]:
    batch = batches.get_batch(session, batch_id)
    document = batch_results.find_document(session, batch_id, document_id)
    return batch_results.summaries(session, batch, [document], _tags(session, batch))[0]


@router.get("/batches/{batch_id}/failures", summary="Documents that failed, with their error")
def list_failures(
    batch_id: str,
    limit: int = Query(default=PAGE_DEFAULT, ge=1, le=PAGE_MAX),
    cursor: str | None = None,
    session: Session = Depends(get_session),
    _caller: Any = Depends(any_key),
) -> dict[str, Any]:
    batches.get_batch(session, batch_id)
    after = _cursor(cursor, 1)
    documents, following = batch_results.documents_page(
        session, batch_id, after=after[0] if after else None, limit=limit, state="failed"
    )
    return {
        "failures": [
            {
                "document_id": d.document_id,
                "position": d.position,
                "attempts": d.attempts,
                "error": d.error,
            }
            for d in documents
        ],
        "next_cursor": encode_cursor(following) if following is not None else None,
    }
