"""The team's audit log for its admins: newest first in cursor pages, or all of it as
JSON Lines with `Accept: application/x-ndjson`."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from fastapi import APIRouter, Depends, Query, Request, Response
from fastapi.responses import JSONResponse
from sqlalchemy.orm import Session

from service.api.deps import Caller, admin_key, get_session
from service.api.problems import ProblemError
from service.api.streaming import stream_pages, wants_ndjson
from service.batches.cursors import CursorInvalid, decode_cursor, encode_cursor
from service.store.audit import audit_json, audit_page

router = APIRouter(prefix="/v1", tags=["audit"])
PAGE_DEFAULT = 100
PAGE_MAX = 1000
STREAM_PAGE = 500


@router.get(
    "/audit",
    summary="Who did what when in this team: key creation and revocation, inventory edits, "
    "purges (JSON pages, or JSON Lines with Accept: application/x-ndjson)",
)
def list_audit(
    request: Request,
    action: str | None = Query(default=None, max_length=64),
    since: datetime | None = Query(default=None, description="RFC 3339 date-time"),
    limit: int = Query(default=PAGE_DEFAULT, ge=1, le=PAGE_MAX),
    cursor: str | None = None,
    session: Session = Depends(get_session),
    caller: Caller = Depends(admin_key),
) -> Response:
    if since is not None and since.tzinfo is None:
        since = since.replace(tzinfo=UTC)
    try:
        before = decode_cursor(cursor, 1)[0] if cursor is not None else None
    except CursorInvalid as exc:
        raise ProblemError(422, str(exc), kind="invalid-cursor") from None
    team = caller.team_id

    def page(s: Session, after: Any, size: int = STREAM_PAGE) -> tuple[list[Any], Any]:
        rows, following = audit_page(s, team, before=after, limit=size, action=action, since=since)
        return [audit_json(row) for row in rows], following

    if wants_ndjson(request):
        session.rollback()
        return stream_pages(request.app.state.sessions, page, before)
    rows, following = page(session, before, limit)
    return JSONResponse(
        {
            "events": rows,
            "next_cursor": encode_cursor(following) if following is not None else None,
        }
    )
