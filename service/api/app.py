"""The FastAPI application: routers, problem handlers, limits, offline docs.

`create_app` refuses to start on an unmigrated database so a deployment never
serves from a schema it does not understand.
"""

from __future__ import annotations

import json
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Any

import swagger_ui_bundle
from fastapi import FastAPI
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.openapi.utils import get_openapi
from fastapi.responses import HTMLResponse
from fastapi.staticfiles import StaticFiles
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service import __version__
from service.api import metrics
from service.api.problems import install_problem_handlers, problem_response
from service.api.routes import (
    audit,
    batches,
    disambiguate,
    evidence,
    health,
    inventories,
    review,
)
from service.config import Settings, get_settings
from service.inventory.document import inventory_schema
from service.store.database import require_migrated, session_factory
from service.web import pages

DESCRIPTION = (
    "Tells which sense of an ambiguous term each occurrence in your documents carries. "
    "Errors are RFC 9457 problem documents; every /v1 route needs "
    "`Authorization: Bearer <API key>`."
)


class BodyTooLarge(StarletteHTTPException):
    """Raised from `receive` once a body passes the configured byte limit."""

    def __init__(self, limit: int):
        super().__init__(
            413, f"the request body exceeds {limit} bytes (WHICHSENSE_MAX_REQUEST_BYTES)"
        )
        self.limit_name = "max_request_bytes"


class BodyLimit:
    """ASGI middleware: 413 for bodies over `limit`, declared or streamed."""

    def __init__(self, app: ASGIApp, limit: int):
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope["headers"]).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await self._refuse(scope, receive, send)
            return
        seen = 0
        started = False

        async def counting_receive() -> Message:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    raise BodyTooLarge(self.limit)
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal started
            started = started or message["type"] == "http.response.start"
            await send(message)

        try:
            await self.app(scope, counting_receive, tracking_send)
        except BodyTooLarge:
            if not started:
                await self._refuse(scope, receive, send)

    async def _refuse(self, scope: Scope, receive: Receive, send: Send) -> None:
        refusal = BodyTooLarge(self.limit)
        response = problem_response(
            None, 413, refusal.detail, limit=refusal.limit_name, instance=scope.get("path", "")
        )
        await response(scope, receive, send)


def _openapi_components(schema: dict[str, Any]) -> dict[str, Any]:
    """The inventory JSON Schema split into OpenAPI components (refs rewritten)."""
    text = json.dumps(schema).replace('"#/$defs/', '"#/components/schemas/InventoryDocument_')
    rewritten = json.loads(text)
    components = {
        f"InventoryDocument_{name}": body for name, body in rewritten.pop("$defs").items()
    }
    rewritten.pop("$schema", None)
    rewritten.pop("$id", None)
    components["InventoryDocument"] = rewritten
    return components


def create_app(settings: Settings | None = None, *, check_migrated: bool = True) -> FastAPI:
    """Build the API for `settings` (default: from the environment)."""
    settings = settings or get_settings()

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        if check_migrated:
            require_migrated(settings.database_url)
        yield

    app = FastAPI(
        title="whichsense",
        version=__version__,
        description=DESCRIPTION,
        docs_url=None,
        redoc_url=None,
        lifespan=lifespan,
    )
    app.state.settings = settings
    app.state.sessions = session_factory(settings.database_url)
    install_problem_handlers(app)
    app.add_middleware(BodyLimit, limit=settings.max_request_bytes)
    app.add_middleware(metrics.RequestMetrics)
    app.include_router(health.router)
    app.include_router(metrics.router)
    app.include_router(inventories.router)
    app.include_router(evidence.router)
    app.include_router(batches.router)
    app.include_router(disambiguate.router)
    app.include_router(audit.router)
    app.include_router(review.router)
    pages.install(app)
    _mount_docs(app)
    return app


def _mount_docs(app: FastAPI) -> None:
    """Swagger UI from the installed bundle: no CDN, works air-gapped."""
    app.mount(
        "/docs/assets",
        StaticFiles(directory=swagger_ui_bundle.swagger_ui_path),
        name="docs-assets",
    )

    @app.get("/docs", include_in_schema=False)
    def docs() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url="/openapi.json",
            title="whichsense API",
            swagger_js_url="/docs/assets/swagger-ui-bundle.js",
            swagger_css_url="/docs/assets/swagger-ui.css",
            swagger_favicon_url="/docs/assets/favicon-32x32.png",
        )

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            schema = get_openapi(
                title=app.title,
                version=app.version,
                description=app.description,
                routes=app.routes,
            )
            schema.setdefault("components", {}).setdefault("schemas", {}).update(
                _openapi_components(inventory_schema())
            )
            app.openapi_schema = schema
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]
