"""NDJSON answers read page by page, one short transaction per page."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from typing import Any

from fastapi import Request
from fastapi.responses import StreamingResponse
from sqlalchemy.orm import Session, sessionmaker

NDJSON = "application/x-ndjson"


def wants_ndjson(request: Request) -> bool:
    return NDJSON in request.headers.get("accept", "")


def stream_pages(
    sessions: sessionmaker[Session],
    page: Callable[[Session, Any], tuple[list[Any], Any]],
    start: Any,
) -> StreamingResponse:
    """NDJSON of every row from `start` on: a slow reader never holds a database lock or
    connection between pages. `page(session, after)` gives rows and the next key."""

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
