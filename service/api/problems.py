"""RFC 9457 problem details for every error the API returns.

Each problem has `type` (a URI naming the kind of problem), `title` (the same
for every occurrence of that type), `status`, `detail` (this occurrence) and
`instance` (the request path); extension members carry specifics such as the
offending fields.
"""

from __future__ import annotations

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from service.batches.errors import Refused
from service.inventory.document import InventoryInvalid
from service.store.errors import Conflict, NotFound

MEDIA_TYPE = "application/problem+json"
TYPE_BASE = "https://whichsense.invalid/problems/"
log = logging.getLogger(__name__)

_TITLES = {
    400: ("bad-request", "The request is malformed"),
    401: ("unauthenticated", "An API key is required"),
    403: ("forbidden", "The API key lacks the needed scope"),
    404: ("not-found", "No such resource"),
    405: ("method-not-allowed", "Method not allowed on this resource"),
    406: ("not-acceptable", "No acceptable representation"),
    409: ("conflict", "The request conflicts with stored state"),
    413: ("too-large", "The request exceeds a size limit"),
    415: ("unsupported-media-type", "Unsupported media type"),
    422: ("invalid", "The request content is invalid"),
    429: ("too-many-requests", "Too many requests"),
    500: ("internal", "Internal server error"),
    503: ("unavailable", "The service is not ready"),
}


# The batch wing says why it refuses; the API owns what status that is.
REFUSED_STATUS = {
    "malformed": 400,
    "invalid": 422,
    "too_large": 413,
    "unsupported_media": 415,
    "conflict": 409,
}


class ProblemError(Exception):
    """Raise anywhere in a route to answer with a problem document."""

    def __init__(
        self,
        status: int,
        detail: str,
        *,
        kind: str | None = None,
        headers: dict[str, str] | None = None,
        **extra: Any,
    ):
        self.status = status
        self.detail = detail
        self.kind = kind
        self.headers = headers
        self.extra = extra
        super().__init__(detail)


def problem_response(
    request: Request | None,
    status: int,
    detail: str,
    *,
    kind: str | None = None,
    headers: dict[str, str] | None = None,
    **extra: Any,
) -> JSONResponse:
    slug, title = _TITLES.get(status, ("error", "Error"))
    body: dict[str, Any] = {
        "type": TYPE_BASE + (kind or slug),
        "title": title if kind is None else kind.replace("-", " ").capitalize(),
        "status": status,
        "detail": detail,
    }
    if request is not None:
        body["instance"] = request.url.path
    body.update(extra)
    return JSONResponse(body, status_code=status, media_type=MEDIA_TYPE, headers=headers)


def _validation_errors(exc: RequestValidationError) -> list[dict[str, Any]]:
    errors = []
    for error in exc.errors():
        location = [str(part) for part in error.get("loc", ())]
        errors.append(
            {
                "pointer": "/" + "/".join(location[1:]) if location else "/",
                "location": location[0] if location else "body",
                "detail": error.get("msg", "invalid"),
            }
        )
    return errors


def install_problem_handlers(app: FastAPI) -> None:
    """Route every error (ours, FastAPI's, Starlette's, unexpected) to a problem document."""

    @app.exception_handler(ProblemError)
    async def _problem(request: Request, exc: ProblemError) -> JSONResponse:
        return problem_response(
            request, exc.status, exc.detail, kind=exc.kind, headers=exc.headers, **exc.extra
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        detail = exc.detail if isinstance(exc.detail, str) else str(exc.detail)
        if exc.status_code == 404 and detail == "Not Found":
            detail = f"no resource at {request.url.path}"
        if exc.status_code == 405:
            detail = f"{request.method} is not allowed on {request.url.path}"
        extra = {"limit": exc.limit_name} if hasattr(exc, "limit_name") else {}
        return problem_response(
            request, exc.status_code, detail, headers=getattr(exc, "headers", None), **extra
        )

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError) -> JSONResponse:
        errors = _validation_errors(exc)
        malformed = any(e["detail"].startswith("JSON decode error") for e in errors)
        if malformed:
            return problem_response(
                request, 400, "the body is not valid JSON", kind="malformed-json", errors=errors
            )
        return problem_response(request, 422, f"{len(errors)} field(s) are invalid", errors=errors)

    @app.exception_handler(InventoryInvalid)
    async def _inventory(request: Request, exc: InventoryInvalid) -> JSONResponse:
        return problem_response(
            request,
            422,
            str(exc),
            kind="invalid-inventory",
            errors=[p.to_json() for p in exc.problems],
        )

    @app.exception_handler(Refused)
    async def _refused(request: Request, exc: Refused) -> JSONResponse:
        status = REFUSED_STATUS[exc.reason]
        return problem_response(request, status, exc.detail, kind=exc.kind, **exc.extra)

    @app.exception_handler(NotFound)
    async def _not_found(request: Request, exc: NotFound) -> JSONResponse:
        return problem_response(request, 404, str(exc))

    @app.exception_handler(Conflict)
    async def _conflict(request: Request, exc: Conflict) -> JSONResponse:
        return problem_response(request, 409, str(exc))

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unhandled error on %s %s", request.method, request.url.path)
        return problem_response(request, 500, "an unexpected error occurred; it has been logged")
