"""Batches over HTTP: a thin layer over the batch wing (`service.batches`).

Submitting needs scope ingest; reading needs any key of the batch's team (another
team's batch is 404, like a missing one). `Idempotency-Key` makes a retried
submission safe: the same key with the same body (and query) answers 200 with
the batch first created; with a different body, 409. The wing's `Refused` errors
become problem documents in `service.api.problems`.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any, Literal

from fastapi import APIRouter, Depends, Header, Query, Request, Response
from fastapi.responses import JSONResponse
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from service.api import queue_metrics
from service.api.deps import Caller, any_key, get_session, get_settings_dep, ingest_key
from service.api.problems import ProblemError
from service.api.schemas import documents_body_schema
from service.api.streaming import NDJSON, stream_pages, wants_ndjson
from service.batches import repository as batches
from service.batches import results as batch_results
from service.batches.cursors import (
    CursorInvalid,
    decode_cursor,
    decode_listing_cursor,
    encode_cursor,
    encode_listing_cursor,
)
from service.batches.intake import Intake, Submission, check_idempotency_key
from service.config import Settings
from service.store.clock import database_now
from service.store.models import BATCH_STATES, Batch

router = APIRouter(prefix="/v1", tags=["batches"])

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


def _path(request: Request, batch_id: str) -> str:
    return request.app.url_path_for("get_batch", batch_id=batch_id)


def _status(session: Session, request: Request, batch: Batch) -> dict[str, Any]:
    return batches.describe(session, batch, _path(request, batch.id))


def _status_after_commit(request: Request, batch: Batch) -> dict[str, Any]:
    """The status document read in a read-only session: on SQLite, re-using the
    submission's session would queue for the write lock a second time."""
    with request.app.state.read_sessions() as reads:
        return _status(reads, request, batch)


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
    root = str(request.base_url).rstrip("/")
    submission = Submission(
        body=request.stream(),
        media=request.headers.get("content-type", ""),
        query=request.query_params.multi_items(),
        batch_url=lambda batch_id: root + _path(request, batch_id),
    )
    intake = Intake(
        submission,
        session,
        settings,
        key_id=caller.key_id,
        team_id=caller.team_id,
        idempotency_key=check_idempotency_key(idempotency_key),
    )
    submitted = await intake.submit()
    location = {"Location": _path(request, submitted.batch.id)}
    body = await run_in_threadpool(_status_after_commit, request, submitted.batch)
    if submitted.replayed:
        replayed = {**location, "Idempotent-Replayed": "true"}
        return JSONResponse(body, status_code=200, headers=replayed)
    queue_metrics.SUBMITTED.labels("ndjson" if intake.media != "application/json" else "json").inc()
    return JSONResponse(body, status_code=202, headers=location)


@router.get("/batches", summary="The team's batches, newest first (cursor pages)")
def list_batches(
    request: Request,
    state: Literal[BATCH_STATES] | None = None,  # type: ignore[valid-type]
    inventory: str | None = Query(default=None, max_length=64),
    created_after: datetime | None = Query(
        default=None, description="RFC 3339 date-time; only batches created after it"
    ),
    limit: int = Query(default=PAGE_DEFAULT, ge=1, le=PAGE_MAX),
    cursor: str | None = None,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> dict[str, Any]:
    try:
        before = decode_listing_cursor(cursor) if cursor is not None else None
    except CursorInvalid as exc:
        raise ProblemError(422, str(exc), kind="invalid-cursor") from None
    if created_after is not None and created_after.tzinfo is None:
        created_after = created_after.replace(tzinfo=UTC)
    rows, following = batches.list_batches(
        session,
        caller.team_id,
        state=state,
        inventory=inventory,
        created_after=created_after,
        before=before,
        limit=limit,
    )
    next_cursor = encode_listing_cursor(*following) if following is not None else None
    return {
        "batches": [_status(session, request, batch) for batch in rows],
        "next_cursor": next_cursor,
    }


@router.get("/batches/{batch_id}", summary="State, counts, progress, timings, webhook attempts")
def get_batch(
    batch_id: str,
    request: Request,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> dict[str, Any]:
    return _status(session, request, batches.get_batch(session, caller.team_id, batch_id))


@router.delete(
    "/batches/{batch_id}",
    summary="Cancel: chunks not yet done are not processed; results so far stay. "
    "With ?purge=true also delete its documents and results now (counts stay)",
)
def cancel_batch(
    batch_id: str,
    request: Request,
    purge: bool = False,
    session: Session = Depends(get_session),
    caller: Caller = Depends(ingest_key),
) -> dict[str, Any]:
    now = database_now(session)
    if purge:
        batch = batches.purge_batch(session, caller.team_id, batch_id, now, key_id=caller.key_id)
    else:
        batch = batches.cancel_batch(session, caller.team_id, batch_id, now)
    session.commit()
    return _status(session, request, batch)


def _cursor(cursor: str | None, size: int) -> tuple[int, ...] | None:
    if cursor is None:
        return None
    try:
        return decode_cursor(cursor, size)
    except CursorInvalid as exc:
        raise ProblemError(422, str(exc), kind="invalid-cursor") from None


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
    caller: Caller = Depends(any_key),
) -> Response:
    batch = batches.get_batch(session, caller.team_id, batch_id)
    chosen = batch_results.ResultFilter(status, term, sense, min_confidence, max_confidence)
    after = _cursor(cursor, 2)
    if wants_ndjson(request):
        session.expunge(batch)  # keep its loaded values: the pages read it in other sessions
        session.rollback()

        def page(s: Session, position: Any) -> tuple[list[Any], Any]:
            return batch_results.results_page(s, batch, chosen, after=position, limit=STREAM_PAGE)

        return stream_pages(request.app.state.read_sessions, page, after)
    start = (after[0], after[1]) if after is not None else None
    rows, following = batch_results.results_page(session, batch, chosen, after=start, limit=limit)
    return JSONResponse(
        {
            "results": rows,
            "next_cursor": encode_cursor(*following) if following is not None else None,
        }
    )


INCLUDE_DOUBTFUL = Query(
    default=False,
    description="Also list senses found only in occurrences sent to review, marked `doubtful` "
    "and kept out of `sense_ids` and `tags` (they go to `doubtful_sense_ids`, `doubtful_tags`)",
)


@router.get(
    "/batches/{batch_id}/summaries",
    summary="Per-document summaries (senses found per term, counts, best confidence)",
)
def list_summaries(
    batch_id: str,
    request: Request,
    limit: int = Query(default=PAGE_DEFAULT, ge=1, le=PAGE_MAX),
    cursor: str | None = None,
    include_doubtful: bool = INCLUDE_DOUBTFUL,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> Response:
    batch = batches.get_batch(session, caller.team_id, batch_id)
    tags = batch_results.batch_tags(session, batch)
    after = _cursor(cursor, 1)
    start = after[0] if after is not None else None

    def page(s: Session, position: Any, size: int = STREAM_PAGE) -> tuple[list[Any], Any]:
        documents, following = batch_results.documents_page(s, batch, after=position, limit=size)
        summaries = batch_results.summaries(
            s, batch, documents, tags, include_doubtful=include_doubtful
        )
        return summaries, following

    if wants_ndjson(request):
        session.expunge(batch)  # keep its loaded values: the pages read it in other sessions
        session.rollback()
        return stream_pages(request.app.state.read_sessions, page, start)
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
    include_doubtful: bool = INCLUDE_DOUBTFUL,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> dict[str, Any]:
    batch = batches.get_batch(session, caller.team_id, batch_id)
    document = batch_results.find_document(session, batch, document_id)
    tags = batch_results.batch_tags(session, batch)
    return batch_results.summaries(
        session, batch, [document], tags, include_doubtful=include_doubtful
    )[0]


@router.get("/batches/{batch_id}/failures", summary="Documents that failed, with their error")
def list_failures(
    batch_id: str,
    limit: int = Query(default=PAGE_DEFAULT, ge=1, le=PAGE_MAX),
    cursor: str | None = None,
    session: Session = Depends(get_session),
    caller: Caller = Depends(any_key),
) -> dict[str, Any]:
    batch = batches.get_batch(session, caller.team_id, batch_id)
    after = _cursor(cursor, 1)
    documents, following = batch_results.documents_page(
        session, batch, after=after[0] if after else None, limit=limit, state="failed"
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
