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
from sqlalchemy.exc import OperationalError
from starlette.exceptions import HTTPException as StarletteHTTPException

from service.api.contract import allowed_methods
from service.inventory.document import InventoryInvalid, InventoryTooLarge
from service.refusal import Refused
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
_KIND_TITLES = {
    "unknown-api-key": "Unknown or revoked API key",
}
"""Titles of problem kinds that share a status with another kind."""


# The batch wing says why it refuses; the API owns what status that is.
REFUSED_STATUS = {
    "malformed": 400,
    "invalid": 422,
    "too_large": 413,
    "unsupported_media": 415,
    "conflict": 409,
}

PROBLEM_SCHEMA: dict[str, Any] = {
    "type": "object",
    "description": "RFC 9457 problem details; extension members carry specifics.",
    "required": ["type", "title", "status", "detail"],
    "properties": {
        "type": {"type": "string", "format": "uri-reference"},
        "title": {"type": "string"},
        "status": {"type": "integer", "minimum": 400, "maximum": 599},
        "detail": {"type": "string"},
        "instance": {"type": "string"},
        "limit": {"type": "string", "description": "the setting whose bound was passed"},
        "errors": {"type": "array", "items": {"type": "object"}},
    },
    "additionalProperties": True,
}

# Which problems an operation can answer with, by what it takes; one table for every route.
_EVERY_ROUTE = (404, 422)
_AUTHENTICATED = (401, 403, 503)
_WITH_BODY = (400, 409, 413, 415)


_TEXT = {"schema": {"type": "string"}}
# Success answers that are not (only) JSON: (method, path) -> media types of the 2xx answer;
# `replace` drops the application/json FastAPI assumes.
_SUCCESS_MEDIA: dict[tuple[str, str], tuple[bool, dict[str, Any]]] = {
    ("get", "/metrics"): (True, {"text/plain": _TEXT}),
    ("get", "/v1/schemas/inventory"): (True, {"application/schema+json": {"schema": {}}}),
    ("get", "/v1/inventories/{name}/document"): (False, {"text/csv": _TEXT}),
    ("get", "/v1/inventories/{name}/versions/{version}"): (False, {"text/csv": _TEXT}),
    ("get", "/v1/batches/{batch_id}/results"): (False, {"application/x-ndjson": _TEXT}),
    ("get", "/v1/batches/{batch_id}/summaries"): (False, {"application/x-ndjson": _TEXT}),
}


def problem_statuses(path: str, method: str, has_body: bool) -> tuple[int, ...]:
    """The problem statuses an operation on `path` declares in OpenAPI."""
    statuses = list(_EVERY_ROUTE)
    if path.startswith("/v1/"):
        statuses += _AUTHENTICATED
    if has_body or method.upper() in ("POST", "PUT", "PATCH"):
        statuses += _WITH_BODY
    return tuple(sorted(set(statuses)))


def declare_responses(schema: dict[str, Any]) -> None:
    """Declare on every operation of an OpenAPI `schema` the problem documents it can return.

    Replaces FastAPI's default 422 (a JSON body of its own shape) with the problem
    document this API actually sends.
    """
    components = schema.setdefault("components", {}).setdefault("schemas", {})
    components["Problem"] = PROBLEM_SCHEMA
    for name in ("HTTPValidationError", "ValidationError"):
        components.pop(name, None)
    content = {MEDIA_TYPE: {"schema": {"$ref": "#/components/schemas/Problem"}}}
    for path, operations in schema.get("paths", {}).items():
        for method, operation in operations.items():
            if not isinstance(operation, dict) or "responses" not in operation:
                continue
            responses = operation["responses"]
            if (method, path) in _SUCCESS_MEDIA:
                replace, media = _SUCCESS_MEDIA[(method, path)]
                success = next(code for code in responses if code.startswith("2"))
                declared = responses[success].setdefault("content", {})
                if replace:
                    declared.clear()
                declared.update(media)
            for status in problem_statuses(path, method, "requestBody" in operation):
                responses[str(status)] = {"description": _TITLES[status][1], "content": content}


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
        "title": title
        if kind is None
        else _KIND_TITLES.get(kind, kind.replace("-", " ").capitalize()),
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


def _allowed_methods(request: Request) -> str:
    """Every documented method at this path (Starlette names only the first route's)."""
    return ", ".join(allowed_methods(request.app, request.url.path))


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
        headers = getattr(exc, "headers", None)
        if exc.status_code == 405:
            detail = f"{request.method} is not allowed on {request.url.path}"
            headers = {**(headers or {}), "Allow": _allowed_methods(request)}
        extra = {"limit": exc.limit_name} if hasattr(exc, "limit_name") else {}
        return problem_response(request, exc.status_code, detail, headers=headers, **extra)

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

    @app.exception_handler(InventoryTooLarge)
    async def _too_large(request: Request, exc: InventoryTooLarge) -> JSONResponse:
        return problem_response(request, 413, str(exc), limit=exc.limit)

    @app.exception_handler(OperationalError)
    async def _busy(request: Request, exc: OperationalError) -> JSONResponse:
        # A lock or statement timeout, or SQLite still locked after busy_timeout: the
        # request was rolled back whole and may be retried.
        log.warning("database busy on %s %s: %s", request.method, request.url.path, exc.orig)
        return problem_response(
            request,
            503,
            "the database is busy (a lock or time limit was reached); nothing was stored, "
            "retry shortly",
            kind="busy",
            headers={"Retry-After": "1"},
        )

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
